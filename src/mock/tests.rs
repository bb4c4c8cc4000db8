//! Tests of the lognormal mocks. Sources are named beside each check.
use super::fft::{fold, half_weight, Fft3};
use super::*;

/// Test input only: a smooth peaked shape times damped acoustic-like wiggles, in (Mpc/h)^3.
fn test_power(k: f64) -> f64 {
    let x = k / 0.02;
    let smooth = 2.0e4 * x / (1.0 + x * x).powf(1.5);
    let kr = k * 105.0;
    smooth * (1.0 + 0.25 * kr.sin() / kr * (-(k * 8.0).powi(2) / 2.0).exp())
}

fn box_cfg(seed: u64) -> BoxMockConfig {
    BoxMockConfig {
        n_grid: 64,
        box_size: 1000.0,
        nbar: 3e-4,
        bias: 1.5,
        seed,
    }
}

fn bits(v: &[f64]) -> Vec<u64> {
    v.iter().map(|x| x.to_bits()).collect()
}

#[test]
fn box_mean_density_matches_nbar() {
    // E[N] = nbar V exactly for a lognormal field (E[exp(G - sigma^2/2)] = 1); the count
    // fluctuates by the Poisson error sqrt(nbar V) (the k = 0 mode carries no power).
    let mut total = 0usize;
    let seeds = [11u64, 12, 13, 14];
    for &s in &seeds {
        let cfg = box_cfg(s);
        let cat = lognormal_box(&test_power, &cfg).unwrap();
        let expect = cfg.nbar * cfg.box_size.powi(3);
        let n = cat.x.len() as f64;
        assert!(
            (n - expect).abs() < 4.0 * expect.sqrt(),
            "seed {s}: {n} vs {expect}"
        );
        for v in [&cat.x, &cat.y, &cat.z] {
            assert!(v.iter().all(|&x| (0.0..cfg.box_size).contains(&x)));
        }
        total += cat.x.len();
    }
    let expect = 3e-4 * 1e9 * seeds.len() as f64;
    assert!((total as f64 - expect).abs() < 4.0 * expect.sqrt());
}

/// Power of a box catalogue on the mock's own grid (NGP, shot noise V/N subtracted), as
/// (weighted sum of P_est, weighted sum of b^2 P(k), mode count) per bin of width kf.
/// Common practice, no source: P(k) = V |delta_k|^2 / N_cell^2 - 1/nbar.
fn measure_power(cat: &BoxCatalogue, cfg: &BoxMockConfig, nbins: usize) -> Vec<(f64, f64, f64)> {
    let n = cfg.n_grid;
    let cell = cfg.box_size / n as f64;
    let mut grid = vec![0.0; n * n * n];
    for q in 0..cat.x.len() {
        let idx = |v: f64| ((v / cell) as usize).min(n - 1);
        grid[(idx(cat.x[q]) * n + idx(cat.y[q])) * n + idx(cat.z[q])] += 1.0;
    }
    let ngal = cat.x.len() as f64;
    let ncell = (n * n * n) as f64;
    let mean = ngal / ncell;
    for v in grid.iter_mut() {
        *v = *v / mean - 1.0;
    }
    let spec = Fft3::new(n).unwrap().forward(&grid).unwrap();
    let volume = cfg.box_size.powi(3);
    let kf = 2.0 * std::f64::consts::PI / cfg.box_size;
    let nh = n / 2 + 1;
    let mut bins = vec![(0.0, 0.0, 0.0); nbins];
    for i in 0..n {
        for j in 0..n {
            for l in 0..nh {
                let m = ((fold(i, n).pow(2) + fold(j, n).pow(2) + (l * l) as i64) as f64).sqrt();
                let b = (m + 0.5) as usize;
                if m == 0.0 || b == 0 || b > nbins {
                    continue;
                }
                let w = half_weight(l, n);
                let p = volume * spec[(i * n + j) * nh + l].norm_sqr() / (ncell * ncell)
                    - volume / ngal;
                let bin = &mut bins[b - 1];
                bin.0 += w * p;
                bin.1 += w * cfg.bias.powi(2) * test_power(kf * m);
                bin.2 += w;
            }
        }
    }
    bins
}

