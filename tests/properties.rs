//! Property tests of the pair counter and the estimator on small random catalogues.
//!
//! Exactness: raw pair numbers (`npairs`) must agree exactly. Weighted sums are accumulated in
//! f64 per traversal task and then converted to fixed point, so two ways of counting the same
//! pairs can differ by the f64 rounding of those partial sums: at most about
//! n_pairs * 2^-52 * sum|terms| plus one fixed-point unit per task. `close_fixed` allows
//! n_pairs * 4 ulp of the larger total plus n_pairs + 16 fixed-point units (common practice,
//! no source: the standard bound for recursive summation is (n - 1) eps sum|x_i|).
use proptest::prelude::*;
use ringscale::estimator::{auto_norm, cross_norm, landy_szalay, LsNorms, WeightSums};
use ringscale::pairs::{
    count_auto, count_cross, from_fixed, Binning, CountConfig, Metric, PairCounts, PointSet,
};

fn cfg(edges: Vec<f64>, n_mu: usize) -> CountConfig {
    CountConfig {
        binning: Binning::new(edges, n_mu).unwrap(),
        metric: Metric::Euclidean,
        n_regions: 0,
        threads: 1,
        shard: (0, 1),
    }
}

fn points(v: &[(f64, f64, f64, f64)]) -> PointSet {
    PointSet {
        x: v.iter().map(|p| p.0).collect(),
        y: v.iter().map(|p| p.1).collect(),
        z: v.iter().map(|p| p.2).collect(),
        w: v.iter().map(|p| p.3).collect(),
        redshift: v.iter().map(|p| 0.3 + p.3 * 0.01).collect(),
        region: vec![],
    }
}

/// Points in a 100 Mpc/h cube placed 1000 Mpc/h from the observer, weights in [0.5, 2].
fn cat(max: usize) -> impl Strategy<Value = Vec<(f64, f64, f64, f64)>> {
    prop::collection::vec(
        (
            900.0..1000.0f64,
            -50.0..50.0f64,
            -50.0..50.0f64,
            0.5..2.0f64,
        ),
        2..max,
    )
}

fn close_fixed(a: i128, b: i128, npairs: u64) -> bool {
    let big = from_fixed(a.abs().max(b.abs()));
    let tol_ulp = npairs as f64 * 4.0 * f64::EPSILON * big;
    let diff = from_fixed((a - b).abs());
    diff <= tol_ulp + from_fixed(npairs as i128 + 16)
}

fn assert_counts_close(a: &PairCounts, b: &PairCounts) -> Result<(), TestCaseError> {
    prop_assert_eq!(&a.npairs, &b.npairs);
    for k in 0..a.npairs.len() {
        let n = a.npairs[k];
        prop_assert!(close_fixed(a.wpairs[k], b.wpairs[k], n), "wpairs bin {}", k);
        prop_assert!(close_fixed(a.ws[k], b.ws[k], n), "ws bin {}", k);
        prop_assert!(close_fixed(a.wz[k], b.wz[k], n), "wz bin {}", k);
    }
    Ok(())
}

/// Rotation matrix from three angles (z-y-z Euler angles; common practice, no source).
fn rotation(a: f64, b: f64, c: f64) -> [[f64; 3]; 3] {
    let rz = |t: f64| {
        [
            [t.cos(), -t.sin(), 0.0],
            [t.sin(), t.cos(), 0.0],
            [0.0, 0.0, 1.0],
        ]
    };
    let ry = |t: f64| {
        [
            [t.cos(), 0.0, t.sin()],
            [0.0, 1.0, 0.0],
            [-t.sin(), 0.0, t.cos()],
        ]
    };
    let mul = |p: [[f64; 3]; 3], q: [[f64; 3]; 3]| {
        let mut r = [[0.0; 3]; 3];
        for i in 0..3 {
            for j in 0..3 {
                r[i][j] = (0..3).map(|k| p[i][k] * q[k][j]).sum();
            }
        }
        r
    };
    mul(mul(rz(a), ry(b)), rz(c))
}

fn rotate(p: &PointSet, m: &[[f64; 3]; 3]) -> PointSet {
    let mut q = p.clone();
    for i in 0..p.len() {
        let v = [p.x[i], p.y[i], p.z[i]];
        let r: Vec<f64> = (0..3)
            .map(|k| m[k][0] * v[0] + m[k][1] * v[1] + m[k][2] * v[2])
            .collect();
        q.x[i] = r[0];
        q.y[i] = r[1];
        q.z[i] = r[2];
    }
    q
}

/// Separation and |mu| (about the midpoint line of sight) of every distinct pair, computed
/// independently of the library, to keep pairs near a bin edge out of the rotation test.
fn pair_geometry(p: &PointSet) -> Vec<(f64, f64)> {
    let mut out = Vec::new();
    for i in 0..p.len() {
        for j in i + 1..p.len() {
            let d = [p.x[i] - p.x[j], p.y[i] - p.y[j], p.z[i] - p.z[j]];
            let l = [p.x[i] + p.x[j], p.y[i] + p.y[j], p.z[i] + p.z[j]];
            let s = (d[0] * d[0] + d[1] * d[1] + d[2] * d[2]).sqrt();
            let ln = (l[0] * l[0] + l[1] * l[1] + l[2] * l[2]).sqrt();
            let mu = ((d[0] * l[0] + d[1] * l[1] + d[2] * l[2]) / (s * ln)).abs();
            out.push((s, mu));
        }
    }
    out
}

