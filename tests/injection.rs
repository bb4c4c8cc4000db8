//! Injection and recovery, fast version in periodic boxes (the 10-seed survey run with flat and
//! curved fiducials is scripts/validate_injection.sh, its table in the README).
//!
//! Lognormal boxes of the demo's true cosmology A are analysed with the template of cosmology B
//! (Planck 2018). Positions are in Mpc/h of A, so the acoustic feature sits at r_d^A h_A and the
//! template's at r_d^B h_B: alpha_expected = r_d^B h_B / (r_d^A h_A) (definition of the
//! isotropic dilation, Xu et al. 2012 form). The covariance comes from the mocks themselves
//! (sample covariance with the Hartlap et al. 2007 factor). Checks: the mean alpha lies within
//! one standard deviation of the per-seed scatter of alpha_expected, and every pull is below 3.
use ringscale::cosmology::Cosmology;
use std::path::Path;
use std::process::Command;

fn ok(args: &[&str]) {
    let o = Command::new(env!("CARGO_BIN_EXE_ringscale"))
        .args(args)
        .output()
        .unwrap();
    assert!(
        o.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
}

#[test]
fn boxes_recover_alpha_expected() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let truth_path = root.join("demo_catalogs/lantern_bay_truth.toml");
    let a = Cosmology::from_toml_file(&truth_path).unwrap();
    let b = Cosmology::planck18();
    let expected = b.r_d() * b.h / (a.r_d() * a.h);
    let tmp = tempfile::tempdir().unwrap();
    let d = tmp.path();
    let tp = truth_path.display().to_string();
    let n_mocks = 14;
    let mut xi_files = Vec::new();
    for seed in 1..=n_mocks {
        let cat = d.join(format!("box{seed}.fits")).display().to_string();
        let c = d.join(format!("c{seed}")).display().to_string();
        let x = d.join(format!("x{seed}")).display().to_string();
        let s = seed.to_string();
        ok(&[
            "mock",
            "box",
            "--cosmology",
            &tp,
            "--n-grid",
            "128",
            "--box",
            "1200",
            "--nbar",
            "6e-5",
            "--bias",
            "2",
            "--seed",
            &s,
            "--out",
            &cat,
        ]);
        ok(&[
            "count",
            "--data",
            &cat,
            "--cartesian",
            "--box",
            "1200",
            "--edges",
            "30:180:15",
            "--out",
            &c,
        ]);
        ok(&["xi", "--counts", &c, "--out", &x]);
        xi_files.push(Path::new(&x).join("xi.ecsv").display().to_string());
    }
    let mut alphas = Vec::new();
    for seed in 1..=n_mocks {
        let c = d.join(format!("c{seed}")).display().to_string();
        let xc = d.join(format!("xc{seed}")).display().to_string();
        let f = d.join(format!("f{seed}")).display().to_string();
        let mut args = vec!["xi", "--counts", &c, "--out", &xc, "--mock-xi"];
        args.extend(xi_files.iter().map(|s| s.as_str()));
        ok(&args);
        ok(&[
            "fit",
            "--xi",
            &xc,
            "--out",
            &f,
            "--cosmology",
            "planck18",
            "--fit-range",
            "50:150",
            "--no-plots",
        ]);
        let v: serde_json::Value =
            serde_json::from_slice(&std::fs::read(Path::new(&f).join("fit.json")).unwrap())
                .unwrap();
        let al = v["alpha"].as_f64().unwrap();
        let err = if al > expected {
            v["alpha_err_lo"].as_f64().unwrap()
        } else {
            v["alpha_err_hi"].as_f64().unwrap()
        };
        assert!(
            v["hartlap_factor"].as_f64().unwrap() < 1.0,
            "mock covariance must carry the Hartlap factor"
        );
        let pull = (al - expected) / err;
        eprintln!("seed {seed}: alpha {al:.4} (expected {expected:.4}), pull {pull:+.2}");
        assert!(pull.abs() < 3.0, "seed {seed}: pull {pull}");
        alphas.push(al);
    }
    let n = alphas.len() as f64;
    let mean = alphas.iter().sum::<f64>() / n;
    let sd = (alphas.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    eprintln!(
        "mean alpha {mean:.4} +- {:.4} (scatter {sd:.4}), expected {expected:.4}",
        sd / n.sqrt()
    );
    assert!(
        (mean - expected).abs() < sd,
        "mean {mean} vs expected {expected}, scatter {sd}"
    );
}