#[test]
fn box_power_matches_input_spectrum() {
    // The grid lognormal field has grid power b^2 P(k) at each mode (Coles & Jones 1991,
    // MNRAS 248, 1, exact on the grid when no P_G mode is clipped); the estimator's variance
    // per independent mode is (P + 1/nbar)^2 (Feldman, Kaiser & Peacock 1994, ApJ 426, 23).
    let seeds = [21u64, 22, 23, 24, 25, 26];
    let nbins = 12;
    let mut acc = vec![(0.0, 0.0, 0.0); nbins];
    for &s in &seeds {
        let cfg = box_cfg(s);
        let (cat, info) = lognormal_box_with_info(&test_power, &cfg).unwrap();
        assert!(info.sigma_g > 0.1 && info.sigma_g < 3.0);
        for (a, b) in acc.iter_mut().zip(measure_power(&cat, &cfg, nbins)) {
            a.0 += b.0;
            a.1 += b.1;
            a.2 += b.2;
        }
    }
    let shot = 1.0 / 3e-4;
    let mut chi2 = 0.0;
    for (b, &(pe, pt, w)) in acc.iter().enumerate() {
        let (pe, pt) = (pe / w, pt / w);
        // w counts both k and -k; independent modes are w/2.
        let sigma = (pt + shot) / (0.5 * w).sqrt();
        let dev = (pe - pt) / sigma;
        chi2 += dev * dev;
        assert!(
            dev.abs() < 4.5,
            "bin {b}: measured {pe:.1}, input {pt:.1}, {dev:.2} sigma"
        );
    }
    assert!(
        chi2 < 2.5 * nbins as f64,
        "chi2 = {chi2:.1} for {nbins} bins"
    );
}

fn in_pool<T: Send>(threads: usize, f: impl FnOnce() -> T + Send) -> T {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .unwrap()
        .install(f)
}

#[test]
fn box_is_bitwise_identical_for_any_thread_count() {
    // Project rule (RULES.md): bitwise identical results for any thread count.
    let mut cfg = box_cfg(77);
    cfg.n_grid = 32;
    let a = in_pool(1, || lognormal_box_with_info(&test_power, &cfg).unwrap());
    let b = in_pool(2, || lognormal_box_with_info(&test_power, &cfg).unwrap());
    let c = in_pool(3, || lognormal_box_with_info(&test_power, &cfg).unwrap());
    assert!(!a.0.x.is_empty());
    for other in [&b, &c] {
        assert_eq!(bits(&a.0.x), bits(&other.0.x));
        assert_eq!(bits(&a.0.y), bits(&other.0.y));
        assert_eq!(bits(&a.0.z), bits(&other.0.z));
        assert_eq!(a.1.sigma_g.to_bits(), other.1.sigma_g.to_bits());
    }
    let d = lognormal_box(&test_power, &box_cfg(78)).unwrap();
    let e = lognormal_box(
        &test_power,
        &BoxMockConfig {
            n_grid: 32,
            ..box_cfg(78)
        },
    )
    .unwrap();
    assert_ne!(bits(&a.0.x), bits(&e.x), "different seeds must differ");
    assert_ne!(d.x.len(), 0);
}

fn survey_cfg(footprint: Footprint, bias: f64, seed: u64) -> SurveyMockConfig {
    SurveyMockConfig {
        footprint,
        z_min: 0.4,
        z_max: 0.6,
        nbar: NzSpec::Table(vec![(0.35, 1e-4), (0.5, 4e-4), (0.65, 1e-4)]),
        bias,
        n_grid: 64,
        seed,
        random_factor: 10.0,
    }
}

fn cap() -> Footprint {
    Footprint::Cap {
        ra_deg: 150.0,
        dec_deg: 30.0,
        radius_deg: 8.0,
    }
}

fn square() -> Footprint {
    Footprint::Polygon {
        vertices: vec![(140.0, 20.0), (160.0, 20.0), (160.0, 40.0), (140.0, 40.0)],
    }
}

fn all_inside(cat: &SkyCatalogue, fp: &Footprint, cfg: &SurveyMockConfig) {
    let region = Region::new(fp).unwrap();
    assert_eq!(cat.w.len(), cat.ra.len());
    for q in 0..cat.ra.len() {
        assert!(region.contains(&footprint::unit_vector(cat.ra[q], cat.dec[q])));
        assert!((cfg.z_min..=cfg.z_max).contains(&cat.z[q]));
        assert!((0.0..360.0).contains(&cat.ra[q]));
        assert_eq!(cat.w[q], 1.0);
    }
}

