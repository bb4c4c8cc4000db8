use super::*;
use crate::cosmology::Cosmology;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

const ZS: [f64; 6] = [0.3, 0.5, 0.7, 1.0, 1.5, 2.3];

/// D_V/r_d through the cosmology module (independent of the inference's own integrator).
fn dv_rd_ref(ok: f64, om: f64, h: f64, rd: f64, z: f64) -> f64 {
    let base = Cosmology::planck18();
    let c = Cosmology {
        h,
        omega_k: ok,
        omega_c_h2: om * h * h - base.omega_b_h2 - base.omega_nu_h2(),
        ..base
    };
    c.dv(z) / rd
}

fn synthetic(truth: [f64; 4], frac_err: f64, noise_seed: Option<u64>) -> Vec<BaoPoint> {
    let mut rng = ChaCha8Rng::seed_from_u64(noise_seed.unwrap_or(0));
    let n = Normal::new(0.0, 1.0).unwrap();
    ZS.iter()
        .map(|&z| {
            let v = dv_rd_ref(truth[0], truth[1], truth[2], truth[3], z);
            let err = frac_err * v;
            let noise = if noise_seed.is_some() {
                err * n.sample(&mut rng)
            } else {
                0.0
            };
            BaoPoint {
                z_eff: z,
                dv_over_rd: v + noise,
                dv_over_rd_err: err,
            }
        })
        .collect()
}

fn priors_rd(h_sigma: f64) -> Priors {
    Priors {
        omega_k: Some(ParamPrior::flat(-0.5, 0.5)),
        omega_m: Some(ParamPrior::flat(0.05, 0.95)),
        h: Some(ParamPrior::gauss(0.68, h_sigma)),
        // Planck 2018 results VI, A&A 641, A6, Table 2: r_d = 147.09 +- 0.26 Mpc.
        rd: Some(ParamPrior::gauss(147.09, 0.26)),
        ..Default::default()
    }
}

fn fast_settings() -> SamplerSettings {
    SamplerSettings {
        n_steps: 1500,
        n_walkers: 32,
        ..Default::default()
    }
}

#[test]
fn fast_dv_matches_cosmology_module() {
    // Independent computation: Cosmology::dv (Hogg 1999 definitions, GL panels of 0.05).
    for &ok in &[-0.15, 0.0, 0.2] {
        let pri = Priors {
            omega_k: Some(ParamPrior::fixed(ok)),
            omega_m: Some(ParamPrior::fixed(0.3)),
            h: Some(ParamPrior::fixed(0.7)),
            rd: Some(ParamPrior::flat(100.0, 200.0)),
            ..Default::default()
        };
        let data = [BaoPoint {
            z_eff: 1.0,
            dv_over_rd: 20.0,
            dv_over_rd_err: 1.0,
        }];
        let m = Model::new(&data, &pri).unwrap();
        let p = m.phys(&[150.0]);
        for &z in &ZS {
            let a = m.dv_over_rd(&p, z);
            let b = dv_rd_ref(ok, 0.3, 0.7, 150.0, z);
            assert!((a / b - 1.0).abs() < 1e-9, "ok={ok} z={z}: {a} vs {b}");
        }
    }
}

#[test]
fn synthetic_recovery_grid_mcmc_fisher() {
    let truth = [0.06, 0.31, 0.68, 147.09];
    let data = synthetic(truth, 0.003, Some(7));
    let pri = priors_rd(0.005);
    let res = run_inference(&data, &pri, &fast_settings()).unwrap();
    let d = res.mcmc_diagnostics.as_ref().unwrap();
    eprintln!("diagnostics: {d:?}");
    assert!(d.converged, "{d:?}");
    let mc = res.mcmc.as_ref().unwrap();
    let gr = res.grid.as_ref().unwrap();
    for (k, t) in truth.iter().enumerate() {
        eprintln!("{}: mcmc {:?}\n   grid {:?}", REPORT_NAMES[k], mc[k], gr[k]);
        assert!(
            mc[k].ci95[0] < *t && *t < mc[k].ci95[1],
            "{} truth outside 95%",
            REPORT_NAMES[k]
        );
    }
    // Grid and MCMC: mean and width of Omega_k within 0.1 sigma.
    let (a, b) = (&mc[0], &gr[0]);
    assert!((a.mean - b.mean).abs() < 0.1 * b.std, "{a:?} {b:?}");
    assert!((a.std - b.std).abs() < 0.1 * b.std, "{a:?} {b:?}");
    // Fisher forecast (common practice, no source): F = J^T C^-1 J + prior terms, derivatives
    // of D_V/r_d by central differences through Cosmology::dv, at the truth.
    let steps = [1e-3, 1e-3, 1e-4, 1e-2];
    let mut f = [[0.0; 4]; 4];
    for (i, &z) in ZS.iter().enumerate() {
        let err = data[i].dv_over_rd_err;
        let mut g = [0.0; 4];
        for k in 0..4 {
            let (mut p, mut q) = (truth, truth);
            p[k] += steps[k];
            q[k] -= steps[k];
            g[k] = (dv_rd_ref(p[0], p[1], p[2], p[3], z) - dv_rd_ref(q[0], q[1], q[2], q[3], z))
                / (2.0 * steps[k]);
        }
        for a in 0..4 {
            for b in 0..4 {
                f[a][b] += g[a] * g[b] / (err * err);
            }
        }
    }
    f[2][2] += 1.0 / 0.005f64.powi(2);
    f[3][3] += 1.0 / 0.26f64.powi(2);
    let cov = invert4(f);
    let sigma_fisher = cov[0][0].sqrt();
    eprintln!("Fisher sigma(Omega_k) = {sigma_fisher}, MCMC {}", a.std);
    assert!((a.std / sigma_fisher - 1.0).abs() < 0.2);
    let c = &res.curvature;
    assert!(!c.flat_inside_95 || c.r_k_lower_gpc.is_some());
    assert!(res.statement.contains("Omega_k"));
}

