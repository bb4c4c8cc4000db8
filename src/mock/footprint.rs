//! Survey footprints on the sphere: a spherical cap or a simple polygon with great-circle edges.
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// Angular footprint of a survey. Angles in degrees (RA, Dec).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Footprint {
    /// All directions within `radius_deg` of (ra_deg, dec_deg).
    Cap {
        ra_deg: f64,
        dec_deg: f64,
        radius_deg: f64,
    },
    /// A simple (non self-intersecting) polygon, vertices in order (either orientation), edges
    /// are the shorter great-circle arcs between consecutive vertices (closing edge implied).
    /// It must lie inside an open hemisphere: the interior is the part that does not contain
    /// the direction opposite to the vertices' mean.
    Polygon { vertices: Vec<(f64, f64)> },
}

pub(crate) type V3 = [f64; 3];

#[inline]
pub(crate) fn dot(a: &V3, b: &V3) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}
#[inline]
fn cross(a: &V3, b: &V3) -> V3 {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}
#[inline]
fn normalize(a: V3) -> V3 {
    let r = dot(&a, &a).sqrt();
    [a[0] / r, a[1] / r, a[2] / r]
}

/// Unit vector for (RA, Dec) in degrees.
#[inline]
pub(crate) fn unit_vector(ra_deg: f64, dec_deg: f64) -> V3 {
    let (ra, dec) = (ra_deg.to_radians(), dec_deg.to_radians());
    [dec.cos() * ra.cos(), dec.cos() * ra.sin(), dec.sin()]
}

/// (RA in [0, 360), Dec) in degrees of a non-zero vector.
#[inline]
pub(crate) fn ra_dec(p: &V3) -> (f64, f64) {
    let r = dot(p, p).sqrt();
    let mut ra = p[1].atan2(p[0]).to_degrees();
    if ra < 0.0 {
        ra += 360.0;
    }
    if ra >= 360.0 {
        ra -= 360.0;
    }
    let dec = (p[2] / r).clamp(-1.0, 1.0).asin().to_degrees();
    (ra, dec)
}

/// Two unit vectors completing `c` to an orthonormal basis.
fn tangent_basis(c: &V3) -> (V3, V3) {
    let helper = if c[2].abs() < 0.9 {
        [0.0, 0.0, 1.0]
    } else {
        [1.0, 0.0, 0.0]
    };
    let e1 = normalize(cross(&helper, c));
    let e2 = cross(c, &e1);
    (e1, e2)
}

/// A validated footprint prepared for fast tests.
#[derive(Debug, Clone)]
pub(crate) struct Region {
    /// Bounding cap: every footprint direction has dot(center, p) >= cos_bound.
    pub center: V3,
    pub bound_radius: f64,
    e1: V3,
    e2: V3,
    shape: Shape,
}

#[derive(Debug, Clone)]
enum Shape {
    Cap {
        cos_r: f64,
    },
    /// Gnomonic projection about `center`: great circles map to straight lines, so the
    /// planar even-odd test on the projected vertices is exact for great-circle edges.
    Polygon {
        verts: Vec<V3>,
        proj: Vec<(f64, f64)>,
    },
}

impl Region {
    pub fn new(fp: &Footprint) -> Result<Self> {
        match fp {
            Footprint::Cap {
                ra_deg,
                dec_deg,
                radius_deg,
            } => {
                check_angle("cap", *ra_deg, *dec_deg)?;
                if !(radius_deg.is_finite() && *radius_deg > 0.0 && *radius_deg <= 180.0) {
                    return Err(Error::input(format!(
                        "footprint cap: radius_deg = {radius_deg} must be in (0, 180]"
                    )));
                }
                let center = unit_vector(*ra_deg, *dec_deg);
                let (e1, e2) = tangent_basis(&center);
                let r = radius_deg.to_radians();
                Ok(Region {
                    center,
                    bound_radius: r,
                    e1,
                    e2,
                    shape: Shape::Cap { cos_r: r.cos() },
                })
            }
            Footprint::Polygon { vertices } => {
                if vertices.len() < 3 {
                    return Err(Error::input(format!(
                        "footprint polygon: {} vertices given, at least 3 needed",
                        vertices.len()
                    )));
                }
                for (k, (ra, dec)) in vertices.iter().enumerate() {
                    check_angle(&format!("polygon vertex {k}"), *ra, *dec)?;
                }
                let verts: Vec<V3> = vertices.iter().map(|&(r, d)| unit_vector(r, d)).collect();
                let sum: V3 = std::array::from_fn(|a| verts.iter().map(|v| v[a]).sum());
                if dot(&sum, &sum).sqrt() < 1e-9 {
                    return Err(Error::input(
                        "footprint polygon: vertices do not lie in one hemisphere",
                    ));
                }
                let center = normalize(sum);
                for (k, v) in verts.iter().enumerate() {
                    if dot(v, &center) < 1e-6 {
                        return Err(Error::input(format!(
                            "footprint polygon: vertex {k} {:?} is 90 deg or more from the \
                             vertices' mean direction; the polygon must fit in a hemisphere",
                            vertices[k]
                        )));
                    }
                    let w = &verts[(k + 1) % verts.len()];
                    if dot(v, w) > 1.0 - 1e-15 {
                        return Err(Error::input(format!(
                            "footprint polygon: vertices {k} and {} coincide",
                            (k + 1) % verts.len()
                        )));
                    }
                }
                let (e1, e2) = tangent_basis(&center);
                let proj = verts
                    .iter()
                    .map(|v| {
                        let s = dot(v, &center);
                        (dot(v, &e1) / s, dot(v, &e2) / s)
                    })
                    .collect();
                // Bounding radius: the angular distance from `center` has no local maximum
                // inside the polygon (only at the antipode), so it peaks on the edges; sample
                // them and add the sample spacing (distance is 1-Lipschitz along an arc).
                let mut bound: f64 = 0.0;
                let mut max_arc: f64 = 0.0;
                const SAMPLES: usize = 256;
                for k in 0..verts.len() {
                    let (a, b) = (&verts[k], &verts[(k + 1) % verts.len()]);
                    max_arc = max_arc.max(dot(a, b).clamp(-1.0, 1.0).acos());
                    for s in 0..=SAMPLES {
                        let t = s as f64 / SAMPLES as f64;
                        let p = normalize([
                            (1.0 - t) * a[0] + t * b[0],
                            (1.0 - t) * a[1] + t * b[1],
                            (1.0 - t) * a[2] + t * b[2],
                        ]);
                        bound = bound.max(dot(&p, &center).clamp(-1.0, 1.0).acos());
                    }
                }
                bound = (bound + 4.0 * max_arc / SAMPLES as f64).min(PI / 2.0);
                let region = Region {
                    center,
                    bound_radius: bound,
                    e1,
                    e2,
                    shape: Shape::Polygon { verts, proj },
                };
                if region.solid_angle() < 1e-12 {
                    return Err(Error::input("footprint polygon: zero area"));
                }
                Ok(region)
            }
        }
    }