#[test]
fn survey_objects_lie_in_footprint_and_redshift_range() {
    let cosmo = Cosmology::planck18();
    for fp in [cap(), square()] {
        let cfg = survey_cfg(fp.clone(), 1.5, 5);
        let (g, r, info) = lognormal_survey_with_info(&test_power, &cosmo, &cfg).unwrap();
        assert!(
            g.ra.len() > 1000 && r.ra.len() > 10_000,
            "{} {}",
            g.ra.len(),
            r.ra.len()
        );
        all_inside(&g, &fp, &cfg);
        all_inside(&r, &fp, &cfg);
        assert_eq!(r.ra.len() as f64, (10.0 * info.expected_galaxies).round());
        assert_eq!(info.true_cosmology, Some(cosmo));
        let json = info.to_json();
        assert_eq!(json["seed"], 5);
        assert_eq!(json["config"]["n_grid"], 64);
    }
}

/// Histogram of z in `nb` bins over [z0, z1].
fn hist(z: &[f64], z0: f64, z1: f64, nb: usize) -> Vec<f64> {
    let mut h = vec![0.0; nb];
    for &v in z {
        let b = (((v - z0) / (z1 - z0)) * nb as f64) as usize;
        h[b.min(nb - 1)] += 1.0;
    }
    h
}

#[test]
fn survey_counts_and_nz_match_randoms() {
    // With a tiny bias the galaxies are a Poisson sample of nbar(z) in the footprint, so their
    // total is the expected count within Poisson error and their z histogram matches the
    // randoms' in a chi-square test (Pearson chi-square, 10 bins; common practice, no source).
    let cosmo = Cosmology::planck18();
    for fp in [cap(), square()] {
        let mut chi2_all = 0.0;
        for seed in [1u64, 2] {
            let cfg = survey_cfg(fp.clone(), 0.05, seed);
            let (g, r, info) = lognormal_survey_with_info(&test_power, &cosmo, &cfg).unwrap();
            let (ng, nr) = (g.z.len() as f64, r.z.len() as f64);
            let e = info.expected_galaxies;
            assert!(
                (ng - e).abs() < 5.0 * e.sqrt(),
                "{fp:?}: {ng} galaxies vs {e:.1}"
            );
            let nb = 10;
            let (hg, hr) = (hist(&g.z, 0.4, 0.6, nb), hist(&r.z, 0.4, 0.6, nb));
            let mut chi2 = 0.0;
            for b in 0..nb {
                let f = hr[b] / nr;
                let var = ng * f * (1.0 + ng / nr);
                chi2 += (hg[b] - ng * f).powi(2) / var;
            }
            chi2_all += chi2;
        }
        // 20 degrees of freedom: chi2 > 45 has probability ~1e-3.
        assert!(chi2_all < 45.0, "{fp:?}: chi2 = {chi2_all:.1}");
    }
    // Expected count against an independent closed form for constant nbar in a cap:
    // N = nbar * 2 pi (1 - cos r) * (chi_max^3 - chi_min^3) / 3.
    let mut cfg = survey_cfg(cap(), 0.05, 3);
    cfg.nbar = NzSpec::Constant(2e-4);
    let (_, _, info) = lognormal_survey_with_info(&test_power, &cosmo, &cfg).unwrap();
    let chi = |z: f64| cosmo.comoving_radial(z) * cosmo.h;
    let omega = 2.0 * std::f64::consts::PI * (1.0 - 8f64.to_radians().cos());
    let want = 2e-4 * omega * (chi(0.6).powi(3) - chi(0.4).powi(3)) / 3.0;
    assert!((info.expected_galaxies / want - 1.0).abs() < 1e-4);
}