/// Gauss-Jordan inverse (test helper).
fn invert4(m: [[f64; 4]; 4]) -> [[f64; 4]; 4] {
    let mut a = m;
    let mut inv = [[0.0; 4]; 4];
    for (i, row) in inv.iter_mut().enumerate() {
        row[i] = 1.0;
    }
    for c in 0..4 {
        let p = (c..4)
            .max_by(|&x, &y| a[x][c].abs().total_cmp(&a[y][c].abs()))
            .unwrap();
        a.swap(c, p);
        inv.swap(c, p);
        let d = a[c][c];
        for j in 0..4 {
            a[c][j] /= d;
            inv[c][j] /= d;
        }
        for r in 0..4 {
            if r != c {
                let f = a[r][c];
                for j in 0..4 {
                    a[r][j] -= f * a[c][j];
                    inv[r][j] -= f * inv[c][j];
                }
            }
        }
    }
    inv
}

#[test]
fn flat_only_reduces_to_direct_chi2_scan() {
    let truth = [0.0, 0.30, 0.68, 147.09];
    let data = synthetic(truth, 0.01, Some(3));
    let pri = Priors {
        omega_k: Some(ParamPrior::fixed(0.0)),
        omega_m: Some(ParamPrior::flat(0.1, 0.6)),
        h: Some(ParamPrior::fixed(0.68)),
        rd: Some(ParamPrior::fixed(147.09)),
        ..Default::default()
    };
    let res = run_inference(&data, &pri, &fast_settings()).unwrap();
    // Direct scan of exp(-chi2/2) on a fine Omega_m grid (closed-form moments of the scan).
    let n = 4000;
    let (mut s0, mut s1, mut s2) = (0.0, 0.0, 0.0);
    let chi2 = |om: f64| -> f64 {
        data.iter()
            .map(|d| {
                ((dv_rd_ref(0.0, om, 0.68, 147.09, d.z_eff) - d.dv_over_rd) / d.dv_over_rd_err)
                    .powi(2)
            })
            .sum()
    };
    let min = (0..=200)
        .map(|i| chi2(0.1 + 0.5 * i as f64 / 200.0))
        .fold(f64::INFINITY, f64::min);
    for i in 0..n {
        let om = 0.1 + 0.5 * (i as f64 + 0.5) / n as f64;
        let w = (-0.5 * (chi2(om) - min)).exp();
        s0 += w;
        s1 += w * om;
        s2 += w * om * om;
    }
    let mean = s1 / s0;
    let sd = (s2 / s0 - mean * mean).sqrt();
    let g = &res.grid.as_ref().unwrap()[1];
    let m = &res.mcmc.as_ref().unwrap()[1];
    eprintln!("scan {mean} +- {sd}; grid {g:?}; mcmc {m:?}");
    assert!((g.mean - mean).abs() < 0.01 * sd && (g.std / sd - 1.0).abs() < 0.01);
    assert!((m.mean - mean).abs() < 0.05 * sd && (m.std / sd - 1.0).abs() < 0.05);
    assert_eq!(res.parameters[0].std, 0.0);
}