    /// Whether the unit vector `p` lies in the footprint.
    #[inline]
    pub fn contains(&self, p: &V3) -> bool {
        let s = dot(p, &self.center);
        match &self.shape {
            Shape::Cap { cos_r } => s >= *cos_r,
            Shape::Polygon { proj, .. } => {
                if s <= 0.0 {
                    return false;
                }
                let (x, y) = (dot(p, &self.e1) / s, dot(p, &self.e2) / s);
                let mut inside = false;
                let m = proj.len();
                let mut j = m - 1;
                for i in 0..m {
                    let (xi, yi) = proj[i];
                    let (xj, yj) = proj[j];
                    if (yi > y) != (yj > y) && x < (xj - xi) * (y - yi) / (yj - yi) + xi {
                        inside = !inside;
                    }
                    j = i;
                }
                inside
            }
        }
    }

    /// Solid angle in steradians.
    pub fn solid_angle(&self) -> f64 {
        match &self.shape {
            Shape::Cap { cos_r } => 2.0 * PI * (1.0 - cos_r),
            Shape::Polygon { verts, .. } => {
                // Signed fan of geodesic triangles (center, v_k, v_k+1); each triangle's solid
                // angle from Van Oosterom & Strackee 1983 (IEEE Trans. Biomed. Eng. 30, 125).
                let c = &self.center;
                let mut total = 0.0;
                for k in 0..verts.len() {
                    let (a, b) = (&verts[k], &verts[(k + 1) % verts.len()]);
                    let num = dot(c, &cross(a, b));
                    let den = 1.0 + dot(c, a) + dot(a, b) + dot(b, c);
                    total += 2.0 * num.atan2(den);
                }
                total.abs()
            }
        }
    }

    /// A direction drawn uniformly in the bounding cap from two uniforms in [0, 1).
    #[inline]
    pub fn bounding_cap_point(&self, u: f64, v: f64) -> V3 {
        let cos_b = self.bound_radius.cos();
        let ct = 1.0 - u * (1.0 - cos_b);
        let st = (1.0 - ct * ct).max(0.0).sqrt();
        let (sp, cp) = (2.0 * PI * v).sin_cos();
        std::array::from_fn(|a| ct * self.center[a] + st * (cp * self.e1[a] + sp * self.e2[a]))
    }

    /// Fraction of the bounding cap's area covered by the footprint (rejection efficiency).
    pub fn fill_fraction(&self) -> f64 {
        self.solid_angle() / (2.0 * PI * (1.0 - self.bound_radius.cos()))
    }
}