#[test]
fn survey_is_bitwise_identical_for_any_thread_count() {
    // Project rule (RULES.md): bitwise identical results for any thread count.
    let cosmo = Cosmology::planck18();
    let mut cfg = survey_cfg(square(), 1.5, 9);
    cfg.n_grid = 32;
    let a = in_pool(1, || lognormal_survey(&test_power, &cosmo, &cfg).unwrap());
    let b = in_pool(2, || lognormal_survey(&test_power, &cosmo, &cfg).unwrap());
    for (x, y) in [(&a.0, &b.0), (&a.1, &b.1)] {
        assert!(!x.ra.is_empty());
        assert_eq!(bits(&x.ra), bits(&y.ra));
        assert_eq!(bits(&x.dec), bits(&y.dec));
        assert_eq!(bits(&x.z), bits(&y.z));
    }
    cfg.seed = 10;
    let c = lognormal_survey(&test_power, &cosmo, &cfg).unwrap();
    assert_ne!(bits(&a.0.z), bits(&c.0.z));
    assert_ne!(bits(&a.1.z), bits(&c.1.z));
}

#[test]
fn curved_true_cosmology_runs_and_stays_inside() {
    // Curved truth: positions keep chi and angles (flat-grid mapping); check containment only.
    let cosmo = Cosmology::planck18().with_omega_k(0.05);
    let mut cfg = survey_cfg(cap(), 1.5, 4);
    cfg.n_grid = 32;
    let (g, r) = lognormal_survey(&test_power, &cosmo, &cfg).unwrap();
    all_inside(&g, &cap(), &cfg);
    all_inside(&r, &cap(), &cfg);
}

#[test]
fn bad_inputs_are_input_errors() {
    let bad_box = [
        BoxMockConfig {
            n_grid: 63,
            ..box_cfg(1)
        },
        BoxMockConfig {
            box_size: -1.0,
            ..box_cfg(1)
        },
        BoxMockConfig {
            nbar: 0.0,
            ..box_cfg(1)
        },
        BoxMockConfig {
            bias: f64::NAN,
            ..box_cfg(1)
        },
    ];
    for cfg in &bad_box {
        assert!(
            matches!(lognormal_box(&test_power, cfg), Err(Error::Input(_))),
            "{cfg:?}"
        );
    }
    let neg = |k: f64| -test_power(k);
    assert!(matches!(
        lognormal_box(&neg, &box_cfg(1)),
        Err(Error::Input(_))
    ));
    // A narrow shell in k gives xi(r) ~ sin(kr)/(kr) oscillating far below -1: no lognormal
    // field exists (Coles & Jones 1991 require xi > -1).
    let shell = |k: f64| if (k - 0.1).abs() < 0.004 { 5e6 } else { 0.0 };
    let cfg = BoxMockConfig {
        n_grid: 32,
        ..box_cfg(1)
    };
    assert!(matches!(lognormal_box(&shell, &cfg), Err(Error::Input(_))));
    let cosmo = Cosmology::planck18();
    let mut s = survey_cfg(cap(), 1.5, 1);
    s.z_max = 0.3;
    assert!(matches!(
        lognormal_survey(&test_power, &cosmo, &s),
        Err(Error::Input(_))
    ));
    let mut s = survey_cfg(cap(), 1.5, 1);
    s.nbar = NzSpec::Table(vec![(0.45, 1e-4), (0.7, 1e-4)]);
    assert!(matches!(
        lognormal_survey(&test_power, &cosmo, &s),
        Err(Error::Input(_))
    ));
    let mut s = survey_cfg(cap(), 1.5, 1);
    s.random_factor = -1.0;
    assert!(matches!(
        lognormal_survey(&test_power, &cosmo, &s),
        Err(Error::Input(_))
    ));
}

/// Timing and memory of a 256^3 box (run by hand: `cargo test --release --lib
/// mock::tests::bench_256 -- --ignored --nocapture` under /usr/bin/time -v). Not a unit test.
#[test]
#[ignore]
fn bench_256() {
    let cfg = BoxMockConfig {
        n_grid: 256,
        box_size: 2000.0,
        nbar: 3e-4,
        bias: 2.0,
        seed: 1,
    };
    let t = std::time::Instant::now();
    let (cat, info) = lognormal_box_with_info(&test_power, &cfg).unwrap();
    eprintln!(
        "256^3: {} galaxies in {:.2} s; sigma_G {:.3}, negative P_G {} of {}; est. memory {} MB",
        cat.x.len(),
        t.elapsed().as_secs_f64(),
        info.sigma_g,
        info.n_negative_pg,
        info.n_modes_half_grid,
        estimate_memory_bytes(256) >> 20
    );
}