#[test]
fn same_seed_same_chain_for_one_and_two_threads() {
    let data = synthetic([0.0, 0.3, 0.68, 147.09], 0.01, Some(1));
    let pri = priors_rd(0.01);
    let s = SamplerSettings {
        n_steps: 200,
        max_steps: 200,
        n_chains: 2,
        run_grid: false,
        ..Default::default()
    };
    let run = |t: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(t)
            .build()
            .unwrap();
        pool.install(|| run_inference(&data, &pri, &s).unwrap())
    };
    let (a, b) = (run(1), run(2));
    assert_eq!(a.samples.len(), b.samples.len());
    for (x, y) in a.samples.iter().zip(&b.samples) {
        for k in 0..4 {
            assert_eq!(x[k].to_bits(), y[k].to_bits());
        }
    }
    assert_eq!(
        serde_json::to_string(&a).unwrap(),
        serde_json::to_string(&b).unwrap()
    );
}

#[test]
fn ar1_autocorrelation_time() {
    // AR(1) x_t = phi x_{t-1} + e_t has rho(t) = phi^t and tau = (1+phi)/(1-phi) (closed form).
    let phi: f64 = 0.8;
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let n = Normal::new(0.0, (1.0 - phi * phi).sqrt()).unwrap();
    let len = 20000;
    let walkers = 20;
    let mut acc = vec![0.0; len];
    for _ in 0..walkers {
        let mut x = n.sample(&mut rng) / (1.0 - phi * phi).sqrt();
        let series: Vec<f64> = (0..len)
            .map(|_| {
                x = phi * x + n.sample(&mut rng);
                x
            })
            .collect();
        let r = mcmc::autocorr_fft(&series);
        for (a, v) in acc.iter_mut().zip(&r) {
            *a += v / walkers as f64;
        }
        // FFT autocorrelation equals the direct sum.
        let d = mcmc::autocorr_direct(&series[..2000], 30);
        let f = mcmc::autocorr_fft(&series[..2000]);
        for t in 0..=30 {
            assert!((d[t] - f[t]).abs() < 1e-10);
        }
    }
    let tau = mcmc::integrated_time(&acc, 5.0);
    let exact = (1.0 + phi) / (1.0 - phi);
    eprintln!("AR(1) tau = {tau}, exact {exact}");
    assert!((tau / exact - 1.0).abs() < 0.1);
}

#[test]
fn gelman_rubin_detects_disagreement() {
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let n = Normal::new(0.0, 1.0).unwrap();
    let same: Vec<Vec<f64>> = (0..4)
        .map(|_| (0..5000).map(|_| n.sample(&mut rng)).collect())
        .collect();
    assert!((mcmc::gelman_rubin(&same) - 1.0).abs() < 0.01);
    let shifted: Vec<Vec<f64>> = same
        .iter()
        .enumerate()
        .map(|(i, c)| c.iter().map(|x| x + i as f64).collect())
        .collect();
    assert!(mcmc::gelman_rubin(&shifted) > 1.1);
}

#[test]
fn cmb_observables_planck18() {
    // Chen, Huang & Wang 2019, JCAP 02, 028, Table I (value from memory): R = 1.7502,
    // l_A = 301.471 (sigma 0.0046 and 0.09) for the Planck 2018 LambdaCDM chains. R agrees within
    // one sigma; l_A from the Hu & Sugiyama z* and the plain sound-speed integral (no recombination
    // physics) is known to run ~0.2% high, so its tolerance is 0.3% (about 9 sigma of the prior).
    let c = Cosmology::planck18();
    let pri = Priors {
        omega_k: Some(ParamPrior::fixed(0.0)),
        h: Some(ParamPrior::fixed(c.h)),
        omega_b_h2: Some(ParamPrior::fixed(c.omega_b_h2)),
        omega_c_h2: Some(ParamPrior::flat(0.1, 0.14)),
        ..Default::default()
    };
    let data = synthetic([0.0, 0.31, 0.68, 147.0], 0.01, None);
    let m = Model::new(&data, &pri).unwrap();
    let p = m.phys(&[c.omega_c_h2]);
    let (r, la) = m.cmb_observables(&p);
    eprintln!("R = {r}, l_A = {la}, r_d = {}", p.rd);
    assert!((r - 1.7502).abs() < 0.0046, "R = {r}");
    assert!((la / 301.471 - 1.0).abs() < 0.003, "l_A = {la}");
}

