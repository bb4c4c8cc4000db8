//! Tests of the pair-count engine against brute force and independent references.
use super::kernel::{pair_q, s_of_q, Binner, KernelKind, Quant, CLO, OPE};
use super::*;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// c/H0 in Mpc/h (speed of light in km/s over 100 km/s/Mpc; exact by SI definition).
const C_OVER_H0: f64 = 2997.92458;

fn r_curv() -> f64 {
    C_OVER_H0 / 0.05f64.sqrt()
}

/// A survey-like shell: chi uniform in [1000, 1800] Mpc/h inside a sky cap of half-angle
/// `cap_deg` around the +z axis, weights in [0.5, 1.5], redshift ~ chi / 3000.
fn shell(n: usize, seed: u64, cap_deg: f64) -> (PointSet, Vec<f64>, Vec<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let cmin = cap_deg.to_radians().cos();
    let mut p = PointSet::default();
    let (mut ra, mut dec) = (Vec::new(), Vec::new());
    for _ in 0..n {
        let ct: f64 = rng.gen_range(cmin..1.0);
        let st = (1.0 - ct * ct).sqrt();
        let ph: f64 = rng.gen_range(0.0..std::f64::consts::TAU);
        let chi: f64 = rng.gen_range(1000.0..1800.0);
        p.x.push(chi * st * ph.cos());
        p.y.push(chi * st * ph.sin());
        p.z.push(chi * ct);
        p.w.push(rng.gen_range(0.5..1.5));
        p.redshift.push(chi / 3000.0);
        ra.push(ph.to_degrees());
        dec.push(90.0 - ct.acos().to_degrees());
    }
    (p, ra, dec)
}

/// Uniform points in a box of side l, a few of them slightly outside to exercise wrapping.
fn boxed(n: usize, seed: u64, l: f64) -> PointSet {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut p = PointSet::default();
    for i in 0..n {
        let off = if i % 97 == 0 { l } else { 0.0 };
        p.x.push(rng.gen_range(0.0..l) - off);
        p.y.push(rng.gen_range(0.0..l));
        p.z.push(rng.gen_range(0.0..l) + off);
        p.w.push(rng.gen_range(0.5..1.5));
        p.redshift.push(0.0);
    }
    p
}

fn cfg(edges: Vec<f64>, n_mu: usize, metric: Metric, n_regions: usize) -> CountConfig {
    CountConfig {
        binning: Binning::new(edges, n_mu).unwrap(),
        metric,
        n_regions,
        threads: 2,
        shard: (0, 1),
    }
}

fn linear_edges() -> Vec<f64> {
    (0..=25).map(|i| 8.0 * i as f64).collect()
}

fn uneven_edges() -> Vec<f64> {
    vec![30.0, 45.0, 60.0, 100.0, 150.0, 200.0]
}

/// Exact npairs; weighted sums within 1e-12 relative (plus the fixed-point rounding of the
/// reference's per-row flushes, 2^-49 per flush).
fn assert_close(got: &PairCounts, want: &PairCounts, n_flush: usize, what: &str) {
    assert_eq!(got.npairs, want.npairs, "{what}: npairs");
    let abs = n_flush as f64 * 2f64.powi(-(FRAC_BITS as i32));
    for (name, g, w) in [
        ("wpairs", &got.wpairs, &want.wpairs),
        ("ws", &got.ws, &want.ws),
        ("wz", &got.wz, &want.wz),
        ("region_both", &got.region_both, &want.region_both),
        ("region_one", &got.region_one, &want.region_one),
    ] {
        assert_eq!(g.len(), w.len(), "{what}: {name} length");
        for (b, (&x, &y)) in g.iter().zip(w).enumerate() {
            let (x, y) = (from_fixed(x), from_fixed(y));
            assert!(
                (x - y).abs() <= 1e-12 * y.abs() + abs,
                "{what}: {name}[{b}] = {x} vs brute force {y}"
            );
        }
    }
}

fn metrics() -> Vec<Metric> {
    vec![
        Metric::Euclidean,
        Metric::Periodic { box_size: 1000.0 },
        Metric::Closed { radius: r_curv() },
        Metric::Open { radius: r_curv() },
    ]
}

fn data_for(m: &Metric, seed: u64, n: usize, n_regions: usize) -> PointSet {
    let mut p = match m {
        Metric::Periodic { box_size } => boxed(n, seed, *box_size),
        _ => shell(n, seed, 9.0).0,
    };
    p.region = (0..n).map(|i| ((i * 7919) % n_regions) as u32).collect();
    p
}