const EDGES: [f64; 6] = [0.0, 10.0, 25.0, 45.0, 70.0, 100.0];

proptest! {
    #![proptest_config(ProptestConfig { cases: 48, ..ProptestConfig::default() })]

    /// DR(a, b) and DR(b, a) count the same pairs.
    #[test]
    fn cross_counts_symmetric(a in cat(40), b in cat(40), n_mu in 1usize..4) {
        let c = cfg(EDGES.to_vec(), n_mu);
        let (pa, pb) = (points(&a), points(&b));
        let ab = count_cross(&pa, &pb, &c).unwrap();
        let ba = count_cross(&pb, &pa, &c).unwrap();
        assert_counts_close(&ab, &ba)?;
    }

    /// Rotating every position about the observer changes no separation and no mu, so the
    /// counts agree exactly in npairs when no pair lies within 1e-9 (relative) of a bin edge.
    #[test]
    fn auto_counts_rotation_invariant(
        a in cat(50),
        ang in (0.0..std::f64::consts::TAU, 0.0..std::f64::consts::PI, 0.0..std::f64::consts::TAU),
        n_mu in 1usize..4,
    ) {
        let p = points(&a);
        let mu_edges: Vec<f64> = (0..=n_mu).map(|j| j as f64 / n_mu as f64).collect();
        for (s, mu) in pair_geometry(&p) {
            prop_assume!(EDGES.iter().all(|&e| (s - e).abs() > 1e-9 * e.max(1.0)));
            prop_assume!(mu_edges.iter().all(|&e| (mu - e).abs() > 1e-9));
        }
        let c = cfg(EDGES.to_vec(), n_mu);
        let m = rotation(ang.0, ang.1, ang.2);
        let before = count_auto(&p, &c).unwrap();
        let after = count_auto(&rotate(&p, &m), &c).unwrap();
        prop_assert_eq!(&before.npairs, &after.npairs);
        for k in 0..before.npairs.len() {
            // Weighted sums: same pairs, products of the same weights; s moves by rounding only.
            let n = before.npairs[k];
            prop_assert!(close_fixed(before.wpairs[k], after.wpairs[k], n));
            let (s0, s1) = (from_fixed(before.ws[k]), from_fixed(after.ws[k]));
            prop_assert!((s0 - s1).abs() <= 1e-10 * s0.abs().max(1.0), "ws bin {}: {} vs {}", k, s0, s1);
        }
    }

    /// auto(A u B) = auto(A) + auto(B) + cross(A, B).
    #[test]
    fn auto_counts_additive_under_split(a in cat(40), b in cat(40), n_mu in 1usize..3) {
        let c = cfg(EDGES.to_vec(), n_mu);
        let (pa, pb) = (points(&a), points(&b));
        let mut all = a.clone();
        all.extend(b.iter().copied());
        let whole = count_auto(&points(&all), &c).unwrap();
        let mut parts = count_auto(&pa, &c).unwrap();
        parts.merge(&count_auto(&pb, &c).unwrap()).unwrap();
        parts.merge(&count_cross(&pa, &pb, &c).unwrap()).unwrap();
        assert_counts_close(&whole, &parts)?;
    }

    /// Landy-Szalay xi does not change when every weight (galaxies and randoms) is multiplied
    /// by the same constant: counts scale by c^2 and so do all normalisations. Compared within
    /// 1e-12 of the size of the terms (xi itself may be near zero, so a plain relative test of xi
    /// would measure cancellation, not the property).
    #[test]
    fn xi_invariant_under_weight_scaling(d in cat(30), r in cat(60), scale in 0.25..4.0f64) {
        let c = cfg(EDGES.to_vec(), 1);
        let xi_and_size = |k: f64| {
            let mut pd = points(&d);
            let mut pr = points(&r);
            pd.w.iter_mut().for_each(|w| *w *= k);
            pr.w.iter_mut().for_each(|w| *w *= k);
            let wd = WeightSums::from_weights(&pd.w, &[], 0).unwrap();
            let wr = WeightSums::from_weights(&pr.w, &[], 0).unwrap();
            let dd = count_auto(&pd, &c).unwrap();
            let dr = count_cross(&pd, &pr, &c).unwrap();
            let rr = count_auto(&pr, &c).unwrap();
            let norms = LsNorms {
                dd: auto_norm(&wd).unwrap(),
                dr: cross_norm(&wd, &wr).unwrap(),
                rr: auto_norm(&wr).unwrap(),
            };
            let xi = landy_szalay(&dd, &dr, &rr, &norms).unwrap().xi;
            let size: Vec<f64> = (0..xi.len())
                .map(|b| {
                    let rn = from_fixed(rr.wpairs[b]) / norms.rr.total;
                    (from_fixed(dd.wpairs[b]) / norms.dd.total
                        + 2.0 * from_fixed(dr.wpairs[b]) / norms.dr.total
                        + rn)
                        / rn
                })
                .collect();
            (xi, size)
        };
        let (x1, size) = xi_and_size(1.0);
        let (x2, _) = xi_and_size(scale);
        for b in 0..x1.len() {
            if x1[b].is_nan() {
                prop_assert!(x2[b].is_nan(), "bin {}: RR empty once but not after scaling", b);
            } else {
                prop_assert!(
                    (x1[b] - x2[b]).abs() <= 1e-12 * size[b],
                    "bin {}: xi {} vs {} (scale {})", b, x1[b], x2[b], scale
                );
            }
        }
    }
}
