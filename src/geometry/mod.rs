//! Sky + redshift -> comoving positions, and exact separations in flat and curved space.
//!
//! Positions are comoving Cartesian vectors chi * u in Mpc/h (observer at the origin), where chi
//! is the radial comoving distance under the fiducial cosmology and u the unit vector to the
//! object. Curved-space separations use the stable forms of ARCHITECTURE.md section 3.
use crate::catalog::{Catalogue, CatalogueKind};
use crate::cosmology::{Cosmology, DistanceTable, C_KM_S};
use crate::{Error, Result};
use rayon::prelude::*;

/// Spatial curvature of the fiducial, with the curvature radius in Mpc/h.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Curvature {
    Flat,
    /// Omega_k < 0: sin branch.
    Closed {
        radius: f64,
    },
    /// Omega_k > 0: sinh branch.
    Open {
        radius: f64,
    },
}

impl Curvature {
    /// Curvature of a cosmology; R = (c/H0)/sqrt(|Omega_k|) in Mpc/h = 2997.92458/sqrt(|Omega_k|).
    pub fn of(c: &Cosmology) -> Self {
        let r = C_KM_S / 100.0 / c.omega_k.abs().sqrt();
        if c.omega_k > 0.0 {
            Curvature::Open { radius: r }
        } else if c.omega_k < 0.0 {
            Curvature::Closed { radius: r }
        } else {
            Curvature::Flat
        }
    }
}

/// Unit vector for RA, Dec in degrees.
#[inline]
pub fn unit_vector(ra_deg: f64, dec_deg: f64) -> [f64; 3] {
    let (ra, dec) = (ra_deg.to_radians(), dec_deg.to_radians());
    let (sd, cd) = dec.sin_cos();
    let (sr, cr) = ra.sin_cos();
    [cd * cr, cd * sr, sd]
}