#[test]
fn tree_counts_equal_brute_force_all_metrics() {
    for m in metrics() {
        for n_mu in [1, 5] {
            for edges in [linear_edges(), uneven_edges()] {
                let c = cfg(edges, n_mu, m, 3);
                let a = data_for(&m, 1, 1500, 3);
                let b = data_for(&m, 2, 1100, 3);
                let what = format!("{m:?} n_mu={n_mu} edges={:?}", c.binning.s_edges);
                let auto = count_auto(&a, &c).unwrap();
                assert!(
                    auto.npairs.iter().sum::<u64>() > 10_000,
                    "{what}: too few pairs"
                );
                assert_close(
                    &auto,
                    &brute_force_auto(&a, &c),
                    a.len(),
                    &format!("auto {what}"),
                );
                let cross = count_cross(&a, &b, &c).unwrap();
                assert_close(
                    &cross,
                    &brute_force_cross(&a, &b, &c),
                    a.len(),
                    &format!("cross {what}"),
                );
            }
        }
    }
}

#[test]
fn fast_kernel_is_bitwise_reference_kernel() {
    for m in metrics() {
        for n_mu in [1, 4] {
            let c = cfg(linear_edges(), n_mu, m, 3);
            let a = data_for(&m, 3, 1200, 3);
            let b = data_for(&m, 4, 900, 3);
            let r = count_impl(&a, None, &c, KernelKind::Reference).unwrap();
            let f = count_impl(&a, None, &c, KernelKind::Fast).unwrap();
            assert_eq!(r, f, "{m:?} auto n_mu={n_mu}");
            let r = count_impl(&a, Some(&b), &c, KernelKind::Reference).unwrap();
            let f = count_impl(&a, Some(&b), &c, KernelKind::Fast).unwrap();
            assert_eq!(r, f, "{m:?} cross n_mu={n_mu}");
        }
    }
}

#[test]
fn bitwise_identical_for_threads_and_shards() {
    for m in [Metric::Euclidean, Metric::Open { radius: r_curv() }] {
        let mut c = cfg(linear_edges(), 3, m, 4);
        let a = data_for(&m, 5, 3000, 4);
        let b = data_for(&m, 6, 1000, 4);
        for cross in [false, true] {
            let run = |c: &CountConfig| {
                if cross {
                    count_cross(&a, &b, c).unwrap()
                } else {
                    count_auto(&a, c).unwrap()
                }
            };
            c.threads = 1;
            let one = run(&c);
            for t in [2, 7] {
                c.threads = t;
                assert_eq!(run(&c), one, "{m:?} cross={cross} threads={t}");
            }
            c.threads = 2;
            let mut merged = PairCounts::zeros(c.binning.clone(), c.n_regions);
            for k in 0..3 {
                c.shard = (k, 3);
                let part = run(&c);
                assert!(part.npairs.iter().sum::<u64>() > 0, "shard {k} empty");
                merged.merge(&part).unwrap();
            }
            c.shard = (0, 1);
            assert_eq!(merged, one, "{m:?} cross={cross}: 3 shards merged");
        }
    }
}

/// Independent single-tree reference: kiddo's within-radius query (inclusive, squared
/// Euclidean), cumulative raw pair counts; common practice, no source.
#[test]
fn cumulative_counts_match_kiddo() {
    use kiddo::{ImmutableKdTree, SquaredEuclidean};
    let (p, _, _) = shell(2500, 7, 9.0);
    let edges: Vec<f64> = vec![0.0, 7.3, 19.1, 33.3, 61.7, 97.9, 143.3, 199.7];
    let c = cfg(edges.clone(), 1, Metric::Euclidean, 0);
    let got = count_auto(&p, &c).unwrap();
    let pts: Vec<[f64; 3]> = (0..p.len()).map(|i| [p.x[i], p.y[i], p.z[i]]).collect();
    let tree: ImmutableKdTree<f64, 3> = ImmutableKdTree::new_from_slice(&pts);
    let mut cum = 0u64;
    for (k, &e) in edges.iter().enumerate().skip(1) {
        cum += got.npairs[k - 1];
        let mut n = 0u64;
        for q in &pts {
            n += tree.within_unsorted::<SquaredEuclidean>(q, e * e).len() as u64 - 1;
        }
        assert_eq!(cum, n / 2, "pairs within {e}");
    }
}

