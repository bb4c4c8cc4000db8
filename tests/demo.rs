//! `ringscale demo` on the shipped catalogues: all plots and a summary whose alpha is consistent
//! with the demo universe's true cosmology (pull below 3; alpha_expected is computed by the demo
//! from the true and fiducial cosmologies, and recomputed here independently).
use ringscale::cosmology::Cosmology;
use std::path::Path;
use std::process::Command;

#[test]
fn demo_produces_plots_and_consistent_alpha() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("demo");
    let o = Command::new(env!("CARGO_BIN_EXE_ringscale"))
        .current_dir(root)
        .args(["demo", "--out"])
        .arg(&out)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(
        text.contains("alpha =") && text.contains("D_V/r_d"),
        "{text}"
    );
    let v: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("summary.json")).unwrap()).unwrap();
    for k in [
        "alpha",
        "alpha_err_lo",
        "alpha_err_hi",
        "dv_over_rd",
        "dv_over_rd_err",
        "z_eff",
        "detection_sigma",
        "alpha_expected",
    ] {
        assert!(v[k].as_f64().is_some(), "summary.json lacks {k}");
    }
    for stem in [
        "xi_fit",
        "chi2_alpha",
        "correlation_matrix",
        "footprint",
        "nz",
        "posterior_omega_k",
    ] {
        for ext in ["png", "svg"] {
            assert!(
                out.join(format!("{stem}.{ext}")).exists(),
                "{stem}.{ext} missing"
            );
        }
    }
    let truth =
        Cosmology::from_toml_file(&root.join("demo_catalogs/lantern_bay_truth.toml")).unwrap();
    let fid = Cosmology::planck18();
    let z = v["z_eff"].as_f64().unwrap();
    let expected = (truth.dv(z) / truth.r_d()) / (fid.dv(z) / fid.r_d());
    assert!((v["alpha_expected"].as_f64().unwrap() - expected).abs() < 1e-12);
    let a = v["alpha"].as_f64().unwrap();
    let err = if a > expected {
        v["alpha_err_lo"].as_f64().unwrap()
    } else {
        v["alpha_err_hi"].as_f64().unwrap()
    };
    assert!(
        ((a - expected) / err).abs() < 3.0,
        "alpha {a} vs expected {expected} (err {err})"
    );
    assert!(
        v["detection_sigma"].as_f64().unwrap() > 2.0,
        "the acoustic peak should be visible in the demo"
    );
}
