//! Smoke test of `ringscale bench --quick`: it runs, writes valid JSON with every workload, and
//! its in-run baselines agree with the engine on the number of pairs (kiddo within-radius query;
//! common practice, no source). No timing is asserted.
use std::process::Command;

#[test]
fn bench_quick_writes_json() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("bench.json");
    let work = dir.path().join("work");
    let st = Command::new(env!("CARGO_BIN_EXE_ringscale"))
        .args(["bench", "--quick", "--threads", "2", "--out"])
        .arg(&out)
        .arg("--workdir")
        .arg(&work)
        .output()
        .unwrap();
    assert!(
        st.status.success(),
        "bench failed: {}",
        String::from_utf8_lossy(&st.stderr)
    );
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&out).unwrap()).unwrap();
    let rows = v["rows"].as_array().unwrap();
    let names: Vec<&str> = rows
        .iter()
        .map(|r| r["workload"].as_str().unwrap())
        .collect();
    for want in [
        "box 3000 non-periodic",
        "box 3000 periodic",
        "survey DD+DR+RR",
        "survey RR",
    ] {
        assert!(
            names.contains(&want),
            "missing workload {want} in {names:?}"
        );
    }
    for r in rows {
        assert!(r["pairs"].as_u64().unwrap() > 0, "{r}");
        assert!(r["wall_1t_s"].as_f64().unwrap() > 0.0, "{r}");
        assert_eq!(r["threads"].as_u64(), Some(2));
        for n in r["notes"].as_array().unwrap() {
            let n = n.as_str().unwrap();
            assert!(!n.contains("counted"), "baseline disagrees: {n}");
        }
    }
    let kid = rows
        .iter()
        .find(|r| r["workload"] == "box 3000 non-periodic")
        .unwrap();
    assert!(kid["vs_kiddo"].as_f64().unwrap() > 0.0);
    assert!(v["split_rr_time_ratio"].as_f64().unwrap() > 0.0);
    assert!(work.join("box_3000.csv").exists());
}