/// RA, Dec in degrees (RA in [0, 360)) of a non-zero vector.
pub fn sky_angles(v: [f64; 3]) -> (f64, f64) {
    let r = (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
    let dec = (v[2] / r).clamp(-1.0, 1.0).asin().to_degrees();
    let mut ra = v[1].atan2(v[0]).to_degrees();
    if ra < 0.0 {
        ra += 360.0;
    }
    if ra >= 360.0 {
        ra = 0.0;
    }
    (ra, dec)
}

/// Exact comoving separation between objects at radial distances chi1, chi2 (Mpc/h) whose lines
/// of sight satisfy sin^2(theta/2) = `sin2_half`:
/// - flat:   s^2 = (chi1-chi2)^2 + 4 chi1 chi2 sin^2(theta/2)
/// - closed: sin^2(s/2R) = sin^2((chi1-chi2)/2R) + sin(chi1/R) sin(chi2/R) sin^2(theta/2)
/// - open:   sinh^2(s/2R) = sinh^2((chi1-chi2)/2R) + sinh(chi1/R) sinh(chi2/R) sin^2(theta/2)
#[inline]
pub fn separation(chi1: f64, chi2: f64, sin2_half: f64, curv: Curvature) -> f64 {
    match curv {
        Curvature::Flat => {
            let d = chi1 - chi2;
            (d * d + 4.0 * chi1 * chi2 * sin2_half).sqrt()
        }
        Curvature::Closed { radius: r } => {
            let a = ((chi1 - chi2) / (2.0 * r)).sin();
            let q = a * a + (chi1 / r).sin() * (chi2 / r).sin() * sin2_half;
            2.0 * r * q.clamp(0.0, 1.0).sqrt().asin()
        }
        Curvature::Open { radius: r } => {
            let a = ((chi1 - chi2) / (2.0 * r)).sinh();
            let q = a * a + (chi1 / r).sinh() * (chi2 / r).sinh() * sin2_half;
            2.0 * r * q.max(0.0).sqrt().asinh()
        }
    }
}

/// sin^2(theta/2) between two unit vectors: |u1 - u2|^2 / 4 (stable at small angles).
#[inline]
pub fn sin2_half_angle(u1: [f64; 3], u2: [f64; 3]) -> f64 {
    let d = [u1[0] - u2[0], u1[1] - u2[1], u1[2] - u2[2]];
    0.25 * (d[0] * d[0] + d[1] * d[1] + d[2] * d[2])
}

/// mu: |cosine| between the separation vector and the line of sight to the pair midpoint, from
/// comoving Cartesian positions (common practice, no source). Returns 0 for coincident points.
#[inline]
pub fn mu_midpoint(x1: [f64; 3], x2: [f64; 3]) -> f64 {
    let s = [x1[0] - x2[0], x1[1] - x2[1], x1[2] - x2[2]];
    let l = [x1[0] + x2[0], x1[1] + x2[1], x1[2] + x2[2]];
    let sl = s[0] * l[0] + s[1] * l[1] + s[2] * l[2];
    let ss = s[0] * s[0] + s[1] * s[1] + s[2] * s[2];
    let ll = l[0] * l[0] + l[1] * l[1] + l[2] * l[2];
    if ss == 0.0 || ll == 0.0 {
        return 0.0;
    }
    (sl.abs() / (ss * ll).sqrt()).min(1.0)
}

/// Comoving Cartesian positions in Mpc/h for a catalogue.
#[derive(Debug, Clone)]
pub struct Positions {
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    pub z: Vec<f64>,
    /// Redshift per object (0 for Cartesian catalogues).
    pub redshift: Vec<f64>,
}

/// Comoving position (Mpc/h) of row `i` (0-based) of a sky catalogue from its RA, Dec (degrees)
/// and redshift; a redshift beyond the table is an input error naming the file and row.
fn sky_position(
    cat: &Catalogue,
    table: &DistanceTable,
    i: usize,
    ra: f64,
    dec: f64,
    zr: f64,
) -> Result<[f64; 3]> {
    let chi = table.comoving_radial(zr).ok_or_else(|| {
        Error::input(format!(
            "{}: row {}: redshift {zr} is beyond the distance table (z_max = {})",
            cat.path.display(),
            i + 1,
            table.z_max()
        ))
    })? * table.cosmology().h;
    let u = unit_vector(ra, dec);
    Ok([chi * u[0], chi * u[1], chi * u[2]])
}

/// Convert a sky catalogue with the fiducial's distance table, or pass a Cartesian one through.
/// A redshift beyond the table is an input error naming the file and row.
pub fn positions(cat: &Catalogue, table: Option<&DistanceTable>) -> Result<Positions> {
    let n = cat.len();
    match cat.kind {
        CatalogueKind::Cartesian => Ok(Positions {
            x: cat.pos[0].clone(),
            y: cat.pos[1].clone(),
            z: cat.pos[2].clone(),
            redshift: vec![0.0; n],
        }),
        CatalogueKind::Sky => {
            let table =
                table.ok_or_else(|| Error::other("sky catalogue needs a distance table"))?;
            let (mut x, mut y, mut z) = (
                Vec::with_capacity(n),
                Vec::with_capacity(n),
                Vec::with_capacity(n),
            );
            for i in 0..n {
                let p = sky_position(cat, table, i, cat.pos[0][i], cat.pos[1][i], cat.pos[2][i])?;
                x.push(p[0]);
                y.push(p[1]);
                z.push(p[2]);
            }
            Ok(Positions {
                x,
                y,
                z,
                redshift: cat.pos[2].clone(),
            })
        }
    }
}

/// As `positions`, but moves the position columns out of `cat` (left empty; its weights,
/// regions and counts stay) and reuses them, so converting costs at most one new column instead
/// of a second set: Cartesian columns move over unchanged with an empty `redshift` (all zero,
/// as `pairs::PointSet` reads it); sky RA and Dec columns are overwritten by x and y in place,
/// z is the one new column, and the redshift column becomes `redshift`. Same values bit for bit
/// as `positions`. On error the catalogue's position columns are lost.
pub fn take_positions(cat: &mut Catalogue, table: Option<&DistanceTable>) -> Result<Positions> {
    let [a, b, c] = std::mem::take(&mut cat.pos);
    match cat.kind {
        CatalogueKind::Cartesian => Ok(Positions {
            x: a,
            y: b,
            z: c,
            redshift: Vec::new(),
        }),
        CatalogueKind::Sky => {
            let table =
                table.ok_or_else(|| Error::other("sky catalogue needs a distance table"))?;
            let (mut x, mut y, redshift) = (a, b, c);
            let mut z = vec![0.0; redshift.len()];
            // row by row in chunks on the current rayon pool (each value depends on its row
            // alone); the first error in row order is reported, as the serial loop would
            const CHUNK: usize = 1 << 14;
            let cat = &*cat;
            let errors: Vec<Result<()>> = x
                .par_chunks_mut(CHUNK)
                .zip(y.par_chunks_mut(CHUNK))
                .zip(z.par_chunks_mut(CHUNK))
                .zip(redshift.par_chunks(CHUNK))
                .enumerate()
                .map(|(k, (((x, y), z), zr))| {
                    for j in 0..zr.len() {
                        let p = sky_position(cat, table, k * CHUNK + j, x[j], y[j], zr[j])?;
                        (x[j], y[j], z[j]) = (p[0], p[1], p[2]);
                    }
                    Ok(())
                })
                .collect();
            errors.into_iter().collect::<Result<()>>()?;
            Ok(Positions { x, y, z, redshift })
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn random_pairs(n: usize) -> Vec<(f64, f64, [f64; 3], [f64; 3])> {
        // Deterministic pseudo-random sky pairs (a simple LCG keeps the test self-contained).
        let mut s: u64 = 12345;
        let mut next = || {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (s >> 11) as f64 / (1u64 << 53) as f64
        };
        (0..n)
            .map(|_| {
                let chi1 = 500.0 + 2500.0 * next();
                let chi2 = 500.0 + 2500.0 * next();
                let u1 = unit_vector(360.0 * next(), 90.0 * (2.0 * next() - 1.0));
                let u2 = unit_vector(360.0 * next(), 90.0 * (2.0 * next() - 1.0));
                (chi1, chi2, u1, u2)
            })
            .collect()
    }

    fn angle(u1: [f64; 3], u2: [f64; 3]) -> f64 {
        2.0 * sin2_half_angle(u1, u2).sqrt().asin()
    }

    // Closed space as the 3-sphere of radius R in 4-D: a point at radial distance chi along u is
    // R (cos(chi/R), sin(chi/R) u); the geodesic distance is R times the 4-D angle (closed form).
    #[test]
    fn closed_matches_4d_embedding() {
        let r = 2997.92458 / 0.05f64.sqrt();
        for (c1, c2, u1, u2) in random_pairs(2000) {
            let p1 = [
                (c1 / r).cos(),
                (c1 / r).sin() * u1[0],
                (c1 / r).sin() * u1[1],
                (c1 / r).sin() * u1[2],
            ];
            let p2 = [
                (c2 / r).cos(),
                (c2 / r).sin() * u2[0],
                (c2 / r).sin() * u2[1],
                (c2 / r).sin() * u2[2],
            ];
            // 4-D angle from the chord (stable at small angles): angle = 2 asin(|p1 - p2| / 2).
            let chord2: f64 = p1.iter().zip(&p2).map(|(a, b)| (a - b) * (a - b)).sum();
            let direct = r * 2.0 * (chord2.sqrt() / 2.0).asin();
            let s = separation(
                c1,
                c2,
                sin2_half_angle(u1, u2),
                Curvature::Closed { radius: r },
            );
            assert!(
                (s - direct).abs() <= 1e-10 * direct.max(1e-3),
                "{s} vs {direct}"
            );
        }
    }

    // Open space as the hyperboloid -t^2 + |x|^2 = -R^2 in Minkowski space: a point is
    // R (cosh(chi/R), sinh(chi/R) u); the geodesic distance is R acosh(-<p1,p2>) (closed form).
    #[test]
    fn open_matches_hyperboloid_embedding() {
        let r = 2997.92458 / 0.05f64.sqrt();
        for (c1, c2, u1, u2) in random_pairs(2000) {
            let (a1, a2) = (c1 / r, c2 / r);
            let spatial: f64 = (0..3).map(|k| a1.sinh() * u1[k] * a2.sinh() * u2[k]).sum();
            let minus_inner = a1.cosh() * a2.cosh() - spatial;
            let direct = r * minus_inner.max(1.0).acosh();
            let s = separation(
                c1,
                c2,
                sin2_half_angle(u1, u2),
                Curvature::Open { radius: r },
            );
            // acosh near 1 loses digits, so compare only pairs separated by more than 1 Mpc/h.
            if direct > 1.0 {
                assert!((s - direct).abs() <= 1e-10 * direct, "{s} vs {direct}");
            }
        }
    }

    // Flat: law of cosines (closed form) and the limit R -> infinity of both curved forms.
    #[test]
    fn flat_limit_and_law_of_cosines() {
        for (c1, c2, u1, u2) in random_pairs(500) {
            let th = angle(u1, u2);
            let lc = (c1 * c1 + c2 * c2 - 2.0 * c1 * c2 * th.cos())
                .max(0.0)
                .sqrt();
            let s0 = separation(c1, c2, sin2_half_angle(u1, u2), Curvature::Flat);
            assert!((s0 - lc).abs() <= 1e-9 * lc.max(1.0));
            for r in [1e7, 1e8] {
                let sc = separation(
                    c1,
                    c2,
                    sin2_half_angle(u1, u2),
                    Curvature::Closed { radius: r },
                );
                let so = separation(
                    c1,
                    c2,
                    sin2_half_angle(u1, u2),
                    Curvature::Open { radius: r },
                );
                // Curvature corrections are O((chi/R)^2) relative.
                let tol = 2.0 * (3000.0f64 / r).powi(2) * s0 + 1e-9;
                assert!((sc - s0).abs() <= tol, "closed {sc} vs {s0} at R={r}");
                assert!((so - s0).abs() <= tol, "open {so} vs {s0} at R={r}");
            }
            // Closed space shortens separations relative to flat and open lengthens them.
            let r = 2997.92458 / 0.1f64.sqrt();
            assert!(
                separation(
                    c1,
                    c2,
                    sin2_half_angle(u1, u2),
                    Curvature::Closed { radius: r }
                ) <= s0 * (1.0 + 1e-12)
            );
            assert!(
                separation(
                    c1,
                    c2,
                    sin2_half_angle(u1, u2),
                    Curvature::Open { radius: r }
                ) >= s0 * (1.0 - 1e-12)
            );
        }
    }

    #[test]
    fn mu_along_and_across_line_of_sight() {
        // Radial pair: mu = 1; transverse pair at equal distance: mu = 0 (common practice, no source).
        let a = [0.0, 0.0, 1000.0];
        let b = [0.0, 0.0, 1100.0];
        assert!((mu_midpoint(a, b) - 1.0).abs() < 1e-15);
        let c = [10.0, 0.0, 1000.0];
        let d = [-10.0, 0.0, 1000.0];
        assert!(mu_midpoint(c, d).abs() < 1e-15);
    }

    #[test]
    fn sky_angles_round_trip() {
        for (ra, dec) in [(0.0, 0.0), (359.5, -89.0), (123.4, 45.6), (200.0, 10.0)] {
            let (r2, d2) = sky_angles(unit_vector(ra, dec));
            assert!((r2 - ra).abs() < 1e-9 && (d2 - dec).abs() < 1e-9);
        }
    }

    fn catalogue(kind: CatalogueKind, pos: [Vec<f64>; 3]) -> Catalogue {
        let n = pos[0].len();
        Catalogue {
            path: "cat.csv".into(),
            kind,
            pos,
            w: vec![1.5; n],
            region: None,
            rows_in_file: n,
            rows_filtered: 0,
            ra_wrapped: 0,
            available_columns: vec![],
        }
    }

    // The column-reusing conversion against the copying one (our own simple version): same bits,
    // Cartesian redshifts empty instead of zeros, weights left in the catalogue.
    #[test]
    fn take_positions_matches_positions() {
        let table = DistanceTable::new(&Cosmology::planck18(), 3.0).unwrap();
        let ra = vec![0.0, 12.5, 359.9, 180.0, 271.3];
        let dec = vec![0.0, -89.5, 45.0, 89.9, -12.0];
        let z = vec![0.01, 0.5, 1.2, 2.9, 0.7];
        let mut sky = catalogue(CatalogueKind::Sky, [ra, dec, z]);
        let want = positions(&sky, Some(&table)).unwrap();
        let got = take_positions(&mut sky, Some(&table)).unwrap();
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        for (g, w) in [
            (&got.x, &want.x),
            (&got.y, &want.y),
            (&got.z, &want.z),
            (&got.redshift, &want.redshift),
        ] {
            assert_eq!(bits(g), bits(w));
        }
        assert!(sky.pos.iter().all(|c| c.is_empty()) && sky.w.len() == 5);

        let mut cart = catalogue(
            CatalogueKind::Cartesian,
            [vec![1.0, -2.0], vec![3.0, 4.0], vec![5.0, 6.5]],
        );
        let want = positions(&cart, None).unwrap();
        let got = take_positions(&mut cart, None).unwrap();
        assert_eq!((got.x, got.y, got.z), (want.x, want.y, want.z));
        assert!(got.redshift.is_empty() && want.redshift.iter().all(|&z| z == 0.0));

        // beyond the table: the same error, naming file and row
        let mut far = catalogue(
            CatalogueKind::Sky,
            [vec![1.0, 2.0], vec![3.0, 4.0], vec![0.5, 3.5]],
        );
        let e1 = positions(&far, Some(&table)).unwrap_err().to_string();
        let e2 = take_positions(&mut far, Some(&table))
            .unwrap_err()
            .to_string();
        assert_eq!(e1, e2);
        assert!(e2.contains("cat.csv: row 2"), "{e2}");
    }

    // The conversion runs in chunks on the current pool: for any thread count the same bits as
    // the copying conversion, and of two bad rows in different chunks the first is reported.
    #[test]
    fn take_positions_is_thread_independent() {
        let table = DistanceTable::new(&Cosmology::planck18(), 1.5).unwrap();
        let n = 40_000;
        let col = |f: &dyn Fn(usize) -> f64| (0..n).map(f).collect::<Vec<_>>();
        let ra = col(&|i| (i as f64 * 0.618_033_988_7).fract() * 360.0);
        let dec = col(&|i| (i as f64 * 0.414_213_562_3).fract() * 180.0 - 90.0);
        let z = col(&|i| 0.05 + (i as f64 * 0.732_050_807_5).fract());
        let sky = catalogue(CatalogueKind::Sky, [ra, dec, z]);
        let want = positions(&sky, Some(&table)).unwrap();
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        for t in [1, 2, 7] {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(t)
                .build()
                .unwrap();
            let mut c = sky.clone();
            let got = pool
                .install(|| take_positions(&mut c, Some(&table)))
                .unwrap();
            for (g, w) in [(&got.x, &want.x), (&got.y, &want.y), (&got.z, &want.z)] {
                assert_eq!(bits(g), bits(w), "{t} threads");
            }
            let mut bad = sky.clone();
            bad.pos[2][35_000] = 9.0;
            bad.pos[2][20_001] = 8.0;
            let e = pool
                .install(|| take_positions(&mut bad, Some(&table)))
                .unwrap_err()
                .to_string();
            assert!(e.contains("row 20002:"), "{t} threads: {e}");
        }
    }
}