fn check_angle(what: &str, ra: f64, dec: f64) -> Result<()> {
    if !ra.is_finite() || !(-90.0..=90.0).contains(&dec) {
        return Err(Error::input(format!(
            "footprint {what}: (ra, dec) = ({ra}, {dec}) deg is not a valid sky position"
        )));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn poly(v: &[(f64, f64)]) -> Region {
        Region::new(&Footprint::Polygon {
            vertices: v.to_vec(),
        })
        .unwrap()
    }

    #[test]
    fn polygon_square_uses_great_circle_edges() {
        // The edge between (0,10) and (20,10) is a great circle whose highest point, at RA 10,
        // has tan(dec) = tan(10 deg)/cos(10 deg) (spherical trigonometry, closed form): 10.154 deg.
        let sq = [(0.0, -10.0), (20.0, -10.0), (20.0, 10.0), (0.0, 10.0)];
        let top = (10f64.to_radians().tan() / 10f64.to_radians().cos())
            .atan()
            .to_degrees();
        for r in [
            poly(&sq),
            poly(&sq.iter().rev().copied().collect::<Vec<_>>()),
        ] {
            assert!(r.contains(&unit_vector(10.0, 0.0)));
            assert!(r.contains(&unit_vector(10.0, top - 0.01)));
            assert!(!r.contains(&unit_vector(10.0, top + 0.01)));
            assert!(r.contains(&unit_vector(0.5, 9.9)));
            assert!(!r.contains(&unit_vector(25.0, 0.0)));
            assert!(!r.contains(&unit_vector(-0.5, 0.0)));
            assert!(!r.contains(&unit_vector(190.0, 0.0)));
            assert!(!r.contains(&unit_vector(10.0, -90.0)));
        }
    }

    #[test]
    fn polygon_non_convex_l_shape() {
        // L shape near the equator (where great circles and RA/Dec lines almost coincide).
        let l = [
            (0.0, 0.0),
            (4.0, 0.0),
            (4.0, 2.0),
            (2.0, 2.0),
            (2.0, 4.0),
            (0.0, 4.0),
        ];
        let r = poly(&l);
        assert!(r.contains(&unit_vector(1.0, 1.0)));
        assert!(r.contains(&unit_vector(3.0, 1.0)));
        assert!(r.contains(&unit_vector(1.0, 3.0)));
        assert!(!r.contains(&unit_vector(3.0, 3.0)));
        assert!(!r.contains(&unit_vector(5.0, 1.0)));
    }

    #[test]
    fn octant_solid_angle_is_an_eighth_of_the_sphere() {
        // Closed form: the octant x, y, z > 0 covers 4 pi / 8.
        let r = poly(&[(0.0, 0.0), (90.0, 0.0), (0.0, 90.0)]);
        assert!((r.solid_angle() - PI / 2.0).abs() < 1e-12);
        assert!(r.contains(&unit_vector(45.0, 30.0)));
        assert!(!r.contains(&unit_vector(135.0, 30.0)));
    }

    #[test]
    fn polygon_approximating_a_cap_agrees_with_it() {
        // A regular 720-gon inscribed in a 12 deg cap around (150, 35): its area tends to the
        // cap's 2 pi (1 - cos r) (closed form) and containment agrees away from the rim.
        let (ra0, dec0, rad) = (150.0, 35.0, 12.0);
        let cap = Region::new(&Footprint::Cap {
            ra_deg: ra0,
            dec_deg: dec0,
            radius_deg: rad,
        })
        .unwrap();
        let m = 720;
        let c = unit_vector(ra0, dec0);
        let (e1, e2) = tangent_basis(&c);
        let r = rad.to_radians();
        let verts: Vec<(f64, f64)> = (0..m)
            .map(|k| {
                let ph = 2.0 * PI * k as f64 / m as f64;
                let p: V3 = std::array::from_fn(|a| {
                    r.cos() * c[a] + r.sin() * (ph.cos() * e1[a] + ph.sin() * e2[a])
                });
                ra_dec(&p)
            })
            .collect();
        let pg = poly(&verts);
        let rel = (pg.solid_angle() - cap.solid_angle()).abs() / cap.solid_angle();
        assert!(rel < 1e-4, "area mismatch {rel}");
        assert!(pg.bound_radius >= r - 1e-9 && pg.bound_radius < r + 1e-3);
        // Grid of test directions: compare except within 0.01 deg of the rim (sagitta of one
        // side is r (1 - cos(pi/m)) ~ 1e-3 deg).
        let mut checked = 0;
        for a in 0..60 {
            for b in 0..60 {
                let p = unit_vector(
                    130.0 + 40.0 * a as f64 / 59.0,
                    15.0 + 40.0 * b as f64 / 59.0,
                );
                let ang = dot(&p, &c).clamp(-1.0, 1.0).acos().to_degrees();
                if (ang - rad).abs() > 0.01 {
                    assert_eq!(pg.contains(&p), cap.contains(&p), "at angle {ang}");
                    checked += 1;
                }
            }
        }
        assert!(checked > 3000);
    }

    #[test]
    fn bad_footprints_are_input_errors() {
        let bad = [
            Footprint::Cap {
                ra_deg: 0.0,
                dec_deg: 95.0,
                radius_deg: 5.0,
            },
            Footprint::Cap {
                ra_deg: 0.0,
                dec_deg: 0.0,
                radius_deg: -1.0,
            },
            Footprint::Polygon {
                vertices: vec![(0.0, 0.0), (1.0, 0.0)],
            },
            Footprint::Polygon {
                vertices: vec![(0.0, 0.0), (120.0, 0.0), (240.0, 0.0)],
            },
        ];
        for fp in &bad {
            assert!(matches!(Region::new(fp), Err(Error::Input(_))), "{fp:?}");
        }
    }
}