/// The two endpoints and the angle between lines of sight for a pair of points.
fn chis_theta(a: [f64; 3], b: [f64; 3]) -> (f64, f64, f64) {
    let n = |v: [f64; 3]| (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
    let (c1, c2) = (n(a), n(b));
    let du = [
        a[0] / c1 - b[0] / c2,
        a[1] / c1 - b[1] / c2,
        a[2] / c1 - b[2] / c2,
    ];
    (c1, c2, n(du) * n(du) / 4.0)
}

/// Separation the engine uses for one pair (embedding + q -> s).
fn engine_s(m: Metric, a: [f64; 3], b: [f64; 3]) -> f64 {
    let p = PointSet {
        x: vec![a[0], b[0]],
        y: vec![a[1], b[1]],
        z: vec![a[2], b[2]],
        w: vec![1.0, 1.0],
        ..Default::default()
    };
    let c = cfg(vec![0.0, 1.0], 1, m, 0);
    let (geo, _) = check_config(&c).unwrap();
    let pts = prepare(p.clone(), "t", &c, &geo).unwrap();
    let args = |i: usize| (pts.c[0][i], pts.c[1][i], pts.c[2][i], pts.c[3][i]);
    let ((ax, ay, az, at), (bx, by, bz, bt)) = (args(0), args(1));
    match m {
        Metric::Closed { radius } => s_of_q::<CLO>(
            pair_q::<CLO>(ax, ay, az, at, bx, by, bz, bt, 0.0, 0.0).0,
            radius,
        ),
        Metric::Open { radius } => s_of_q::<OPE>(
            pair_q::<OPE>(ax, ay, az, at, bx, by, bz, bt, 0.0, 0.0).0,
            radius,
        ),
        _ => unreachable!(),
    }
}

#[test]
fn curved_separation_matches_stable_form_and_embeddings() {
    let r = r_curv();
    let (p, _, _) = shell(400, 8, 9.0);
    let mut rng = ChaCha8Rng::seed_from_u64(9);
    let mut tested = 0;
    for _ in 0..4000 {
        let (i, j) = (rng.gen_range(0..p.len()), rng.gen_range(0..p.len()));
        let a = [p.x[i], p.y[i], p.z[i]];
        let b = [p.x[j], p.y[j], p.z[j]];
        let (c1, c2, s2h) = chis_theta(a, b);
        let flat = ((c1 - c2).powi(2) + 4.0 * c1 * c2 * s2h).sqrt();
        if !(10.0..=300.0).contains(&flat) {
            continue;
        }
        tested += 1;
        // closed: ARCHITECTURE.md section 3 stable form
        let rhs = ((c1 - c2) / (2.0 * r)).sin().powi(2) + (c1 / r).sin() * (c2 / r).sin() * s2h;
        let s_stable = 2.0 * r * rhs.sqrt().asin();
        // closed: direct 4-D sphere embedding, geodesic = R * angle between the 4-vectors
        let emb = |v: [f64; 3], c: f64| {
            let f = r * (c / r).sin() / c;
            [v[0] * f, v[1] * f, v[2] * f, r * (c / r).cos()]
        };
        let (p1, p2) = (emb(a, c1), emb(b, c2));
        let nd: f64 = (0..4).map(|k| (p1[k] - p2[k]).powi(2)).sum::<f64>().sqrt();
        let ns: f64 = (0..4).map(|k| (p1[k] + p2[k]).powi(2)).sum::<f64>().sqrt();
        let s_emb = 2.0 * r * nd.atan2(ns);
        let s_eng = engine_s(Metric::Closed { radius: r }, a, b);
        assert!(
            (s_eng - s_stable).abs() <= 1e-10 * s_stable,
            "closed {s_eng} vs {s_stable}"
        );
        assert!(
            (s_eng - s_emb).abs() <= 1e-10 * s_emb,
            "closed {s_eng} vs {s_emb}"
        );
        // open: stable form and the hyperboloid (Minkowski) embedding
        let rhs = ((c1 - c2) / (2.0 * r)).sinh().powi(2) + (c1 / r).sinh() * (c2 / r).sinh() * s2h;
        let s_stable = 2.0 * r * rhs.sqrt().asinh();
        let hyp = |v: [f64; 3], c: f64| {
            let f = r * (c / r).sinh() / c;
            [v[0] * f, v[1] * f, v[2] * f, r * (c / r).cosh()]
        };
        let (h1, h2) = (hyp(a, c1), hyp(b, c2));
        let mink = (0..3).map(|k| (h1[k] - h2[k]).powi(2)).sum::<f64>() - (h1[3] - h2[3]).powi(2);
        let s_emb = 2.0 * r * (mink.sqrt() / (2.0 * r)).asinh();
        let s_eng = engine_s(Metric::Open { radius: r }, a, b);
        assert!(
            (s_eng - s_stable).abs() <= 1e-10 * s_stable,
            "open {s_eng} vs {s_stable}"
        );
        assert!(
            (s_eng - s_emb).abs() <= 1e-10 * s_emb,
            "open {s_eng} vs {s_emb}"
        );
        // both tend to the flat separation as R -> infinity
        let mut prev = f64::INFINITY;
        for big in [1e5, 1e6, 1e7] {
            let dc = (engine_s(Metric::Closed { radius: big }, a, b) - flat).abs() / flat;
            let dopen = (engine_s(Metric::Open { radius: big }, a, b) - flat).abs() / flat;
            let tol = 2.0 * (1800.0 / big).powi(2) + 1e-12;
            assert!(dc <= tol && dopen <= tol, "R={big}: {dc} {dopen} > {tol}");
            assert!(dc.max(dopen) <= prev.max(1e-12));
            prev = dc.max(dopen);
        }
    }
    assert!(tested > 100);
}

#[test]
fn bin_table_agrees_with_binary_search() {
    let geo_edges = [linear_edges(), uneven_edges(), vec![0.0, 1e-3, 0.5, 200.0]];
    for edges in geo_edges {
        let qe: Vec<f64> = edges.iter().map(|e| e * e).collect();
        let bn = Binner::new(qe.clone(), 1);
        assert!(bn.table_ok || edges[1] < 1e-2);
        if !bn.table_ok {
            continue;
        }
        let mut rng = ChaCha8Rng::seed_from_u64(10);
        let mut qs: Vec<f64> = (0..100_000)
            .map(|_| rng.gen_range(qe[0]..qe[qe.len() - 1]))
            .collect();
        for &e in &qe[..qe.len() - 1] {
            qs.extend([e, e.next_up(), e.next_down().max(qe[0])]);
        }
        for q in qs {
            assert_eq!(
                bn.s_bin_from_cell(bn.cell(q), q),
                bn.s_bin_exact(q),
                "q = {q}"
            );
        }
    }
}

#[test]
fn edge_and_mu_conventions() {
    // a pair at exactly s = 5 goes in [5, 10); s = 10 = s_max is not counted; a radial pair has
    // mu = 1 and goes in the last mu bin; a transverse pair has mu = 0.
    let c = cfg(vec![0.0, 5.0, 10.0], 2, Metric::Euclidean, 0);
    let p = PointSet {
        x: vec![0.0, 0.0, 3.0, 0.0],
        y: vec![0.0, 0.0, 0.0, 0.0],
        z: vec![100.0, 105.0, 100.0, 110.0],
        w: vec![1.0; 4],
        ..Default::default()
    };
    let got = count_auto(&p, &c).unwrap();
    // pairs: (0,1) s=5 mu=1; (0,2) s=3 mu~0; (0,3) s=10 excluded; (1,2) s=sqrt(34) mu=5/5.83;
    // (1,3) s=5 mu=1; (2,3) s=sqrt(109) excluded
    assert_eq!(got.npairs, vec![1, 0, 0, 3]);
    assert_eq!(got, brute_force_auto(&p, &c));
    // coincident points are a pair (excluded only by index), at s = 0, mu = 0
    let q = PointSet {
        x: vec![1.0, 1.0],
        y: vec![2.0, 2.0],
        z: vec![3.0, 3.0],
        w: vec![2.0, 0.5],
        redshift: vec![0.4, 0.6],
        ..Default::default()
    };
    let got = count_auto(&q, &c).unwrap();
    assert_eq!(got.npairs, vec![1, 0, 0, 0]);
    assert_eq!(got.wpairs[0], to_fixed(1.0));
    assert_eq!(got.wz[0], to_fixed(0.5));
}

/// Poisson points in a periodic box: expected pairs in a shell is N(N-1)/2 * V_shell / L^3
/// (common practice, no source); tolerance 5 sigma of a Poisson count.
#[test]
fn periodic_poisson_counts() {
    let l = 500.0;
    let mut p = boxed(4000, 11, l);
    p.w = vec![1.0; p.len()];
    let edges = vec![10.0, 40.0, 80.0, 120.0];
    let c = cfg(edges.clone(), 1, Metric::Periodic { box_size: l }, 0);
    let got = count_auto(&p, &c).unwrap();
    let n = p.len() as f64;
    for k in 0..3 {
        let vol = 4.0 / 3.0 * std::f64::consts::PI * (edges[k + 1].powi(3) - edges[k].powi(3));
        let want = n * (n - 1.0) / 2.0 * vol / l.powi(3);
        let g = got.npairs[k] as f64;
        assert!(
            (g - want).abs() < 5.0 * want.sqrt(),
            "bin {k}: {g} vs {want}"
        );
    }
}

#[test]
fn bad_input_is_reported() {
    let c = cfg(linear_edges(), 1, Metric::Euclidean, 0);
    let e = count_auto(&PointSet::default(), &c).unwrap_err();
    assert_eq!(e.exit_code(), 2);
    assert!(e.to_string().contains("empty"), "{e}");

    let p = boxed(100, 1, 300.0);
    let c = cfg(linear_edges(), 1, Metric::Periodic { box_size: 400.0 }, 0);
    let e = count_auto(&p, &c).unwrap_err();
    assert_eq!(e.exit_code(), 2);
    assert!(e.to_string().contains("box_size/2"), "{e}");

    let mut p = data_for(&Metric::Euclidean, 1, 50, 3);
    p.region[17] = 3;
    let c = cfg(linear_edges(), 1, Metric::Euclidean, 3);
    let e = count_auto(&p, &c).unwrap_err();
    assert_eq!(e.exit_code(), 2);
    assert!(
        e.to_string().contains("row 17") && e.to_string().contains("label 3"),
        "{e}"
    );

    let mut q = data_for(&Metric::Euclidean, 1, 50, 3);
    q.w.pop();
    assert!(count_cross(&data_for(&Metric::Euclidean, 2, 50, 3), &q, &c).is_err());
    q.w.push(f64::NAN);
    let e = count_auto(&q, &c).unwrap_err();
    assert!(e.to_string().contains("row 49"), "{e}");

    let mut c = cfg(linear_edges(), 1, Metric::Euclidean, 0);
    c.shard = (3, 3);
    assert!(count_auto(&boxed(10, 1, 10.0), &c).is_err());
}

#[test]
fn jackknife_sums_are_consistent() {
    // common practice, no source: per bin: sum_k both + one/2 = total (each pair is "both" in one region or "one" in two)
    let c = cfg(linear_edges(), 1, Metric::Euclidean, 4);
    let a = data_for(&Metric::Euclidean, 12, 800, 4);
    let got = count_auto(&a, &c).unwrap();
    let nb = c.binning.n_bins();
    for b in 0..nb {
        let s: i128 = (0..4)
            .map(|k| 2 * got.region_both[k * nb + b] + got.region_one[k * nb + b])
            .sum();
        // each task flush rounds every sum once (2^-49 each), so allow a few units per task
        let tol = (4 * TASK_TARGET) as i128;
        assert!(
            (s - 2 * got.wpairs[b]).abs() <= tol,
            "bin {b}: {s} vs {}",
            2 * got.wpairs[b]
        );
        assert!(
            got.wpairs[b] > 1 << FRAC_BITS,
            "bin {b} has too few pairs to test"
        );
    }
}

#[test]
fn kmeans_regions_are_deterministic_and_compact() {
    let (_, ra, dec) = shell(3000, 13, 20.0);
    let k = 8;
    let l1 = kmeans_sky_regions(&ra, &dec, k, 42).unwrap();
    let l2 = kmeans_sky_regions(&ra, &dec, k, 42).unwrap();
    assert_eq!(l1, l2);
    let mut sizes = vec![0usize; k];
    for &l in &l1 {
        sizes[l as usize] += 1;
    }
    assert!(sizes.iter().all(|&s| s > 3000 / (4 * k)), "{sizes:?}");
    // converged Lloyd: every point is nearest (brute force) to its own region's mean direction
    let u: Vec<[f64; 3]> = ra
        .iter()
        .zip(&dec)
        .map(|(&r, &d)| {
            let (r, d) = (r.to_radians(), d.to_radians());
            [d.cos() * r.cos(), d.cos() * r.sin(), d.sin()]
        })
        .collect();
    let mut cen = vec![[0.0f64; 3]; k];
    for (p, &l) in u.iter().zip(&l1) {
        for d in 0..3 {
            cen[l as usize][d] += p[d];
        }
    }
    let mut bad = 0;
    for (p, &l) in u.iter().zip(&l1) {
        let dist = |c: &[f64; 3]| {
            let n = (c[0] * c[0] + c[1] * c[1] + c[2] * c[2]).sqrt();
            (0..3).map(|d| (p[d] - c[d] / n).powi(2)).sum::<f64>()
        };
        let best = (0..k)
            .min_by(|&x, &y| dist(&cen[x]).total_cmp(&dist(&cen[y])))
            .unwrap();
        if best != l as usize {
            bad += 1;
        }
    }
    assert_eq!(bad, 0);
    assert!(kmeans_sky_regions(&ra[..3], &dec[..3], 5, 1).is_err());
}

#[test]
fn memory_estimate_grows_with_inputs() {
    let c = cfg(linear_edges(), 5, Metric::Euclidean, 10);
    let small = memory_estimate_bytes(1000, 0, &c);
    let big = memory_estimate_bytes(1_000_000, 1_000_000, &c);
    // at least twice the 32 bytes of positions and weight per point (the copies a count makes)
    assert!(small > 0 && big > small + 64 * 2_000_000);
}

/// One-off speed comparison of the two leaf kernels (not a timed assertion; run with
/// `cargo test --release --lib pairs::tests::kernel_rate -- --ignored --nocapture`).
#[test]
#[ignore]
fn kernel_rate() {
    let mut c = cfg(linear_edges(), 1, Metric::Euclidean, 0);
    c.threads = 1;
    let n = std::env::var("PAIRS_RATE_N")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(40_000);
    let (p, _, _) = shell(n, 14, 9.0);
    let tally = count_impl(&p, None, &c, KernelKind::Tally).unwrap();
    let tests = from_fixed(tally.wpairs[0]);
    println!("{} leaf pairs, {tests} pair tests", tally.npairs[0]);
    println!("simd level: {:?}", super::kernel::Simd::detect());
    for kind in [
        KernelKind::Reference,
        KernelKind::Fast,
        KernelKind::Reference,
        KernelKind::Fast,
    ] {
        let t = std::time::Instant::now();
        let r = count_impl(&p, None, &c, kind).unwrap();
        let dt = t.elapsed().as_secs_f64();
        println!(
            "{kind:?}: {dt:.3} s, {} pairs counted, {:.1} M pair tests/s",
            r.npairs.iter().sum::<u64>(),
            tests / dt / 1e6
        );
    }
}

/// Very uneven bins make the lookup table too large; the kernels then fall back to binary
/// search and must still equal brute force.
#[test]
fn uneven_bins_without_table_equal_brute_force() {
    for m in [Metric::Euclidean, Metric::Closed { radius: r_curv() }] {
        let c = cfg(vec![0.0, 1e-3, 0.5, 60.0, 200.0], 2, m, 2);
        let (geo, bn) = check_config(&c).unwrap();
        assert!(!bn.table_ok, "{:?}", geo.kind);
        let a = data_for(&m, 15, 900, 2);
        assert_close(
            &count_auto(&a, &c).unwrap(),
            &brute_force_auto(&a, &c),
            a.len(),
            &format!("{m:?}"),
        );
    }
}

#[test]
fn indexed_catalogues_count_like_point_sets() {
    // one index per catalogue, reused for DD, DR and RR, equals the one-shot counts bit for bit
    for m in metrics() {
        let c = cfg(linear_edges(), 3, m, 4);
        let d = data_for(&m, 31, 900, 4);
        let r = data_for(&m, 32, 1400, 4);
        let id = Indexed::new(d.clone(), "data", &c).unwrap();
        let ir = Indexed::new(r.clone(), "randoms", &c).unwrap();
        assert_eq!(id.len(), 900);
        assert_eq!(
            count_auto_indexed(&id, &c).unwrap(),
            count_auto(&d, &c).unwrap()
        );
        assert_eq!(
            count_cross_indexed(&id, &ir, &c).unwrap(),
            count_cross(&d, &r, &c).unwrap()
        );
        assert_eq!(
            count_auto_indexed(&ir, &c).unwrap(),
            count_auto(&r, &c).unwrap()
        );
        // an index built for another region count cannot be used
        let other = CountConfig {
            n_regions: 0,
            ..c.clone()
        };
        let e = count_auto_indexed(&id, &other).unwrap_err();
        assert_eq!(e.exit_code(), 2, "{e}");
    }
}

#[test]
fn pairs_exactly_on_edges_bin_like_the_reference() {
    // Separations exactly at edges and one ulp either side, along an axis (q = dx^2 exactly at
    // the edge), through every kernel path: linear edges (SIMD edges rebuilt in registers),
    // uneven edges (lookup table), flat and periodic.
    let mut p = PointSet::default();
    let mut x0 = 0.0;
    // edges of `linear_edges` (8k) and of `uneven_edges` (30, 45, 60, 100, 150)
    let targets: Vec<f64> = (1..25)
        .map(|k| 8.0 * k as f64)
        .chain([30.0, 45.0, 60.0, 100.0, 150.0])
        .collect();
    for (k, &e) in targets.iter().enumerate() {
        for dx in [e, e.next_up(), e.next_down()] {
            for x in [x0, x0 + dx] {
                p.x.push(x);
                p.y.push(0.25 * k as f64);
                p.z.push(0.0);
                p.w.push(1.0);
            }
            x0 += 450.0; // pairs of different groups lie beyond s_max
        }
    }
    for edges in [linear_edges(), uneven_edges()] {
        for m in [Metric::Euclidean, Metric::Periodic { box_size: 1e6 }] {
            let c = cfg(edges.clone(), 1, m, 0);
            let got = count_auto(&p, &c).unwrap();
            assert_eq!(got, brute_force_auto(&p, &c), "{m:?}");
            assert!(got.npairs.iter().sum::<u64>() >= 50);
        }
    }
}

#[test]
fn large_weights_fold_lanes_per_row_and_absurd_weights_are_refused() {
    // weights near 10: the SIMD lane sums must be folded every row (w1 w2 s up to 2e4 at
    // 2^40 per unit), still bitwise the reference; weights of 1e5 cannot be represented
    let mut p = boxed(1500, 41, 300.0);
    for (i, w) in p.w.iter_mut().enumerate() {
        *w = 5.0 + (i % 7) as f64 * 0.8;
    }
    let c = cfg(
        (0..=20).map(|k| 10.0 * k as f64).collect(),
        1,
        Metric::Euclidean,
        0,
    );
    let q = Quant::for_bounds([100.0, 100.0 * 200.0, 0.0]).unwrap();
    assert!(
        q.lane_limit < 1024 && q.lane_limit >= 32,
        "{}",
        q.lane_limit
    );
    let f = count_auto(&p, &c).unwrap();
    assert_eq!(f, brute_force_auto(&p, &c));
    assert!(f.npairs.iter().sum::<u64>() > 10_000);
    p.w[3] = 1e5;
    let e = count_auto(&p, &c).unwrap_err();
    assert_eq!(e.exit_code(), 2);
    assert!(e.to_string().contains("weights too large"), "{e}");
}

#[test]
fn series_branch_of_s_of_q_matches_libm() {
    // asin / asinh from their Taylor series (chord/2R <= 0.05) against libm, to 2 ulp
    // (common practice, no source: both are within about 1 ulp of the true value)
    let r = 1000.0;
    for k in 1..=2000 {
        let x = 0.05 * k as f64 / 2000.0;
        let q = (2.0 * r * x).powi(2);
        let c = q.sqrt() / (2.0 * r);
        for (got, want) in [
            (s_of_q::<CLO>(q, r), 2.0 * r * c.asin()),
            (s_of_q::<OPE>(q, r), 2.0 * r * c.asinh()),
        ] {
            assert!(
                (got - want).abs() <= 2.0 * f64::EPSILON * want,
                "x = {x}: {got} vs {want}"
            );
        }
    }
}

// In-place cycle-following reorder against the simple gather (our own reference), on the
// identity, one cycle through every point, a reversal (all 2-cycles), random permutations of
// sizes around the 64-bit word edges, and the tree's own permutation.
#[test]
fn permute_in_place_matches_gather() {
    use rand::seq::SliceRandom;
    let mut rng = ChaCha8Rng::seed_from_u64(17);
    let mut perms: Vec<Vec<usize>> = Vec::new();
    for n in [1usize, 2, 63, 64, 65, 1000] {
        perms.push((0..n).collect());
        perms.push((0..n).map(|i| (i + 1) % n).collect());
        perms.push((0..n).rev().collect());
        for _ in 0..3 {
            let mut p: Vec<usize> = (0..n).collect();
            p.shuffle(&mut rng);
            perms.push(p);
        }
    }
    let (pts, _, _) = shell(500, 3, 30.0);
    let c = [pts.x.clone(), pts.y.clone(), pts.z.clone(), Vec::new()];
    let tree_perm = tree::build_in(&c, None).1;
    let mut done = vec![0u64; tree_perm.len().div_ceil(64)];
    let mut x = pts.x.clone();
    permute_in_place(&mut x, &tree_perm, &mut done);
    assert_eq!(x, permute_gather(&pts.x, &tree_perm));
    assert_ne!(x, pts.x);
    perms.push(tree_perm.iter().map(|&i| i as usize).collect());
    for perm in &perms {
        let n = perm.len();
        let mut done = vec![0u64; n.div_ceil(64)];
        let f: Vec<f64> = (0..n).map(|_| rng.gen_range(-1.0..1.0)).collect();
        let u: Vec<u32> = (0..n).map(|_| rng.gen()).collect();
        let (mut f2, mut u2) = (f.clone(), u.clone());
        permute_in_place(&mut f2, perm, &mut done);
        assert!(done.iter().all(|&d| d == 0), "bitmap left set");
        permute_in_place(&mut u2, perm, &mut done);
        assert_eq!(
            f2.iter().map(|x| x.to_bits()).collect::<Vec<_>>(),
            permute_gather(&f, perm)
                .iter()
                .map(|x| x.to_bits())
                .collect::<Vec<_>>()
        );
        assert_eq!(u2, permute_gather(&u, perm));
    }
    // empty columns stay empty
    let mut e: Vec<f64> = Vec::new();
    permute_in_place(&mut e, &[1u32, 0], &mut [0u64]);
    assert!(e.is_empty());
}

/// Split-random RR in one job equals counting each subset on its own, bit for bit, for any
/// thread count and shard; subsets hold exactly the objects i with i mod m = k.
#[test]
fn split_subsets_count_like_each_subset_alone() {
    let split = 5;
    for (m, n_mu) in [
        (Metric::Euclidean, 1),
        (Metric::Periodic { box_size: 1000.0 }, 3),
        (Metric::Closed { radius: r_curv() }, 1),
    ] {
        let mut c = cfg(linear_edges(), n_mu, m, 3);
        let p = data_for(&m, 8, 2600, 3);
        let subs: Vec<PointSet> = (0..split).map(|k| every_mth(&p, k, split)).collect();
        assert_eq!(subs.iter().map(PointSet::len).sum::<usize>(), p.len());
        for (k, s) in subs.iter().enumerate() {
            for (j, &x) in s.x.iter().enumerate() {
                assert_eq!(x, p.x[j * split + k]);
                assert_eq!(s.region[j], p.region[j * split + k]);
            }
        }
        c.threads = 1;
        let alone: Vec<PairCounts> = subs.iter().map(|s| count_auto(s, &c).unwrap()).collect();
        let what = format!("{m:?} n_mu={n_mu}");
        // independent reference for one subset
        assert_close(
            &alone[2],
            &brute_force_auto(&subs[2], &c),
            subs[2].len(),
            &what,
        );
        // same-subset pairs are about 1/m of all pairs (every pair equally likely to be one)
        let tot = |v: &[PairCounts]| v.iter().flat_map(|c| &c.npairs).sum::<u64>() as f64;
        let full = count_auto(&p, &c).unwrap();
        let frac = tot(&alone) / tot(std::slice::from_ref(&full)) * split as f64;
        assert!(
            (0.85..1.15).contains(&frac),
            "{what}: fraction x m = {frac}"
        );
        for t in [1, 2, 7] {
            c.threads = t;
            assert_eq!(
                count_auto_split(&p, split, &c).unwrap(),
                alone,
                "{what} {t} threads"
            );
        }
        // a shard of the joint job is the same shard of each subset's count
        c.threads = 2;
        let idx = index_subsets(&p, split, "randoms", &c).unwrap();
        c.shard = (1, 3);
        let part = count_auto_subsets(&idx, &c).unwrap();
        for (k, s) in subs.iter().enumerate() {
            assert_eq!(
                part[k],
                count_auto(s, &c).unwrap(),
                "{what} shard, subset {k}"
            );
        }
        // some subsets only, in any order: the same trees
        let some = index_some_subsets(&p, split, &[2, 0], "randoms", &c).unwrap();
        let part = count_auto_subsets(&some, &c).unwrap();
        assert_eq!(
            part,
            vec![
                count_auto(&subs[2], &c).unwrap(),
                count_auto(&subs[0], &c).unwrap()
            ],
            "{what}"
        );
    }
    let c = cfg(linear_edges(), 1, Metric::Euclidean, 0);
    let p = shell(30, 9, 9.0).0;
    let msg = |r: crate::Result<Vec<PairCounts>>| r.unwrap_err().to_string();
    assert!(msg(count_auto_split(&p, 0, &c)).contains("subsets"));
    assert!(msg(count_auto_split(&p, 40, &c)).contains("subset 30"));
    let e = index_some_subsets(&p, 3, &[1, 3], "randoms", &c)
        .err()
        .map(|e| e.to_string());
    assert!(
        e.as_deref().unwrap_or("").contains("subset 3 of 3"),
        "{e:?}"
    );
}

#[test]
fn cross_count_of_zero_and_nonzero_redshift_catalogues_equals_brute_force() {
    // a catalogue whose redshifts are all 0 is stored without them; against one with
    // redshifts the pair term w1 w2 (z1 + z2)/2 still needs both (brute force: our own
    // reference loop)
    let mut a = boxed(900, 61, 200.0);
    let mut b = boxed(700, 62, 200.0);
    for (i, z) in b.redshift.iter_mut().enumerate() {
        *z = 0.3 + 0.001 * (i % 101) as f64;
    }
    let edges: Vec<f64> = (0..=10).map(|k| 8.0 * k as f64).collect();
    for m in [Metric::Euclidean, Metric::Periodic { box_size: 200.0 }] {
        for (n_mu, n_reg) in [(1, 0), (1, 2), (2, 0)] {
            let mut c = cfg(edges.clone(), n_mu, m, n_reg);
            c.threads = 2;
            for (i, r) in a.region.iter_mut().enumerate() {
                *r = (i % 2) as u32;
            }
            a.region.resize(a.len(), 0);
            b.region = (0..b.len() as u32).map(|i| i % 2).collect();
            if n_reg == 0 {
                (a.region, b.region) = (Vec::new(), Vec::new());
            }
            for (x, y) in [(&a, &b), (&b, &a)] {
                let got = count_cross(x, y, &c).unwrap();
                assert_eq!(got, brute_force_cross(x, y, &c), "{m:?} n_mu {n_mu}");
                assert!(got.wz.iter().any(|&v| v != 0));
                let sc = SweepConfig {
                    binning: c.binning.clone(),
                    n_regions: n_reg,
                    threads: 2,
                };
                let sw = sweep_cross(std::slice::from_ref(x), std::slice::from_ref(y), &[m], &sc)
                    .unwrap();
                assert_eq!(sw[0], got, "sweep {m:?} n_mu {n_mu}");
            }
        }
    }
}