#[test]
fn bad_inputs_are_input_errors() {
    let data = synthetic([0.0, 0.3, 0.68, 147.09], 0.01, None);
    let is_input = |e: crate::Error| matches!(e, crate::Error::Input(_));
    // Unknown key, naming it.
    let e = Priors::from_toml_str("[rd]\nmean = 147.09\nsgima = 0.26\n", "p.toml").unwrap_err();
    assert!(
        e.to_string().contains("sgima") && e.to_string().contains("p.toml"),
        "{e}"
    );
    assert!(is_input(e));
    let e = Priors::from_toml_str("[curvature]\nmin = 0\n", "p.toml").unwrap_err();
    assert!(e.to_string().contains("curvature"), "{e}");
    // Empty data.
    let e = run_inference(&[], &priors_rd(0.01), &fast_settings()).unwrap_err();
    assert!(is_input(e));
    // Negative sigma in a prior and in the data.
    let mut pri = priors_rd(0.01);
    pri.rd = Some(ParamPrior::gauss(147.0, -1.0));
    let e = run_inference(&data, &pri, &fast_settings()).unwrap_err();
    assert!(e.to_string().contains("rd") && is_input(e));
    let mut bad = data.clone();
    bad[2].dv_over_rd_err = -0.1;
    let e = run_inference(&bad, &priors_rd(0.01), &fast_settings()).unwrap_err();
    assert!(e.to_string().contains("point 3") && is_input(e));
    // Table parsing names the line and column.
    let e = parse_bao_table("# test\n0.5 13.0 0.1\n0.7 abc 0.2\n", "t.txt").unwrap_err();
    assert!(
        e.to_string().contains("line 3") && e.to_string().contains("column 2"),
        "{e}"
    );
    let e = parse_bao_table("0.5 13.0 -0.1\n", "t.txt").unwrap_err();
    assert!(is_input(e));
    let e = parse_fit_json("{\"z_eff\": 0.5, \"dv_over_rd\": 13.0}", "f.json").unwrap_err();
    assert!(e.to_string().contains("dv_over_rd_err"), "{e}");
    // Both r_d routes, or none.
    let mut pri = priors_rd(0.01);
    pri.omega_b_h2 = Some(ParamPrior::gauss(0.0224, 0.0002));
    assert!(is_input(
        run_inference(&data, &pri, &fast_settings()).unwrap_err()
    ));
}

#[test]
fn parsers_read_tables_and_fit_json() {
    let t = "z_eff, dv_over_rd, dv_over_rd_err\n0.38, 10.2, 0.15 # first\n\n0.61 14.9 0.2\n";
    let p = parse_bao_table(t, "t.csv").unwrap();
    assert_eq!(p.len(), 2);
    assert_eq!(p[1].dv_over_rd, 14.9);
    let j =
        r#"{"tool": "x", "result": {"z_eff": 0.51, "dv_over_rd": 13.3, "dv_over_rd_err": 0.2}}"#;
    let q = parse_fit_json(j, "f.json").unwrap();
    assert_eq!(q.z_eff, 0.51);
    let pri = Priors::from_toml_str(
        "[rd]\nmean = 147.09\nsigma = 0.26\n[omega_k]\nmin = -0.3\nmax = 0.3\n[h]\nmean = 0.68\nsigma = 0.01\n",
        "p.toml",
    )
    .unwrap();
    assert_eq!(pri.rd, Some(ParamPrior::gauss(147.09, 0.26)));
}

#[test]
fn outputs_written() {
    let data = synthetic([0.0, 0.3, 0.68, 147.09], 0.01, Some(2));
    let s = SamplerSettings {
        run_mcmc: false,
        ..Default::default()
    };
    let res = run_inference(&data, &priors_rd(0.01), &s).unwrap();
    let dir = tempfile::tempdir().unwrap();
    write_outputs(dir.path(), &res).unwrap();
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("inference.json")).unwrap())
            .unwrap();
    assert!(v["curvature"]["p_closed"].is_number());
    assert!(dir.path().join("posterior_omega_k.png").exists());
    assert!(dir.path().join("posterior_omega_k.svg").exists());
}

#[test]
fn single_bao_point_is_degenerate_regime() {
    // One D_V/r_d point with an r_d prior and a flat h prior cannot separate Omega_k from
    // Omega_m and h (common practice, no source): the width must be far above 0.0025.
    let data = [BaoPoint {
        z_eff: 0.55,
        dv_over_rd: dv_rd_ref(0.0, 0.31, 0.68, 147.09, 0.55),
        dv_over_rd_err: 0.15,
    }];
    let pri = Priors {
        omega_k: Some(ParamPrior::flat(-0.3, 0.3)),
        ..Priors::with_rd_planck18()
    };
    let s = SamplerSettings {
        run_mcmc: false,
        ..Default::default()
    };
    let res = run_inference(&data, &pri, &s).unwrap();
    eprintln!("{}\n{:?}", res.statement, res.curvature);
    assert!(res.curvature.width_over_cmb_bao > 10.0);
    assert!(res.curvature.flat_inside_95);
    assert!(res.statement.contains("prior") && res.statement.contains("degenerate"));
}
