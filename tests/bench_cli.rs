//! Smoke test of `ringscale bench --quick`: it runs, writes valid JSON with every workload, and
//! its in-run baselines agree with the engine on the number of pairs (kiddo within-radius query;
//! common practice, no source). No timing is asserted.
use std::path::Path;
use std::process::Command;

/// Run `ringscale bench ARGS --out OUT`, require success, and return the JSON report.
fn bench_json(args: &[&str], out: &Path) -> serde_json::Value {
    let st = Command::new(env!("CARGO_BIN_EXE_ringscale"))
        .arg("bench")
        .args(args)
        .arg("--out")
        .arg(out)
        .output()
        .unwrap();
    assert!(
        st.status.success(),
        "bench failed: {}",
        String::from_utf8_lossy(&st.stderr)
    );
    serde_json::from_str(&std::fs::read_to_string(out).unwrap()).unwrap()
}

#[test]
fn bench_quick_writes_json() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("bench.json");
    let work = dir.path().join("work");
    let w = work.to_str().unwrap();
    let v = bench_json(&["--quick", "--threads", "2", "--workdir", w], &out);
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

#[test]
fn bench_only_runs_the_chosen_part() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("bench.json");
    let v = bench_json(&["--quick", "--threads", "2", "--only", "split-rr"], &out);
    // no box or survey rows, no sweep, but the split-RR ratios
    assert!(v["rows"].as_array().unwrap().is_empty(), "{v}");
    assert!(v["sweep5_time_ratio"].is_null(), "{v}");
    assert!(v["split_rr_time_ratio"].as_f64().unwrap() > 0.0);
    assert!(v["split_rr_time_ratio_1t"].as_f64().unwrap() > 0.0);

    // boxes only, without the baselines
    let args = [
        "--quick",
        "--threads",
        "2",
        "--only",
        "boxes",
        "--no-baselines",
    ];
    let v = bench_json(&args, &out);
    let rows = v["rows"].as_array().unwrap();
    assert_eq!(rows.len(), 2, "{v}");
    for r in rows {
        assert!(r["workload"].as_str().unwrap().starts_with("box "), "{r}");
        assert!(r["pairs"].as_u64().unwrap() > 0, "{r}");
        assert!(r["vs_kiddo"].is_null() && r["vs_scipy"].is_null(), "{r}");
    }
    assert!(v["split_rr_time_ratio"].is_null(), "{v}");

    let bad = Command::new(env!("CARGO_BIN_EXE_ringscale"))
        .args(["bench", "--quick", "--only", "boxes,nope"])
        .output()
        .unwrap();
    assert_eq!(bad.status.code(), Some(2));
    let err = String::from_utf8_lossy(&bad.stderr);
    assert!(err.contains("nope") && err.contains("split-rr"), "{err}");
}
