//! The count -> xi -> fit chain through the command line: determinism across threads and
//! shards, exact shard merging, split-random normalisation, and bad input handling.
use std::path::Path;
use std::process::Command;

fn rs(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_ringscale"))
        .args(args)
        .output()
        .unwrap()
}

fn ok(args: &[&str]) {
    let o = rs(args);
    assert!(
        o.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
}

/// A small clustered survey (lognormal mock through the CLI, seeded) in a temp folder.
fn survey(dir: &Path) -> (String, String) {
    let g = dir.join("g.fits").display().to_string();
    let r = dir.join("r.fits").display().to_string();
    ok(&[
        "mock",
        "survey",
        "--cap",
        "40,10,12",
        "--z-range",
        "0.45:0.6",
        "--nbar",
        "2e-4",
        "--n-grid",
        "64",
        "--seed",
        "5",
        "--random-factor",
        "3",
        "--out-galaxies",
        &g,
        "--out-randoms",
        &r,
    ]);
    (g, r)
}

fn read(p: &Path) -> Vec<u8> {
    std::fs::read(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

#[test]
fn threads_and_shards_give_identical_files() {
    let tmp = tempfile::tempdir().unwrap();
    let d = tmp.path();
    let (g, r) = survey(d);
    let base = [
        "count",
        "--data",
        &g,
        "--randoms",
        &r,
        "--cosmology",
        "planck18",
        "--edges",
        "0:120:12",
        "--mu-bins",
        "3",
        "--regions",
        "6",
        "--rr-splits",
        "2",
    ];
    let out = |name: &str| d.join(name).display().to_string();
    for (threads, name) in [("1", "t1"), ("2", "t2"), ("7", "t7")] {
        let mut a = base.to_vec();
        let o = out(name);
        a.extend(["--threads", threads, "--out", &o]);
        ok(&a);
    }
    let mut shard_dirs = Vec::new();
    for k in 0..3 {
        let mut a = base.to_vec();
        let o = out(&format!("s{k}"));
        let spec = format!("{k}/3");
        a.extend(["--shard", &spec, "--out", &o]);
        ok(&a);
        shard_dirs.push(o);
    }
    let merged = out("merged");
    let mut m = vec!["merge", "--out", &merged];
    m.extend(shard_dirs.iter().map(|s| s.as_str()));
    ok(&m);
    for f in [
        "dd.state.json",
        "dr.state.json",
        "rr.state.json",
        "dd.ecsv",
        "rr_regions.npy",
    ] {
        let a = read(&d.join("t1").join(f));
        assert_eq!(a, read(&d.join("t2").join(f)), "{f}: 1 vs 2 threads");
        assert_eq!(a, read(&d.join("t7").join(f)), "{f}: 1 vs 7 threads");
        assert_eq!(
            a,
            read(&d.join("merged").join(f)),
            "{f}: unsharded vs 3 shards merged"
        );
    }
    // A partial shard cannot be turned into xi, and an incomplete merge is refused.
    let x = out("x");
    let o = rs(&["xi", "--counts", &shard_dirs[0], "--out", &x]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("merge"));
    let o = rs(&["merge", "--out", &x, &shard_dirs[0], &shard_dirs[1]]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("missing"));
    // Shards of different runs do not merge.
    let other = out("other");
    let mut a = base.to_vec();
    a[8] = "0:100:12";
    a.extend(["--shard", "2/3", "--out", &other]);
    ok(&a);
    let o = rs(&["merge", "--out", &x, &shard_dirs[0], &shard_dirs[1], &other]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("different run"));
}

#[test]
fn full_chain_writes_results_with_required_fields() {
    let tmp = tempfile::tempdir().unwrap();
    let d = tmp.path();
    let (g, r) = survey(d);
    let c = d.join("c").display().to_string();
    let x = d.join("x").display().to_string();
    let f = d.join("f").display().to_string();
    ok(&[
        "count",
        "--data",
        &g,
        "--randoms",
        &r,
        "--cosmology",
        "planck18",
        "--edges",
        "0:200:20",
        "--regions",
        "30",
        "--out",
        &c,
    ]);
    ok(&["xi", "--counts", &c, "--out", &x]);
    ok(&["fit", "--xi", &x, "--out", &f, "--rd", "147.09"]);
    let v: serde_json::Value = serde_json::from_slice(&read(&d.join("f/fit.json"))).unwrap();
    for k in [
        "alpha",
        "alpha_err_lo",
        "alpha_err_hi",
        "chi2_min",
        "dof",
        "detection_sigma",
        "z_eff",
        "dv_over_rd",
        "dv_over_rd_err",
        "dv_fid_mpc",
        "rd_fid_mpc",
        "fit_range_mpc_h",
        "fiducial",
    ] {
        assert!(!v[k].is_null(), "fit.json lacks {k}");
    }
    let z = v["z_eff"].as_f64().unwrap();
    assert!(
        z > 0.45 && z < 0.6,
        "z_eff {z} outside the catalogue's range"
    );
    // D_V/r_d = alpha D_V^fid / r_d^fid (definition).
    let a = v["alpha"].as_f64().unwrap();
    let dv = v["dv_over_rd"].as_f64().unwrap();
    let expect = a * v["dv_fid_mpc"].as_f64().unwrap() / v["rd_fid_mpc"].as_f64().unwrap();
    assert!((dv / expect - 1.0).abs() < 1e-12);
    for p in [
        "xi_fit.png",
        "xi_fit.svg",
        "chi2_alpha.png",
        "chi2_alpha.svg",
        "chi2.ecsv",
    ] {
        assert!(d.join("f").join(p).exists(), "{p} missing");
    }
    // Fit range outside the bins and a NaN-producing range are input errors.
    let o = rs(&["fit", "--xi", &x, "--out", &f, "--fit-range", "300:400"]);
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn split_randoms_agree_with_full_rr() {
    // Keihanen et al. 2019 (A&A 631, A73): normalised split RR estimates the full RR.
    let tmp = tempfile::tempdir().unwrap();
    let d = tmp.path();
    let (g, r) = survey(d);
    let full = d.join("full").display().to_string();
    let split = d.join("split").display().to_string();
    let base = [
        "count",
        "--data",
        &g,
        "--randoms",
        &r,
        "--cosmology",
        "planck18",
        "--edges",
        "20:120:5",
    ];
    let mut a = base.to_vec();
    a.extend(["--out", &full]);
    ok(&a);
    let mut a = base.to_vec();
    a.extend(["--rr-splits", "4", "--out", &split]);
    ok(&a);
    let load = |dir: &str| -> Vec<f64> {
        let v: serde_json::Value =
            serde_json::from_slice(&read(&Path::new(dir).join("rr.state.json"))).unwrap();
        let norm = v["norm"]["total"].as_f64().unwrap();
        let n: Vec<f64> = v["counts"]["npairs"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect();
        n.iter().map(|x| x / norm).collect()
    };
    let (f, s) = (load(&full), load(&split));
    let v: serde_json::Value =
        serde_json::from_slice(&read(&Path::new(&split).join("rr.state.json"))).unwrap();
    let raw: Vec<f64> = v["counts"]["npairs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect();
    for i in 0..f.len() {
        // Poisson error of the split count (unit weights), 5 sigma.
        let tol = 5.0 * s[i] / raw[i].sqrt();
        assert!(
            (f[i] - s[i]).abs() < tol,
            "bin {i}: full {} split {}",
            f[i],
            s[i]
        );
    }
}

fn expect_err(args: &[&str], code: i32, fragment: &str, out_dir: &Path) {
    let o = rs(args);
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(code), "{args:?}: {err}");
    assert!(
        err.contains(fragment),
        "{args:?}: '{fragment}' not in: {err}"
    );
    assert!(!err.contains("panicked"));
    assert!(
        !out_dir.exists() || std::fs::read_dir(out_dir).unwrap().next().is_none(),
        "{args:?} left output behind"
    );
}

#[test]
fn count_bad_inputs() {
    let tmp = tempfile::tempdir().unwrap();
    let d = tmp.path();
    let out = d.join("out");
    let o = out.display().to_string();
    let cat = d.join("c.csv");
    std::fs::write(&cat, "X,Y,Z\n1,2,3\n40,50,60\n10,10,10\n").unwrap();
    let c = cat.display().to_string();
    let empty = d.join("e.csv");
    std::fs::write(&empty, "X,Y,Z\n").unwrap();
    let e = empty.display().to_string();
    expect_err(
        &[
            "count",
            "--data",
            &e,
            "--cartesian",
            "--edges",
            "0:10:2",
            "--out",
            &o,
        ],
        2,
        "empty",
        &out,
    );
    expect_err(
        &[
            "count",
            "--data",
            &c,
            "--cartesian",
            "--edges",
            "10:0:2",
            "--out",
            &o,
        ],
        2,
        "edges",
        &out,
    );
    let edges = d.join("edges.txt");
    std::fs::write(&edges, "0 5 5 10\n").unwrap();
    let ef = edges.display().to_string();
    expect_err(
        &[
            "count",
            "--data",
            &c,
            "--cartesian",
            "--edges-file",
            &ef,
            "--out",
            &o,
        ],
        2,
        "strictly increasing",
        &out,
    );
    expect_err(
        &[
            "count",
            "--data",
            &c,
            "--cartesian",
            "--box",
            "100",
            "--edges",
            "0:60:3",
            "--out",
            &o,
        ],
        2,
        "half the box",
        &out,
    );
    expect_err(
        &[
            "count",
            "--data",
            &c,
            "--cartesian",
            "--x-column",
            "RA",
            "--edges",
            "0:10:2",
            "--out",
            &o,
        ],
        2,
        "'RA'",
        &out,
    );
    let reg = d.join("r.csv");
    std::fs::write(&reg, "X,Y,Z,JK\n1,2,3,0\n4,5,6,1.5\n").unwrap();
    let rg = reg.display().to_string();
    expect_err(
        &[
            "count",
            "--data",
            &rg,
            "--cartesian",
            "--region-column",
            "JK",
            "--edges",
            "0:10:2",
            "--out",
            &o,
        ],
        2,
        "row 2",
        &out,
    );
    expect_err(
        &[
            "count",
            "--data",
            &c,
            "--cartesian",
            "--edges",
            "0:10:2",
            "--max-memory",
            "0.001",
            "--out",
            &o,
        ],
        3,
        "--max-memory",
        &out,
    );
    expect_err(
        &[
            "count",
            "--data",
            &c,
            "--cartesian",
            "--box",
            "50",
            "--edges",
            "0:10:2",
            "--out",
            &o,
        ],
        2,
        "outside the box",
        &out,
    );
}
