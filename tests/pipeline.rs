//! End-to-end checks of `ringscale run`: a plan equals the separate commands bit for bit,
//! killed runs resume to identical bytes, job-array shards of any count merge to the same
//! result, foreign shards are refused, plan typos are errors, and the Slurm scripts parse.
//! All references are our own single-process runs (exact equality is the property under test).
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_ringscale"))
}

/// Uniform points in a sky patch (RA 150-170, Dec 0-20 deg, 0.4 < z < 0.6), seeded.
fn write_catalogue(path: &Path, n: usize, seed: u64) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut s = String::from("RA,DEC,Z\n");
    for _ in 0..n {
        s.push_str(&format!(
            "{:.6},{:.6},{:.6}\n",
            rng.gen_range(150.0..170.0),
            rng.gen_range(0.0..20.0),
            rng.gen_range(0.4..0.6)
        ));
    }
    std::fs::write(path, s).unwrap();
}

/// A folder with galaxies, randoms and a plan; `extra` is appended to the plan.
fn setup(extra: &str) -> (tempfile::TempDir, PathBuf) {
    let d = tempfile::tempdir().unwrap();
    write_catalogue(&d.path().join("g.csv"), 700, 11);
    write_catalogue(&d.path().join("r.csv"), 2000, 12);
    let plan = d.path().join("plan.toml");
    std::fs::write(&plan, plan_text(extra)).unwrap();
    (d, plan)
}

fn plan_text(extra: &str) -> String {
    format!(
        r#"output = "out"
[inputs]
data = "g.csv"
randoms = "r.csv"
[binning]
edges = "40:160:8"
[estimator]
regions = 12
rr_splits = 2
[fit]
range = [40.0, 160.0]
plots = false
[run]
units = 5
{extra}
"#
    )
}

fn ok(out: Output) -> Output {
    assert!(
        out.status.success(),
        "command failed: {}\n{}",
        out.status,
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

fn run_plan(plan: &Path, args: &[&str]) -> Output {
    bin()
        .arg("run")
        .arg(plan)
        .args(args)
        .args(["--threads", "2"])
        .output()
        .unwrap()
}

/// All result files under `dir` (relative path -> bytes), without provenance of the run itself
/// (manifest timings, checkpoints, shard records).
fn results(dir: &Path) -> Vec<(String, Vec<u8>)> {
    fn walk(root: &Path, d: &Path, out: &mut Vec<(String, Vec<u8>)>) {
        for e in std::fs::read_dir(d).unwrap() {
            let p = e.unwrap().path();
            let rel = p.strip_prefix(root).unwrap().display().to_string();
            if rel == "manifest.json" || rel.starts_with("checkpoints") || rel.starts_with("shards")
            {
                continue;
            }
            if p.is_dir() {
                walk(root, &p, out);
            } else {
                out.push((rel, std::fs::read(&p).unwrap()));
            }
        }
    }
    let mut v = Vec::new();
    walk(dir, dir, &mut v);
    v.sort();
    v
}

fn assert_same(a: &Path, b: &Path) {
    let (ra, rb) = (results(a), results(b));
    let names = |r: &[(String, Vec<u8>)]| r.iter().map(|x| x.0.clone()).collect::<Vec<_>>();
    assert_eq!(names(&ra), names(&rb), "different file sets");
    for ((n, x), (_, y)) in ra.iter().zip(&rb) {
        assert!(
            x == y,
            "{n} differs between {} and {}",
            a.display(),
            b.display()
        );
    }
    assert!(ra.iter().any(|(n, _)| n == "fit/fit.json"), "no fit output");
}

fn temp_files(dir: &Path) -> Vec<PathBuf> {
    let mut v = Vec::new();
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            v.extend(temp_files(&p));
        } else if p.file_name().unwrap().to_string_lossy().starts_with('.') {
            v.push(p);
        }
    }
    v
}

#[test]
fn plan_equals_separate_commands() {
    let (d, plan) = setup("");
    ok(run_plan(&plan, &[]));
    let out = d.path().join("out");
    let cmd = d.path().join("cmd");
    let g = d.path().join("g.csv");
    let r = d.path().join("r.csv");
    let s = |p: &Path| p.display().to_string();
    ok(bin()
        .args(["count", "--data", &s(&g), "--randoms", &s(&r)])
        .args(["--cosmology", "planck18", "--edges", "40:160:8"])
        .args(["--rr-splits", "2", "--regions", "12", "--out"])
        .arg(cmd.join("counts"))
        .output()
        .unwrap());
    ok(bin()
        .args(["xi", "--counts"])
        .arg(cmd.join("counts"))
        .arg("--out")
        .arg(cmd.join("xi"))
        .output()
        .unwrap());
    ok(bin()
        .args(["fit", "--xi"])
        .arg(cmd.join("xi"))
        .arg("--out")
        .arg(cmd.join("fit"))
        .args(["--fit-range", "40:160", "--no-plots"])
        .output()
        .unwrap());
    let mut compared = 0;
    for (rel, bytes) in results(&cmd) {
        let mine = std::fs::read(out.join(&rel)).unwrap_or_else(|_| panic!("plan lacks {rel}"));
        assert!(mine == bytes, "{rel} differs from the separate command");
        compared += 1;
    }
    assert!(compared >= 10, "only {compared} files compared");
    // The manifest records the run.
    let m: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("manifest.json")).unwrap()).unwrap();
    assert_eq!(m["version"], env!("CARGO_PKG_VERSION"));
    assert_eq!(m["threads"], 2);
    assert_eq!(m["inputs"].as_array().unwrap().len(), 2);
    assert_eq!(m["stages"].as_array().unwrap().len(), 8);
    assert_eq!(stage_status(&out, "curvature"), "disabled");
    assert!(!out.join("curvature").exists());
    assert_eq!(stage_status(&out, "sweep"), "disabled");
    assert!(!out.join("sweep").exists());
    assert!(read_json(&out.join("summary.json"))["sweep"].is_null());
    // A rerun skips every stage and changes nothing.
    let before = results(&out);
    let o = ok(run_plan(&plan, &["--log-format", "json"]));
    let log = String::from_utf8_lossy(&o.stderr);
    assert!(
        log.lines()
            .all(|l| serde_json::from_str::<serde_json::Value>(l).is_ok()),
        "{log}"
    );
    assert!(
        log.contains(r#""event":"skipped","message":"skipped in"#),
        "{log}"
    );
    assert!(
        !log.contains(r#""event":"part""#),
        "rerun counted again: {log}"
    );
    assert!(before == results(&out));
}

fn read_json(p: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
}

/// The status `manifest.json` records for one stage.
fn stage_status(out: &Path, stage: &str) -> String {
    let m = read_json(&out.join("manifest.json"));
    let s = m["stages"].as_array().unwrap();
    let e = s
        .iter()
        .find(|e| e["stage"] == stage)
        .expect("stage missing");
    e["status"].as_str().unwrap().to_string()
}

#[test]
fn curvature_stage_equals_separate_command_and_resumes() {
    let (d, plan) = setup("[curvature]\nenabled = true\n");
    ok(run_plan(&plan, &[]));
    let out = d.path().join("out");
    let inf = out.join("curvature/inference.json");
    assert_eq!(stage_status(&out, "curvature"), "ran");
    // Same bytes as `ringscale curvature` on the run's own fit with its default seed.
    let sep = d.path().join("sep");
    ok(bin()
        .args(["curvature", "--bao"])
        .arg(out.join("fit/fit.json"))
        .arg("--out")
        .arg(&sep)
        .output()
        .unwrap());
    let mine = std::fs::read(&inf).unwrap();
    assert!(
        mine == std::fs::read(sep.join("inference.json")).unwrap(),
        "curvature/inference.json differs from the separate command"
    );
    assert!(out.join("curvature/posterior_omega_k.svg").is_file());
    // summary.json carries the statement.
    let statement = read_json(&inf)["statement"].clone();
    assert!(statement.as_str().is_some_and(|s| s.contains("Omega_k")));
    assert_eq!(read_json(&out.join("summary.json"))["curvature"], statement);
    // A rerun skips the stage and changes nothing.
    let before = results(&out);
    ok(run_plan(&plan, &[]));
    assert_eq!(stage_status(&out, "curvature"), "skipped");
    assert!(before == results(&out));
    // Killed right after the fit's checkpoint (the curvature marker is the last checkpoint
    // write), then resumed: identical bytes to the uninterrupted run.
    let writes = std::fs::read_dir(out.join("checkpoints")).unwrap().count();
    let out2 = d.path().join("out2");
    let o2 = out2.display().to_string();
    let killed = bin()
        .arg("run")
        .arg(&plan)
        .args(["--threads", "2", "--output", &o2])
        .env("RINGSCALE_TEST_ABORT_AFTER", (writes - 1).to_string())
        .output()
        .unwrap();
    assert_eq!(killed.status.code(), Some(137));
    assert!(out2.join("fit/fit.json").is_file());
    ok(run_plan(&plan, &["--output", &o2]));
    assert_eq!(stage_status(&out2, "fit"), "skipped");
    assert_eq!(stage_status(&out2, "curvature"), "ran");
    assert_same(&out, &out2);
}

#[test]
fn unknown_curvature_key_is_exit_2_naming_it() {
    let (_d, plan) = setup("[curvature]\nenabled = true\nsede = 3\n");
    let e = run_plan(&plan, &[]);
    assert_eq!(e.status.code(), Some(2));
    let msg = String::from_utf8_lossy(&e.stderr);
    assert!(msg.contains("sede"), "{msg}");
}

#[test]
fn sweep_stage_equals_separate_command_and_resumes() {
    let (d, plan) = setup("[sweep]\nenabled = true\nomega_k = [0.0, 0.05]\n");
    ok(run_plan(&plan, &[]));
    let out = d.path().join("out");
    assert_eq!(stage_status(&out, "sweep"), "ran");
    // Same bytes as `ringscale sweep` with the plan's options (plan_text above).
    let sep = d.path().join("sep");
    let s = |p: &Path| p.display().to_string();
    ok(bin()
        .args(["sweep", "--data", &s(&d.path().join("g.csv"))])
        .args(["--randoms", &s(&d.path().join("r.csv"))])
        .args(["--cosmology", "planck18", "--omega-k-list", "0.0,0.05"])
        .args(["--edges", "40:160:8", "--rr-splits", "2", "--regions", "12"])
        .args([
            "--region-seed",
            "1",
            "--fit-range",
            "40:160",
            "--sigma-nl",
            "8",
        ])
        .args(["--no-plots", "--threads", "2", "--out", &s(&sep)])
        .output()
        .unwrap());
    for f in ["sweep.json", "sweep.ecsv"] {
        assert!(
            std::fs::read(out.join("sweep").join(f)).unwrap()
                == std::fs::read(sep.join(f)).unwrap(),
            "sweep/{f} differs from the separate command"
        );
    }
    // summary.json carries the spread and the reference of sweep.json.
    let sj = read_json(&out.join("sweep/sweep.json"));
    assert_eq!(sj["rows"].as_array().unwrap().len(), 2);
    let sum = read_json(&out.join("summary.json"))["sweep"].clone();
    assert_eq!(sum["reference"], sj["reference"]);
    assert!(sum["reference"]
        .as_str()
        .is_some_and(|r| r.contains("+0.0000")));
    assert_eq!(sum["exact_spread_sigma"], sj["exact_spread_sigma"]);
    assert!(sum["exact_spread_sigma"].as_f64().is_some_and(|v| v >= 0.0));
    // A rerun skips the stage and changes nothing.
    let before = results(&out);
    ok(run_plan(&plan, &[]));
    assert_eq!(stage_status(&out, "sweep"), "skipped");
    assert!(before == results(&out));
}

#[test]
fn unknown_sweep_key_is_exit_2_naming_it() {
    let (_d, plan) = setup("[sweep]\nenabled = true\nomegak = [0.0]\n");
    let e = run_plan(&plan, &[]);
    assert_eq!(e.status.code(), Some(2));
    let msg = String::from_utf8_lossy(&e.stderr);
    assert!(msg.contains("omegak"), "{msg}");
}

#[test]
fn sweep_needs_survey_geometry_with_randoms() {
    let d = tempfile::tempdir().unwrap();
    write_catalogue(&d.path().join("g.csv"), 50, 11);
    let plan = d.path().join("plan.toml");
    std::fs::write(
        &plan,
        "output = \"out\"\n[inputs]\ndata = \"g.csv\"\n[sweep]\nenabled = true\n",
    )
    .unwrap();
    let e = run_plan(&plan, &[]);
    assert_eq!(e.status.code(), Some(2));
    let msg = String::from_utf8_lossy(&e.stderr);
    assert!(msg.contains("[sweep]") && msg.contains("randoms"), "{msg}");
}

#[test]
fn killed_runs_resume_bitwise() {
    let (d, plan) = setup("");
    let reference = d.path().join("ref");
    ok(run_plan(&plan, &["--output", reference.to_str().unwrap()]));
    // 21 checkpoints in all here: header + 4 pairings x 5 parts; then stage markers.
    for (i, aborts) in [vec![1], vec![4, 3], vec![12, 1, 6], vec![22]]
        .iter()
        .enumerate()
    {
        let out = d.path().join(format!("killed{i}"));
        for &n in aborts {
            let o = bin()
                .arg("run")
                .arg(&plan)
                .args(["--output", out.to_str().unwrap(), "--threads", "2"])
                .env("RINGSCALE_TEST_ABORT_AFTER", n.to_string())
                .output()
                .unwrap();
            assert!(!o.status.success(), "abort hook did not fire at {n}");
        }
        // A write cut short by a kill leaves a temporary behind; the resumed run removes it.
        std::fs::create_dir_all(out.join("counts")).unwrap();
        std::fs::write(out.join("counts/.dd.state.json.tmp-99999-0"), "half").unwrap();
        ok(run_plan(&plan, &["--output", out.to_str().unwrap()]));
        assert_same(&reference, &out);
        assert!(temp_files(&out).is_empty(), "{:?}", temp_files(&out));
    }
    // A real SIGKILL once counting has started.
    let out = d.path().join("sigkill");
    let mut child = bin()
        .arg("run")
        .arg(&plan)
        .args(["--output", out.to_str().unwrap(), "--threads", "1"])
        .args(["--log-format", "json"])
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut lines = BufReader::new(child.stderr.take().unwrap()).lines();
    for l in lines.by_ref() {
        if l.unwrap().contains(r#""event":"part""#) {
            break;
        }
    }
    child.kill().unwrap();
    child.wait().unwrap();
    ok(run_plan(&plan, &["--output", out.to_str().unwrap()]));
    assert_same(&reference, &out);
    assert!(temp_files(&out).is_empty());
}

#[test]
fn shards_merge_to_the_single_process_result() {
    let (d, plan) = setup("");
    let reference = d.path().join("ref");
    ok(run_plan(&plan, &["--output", reference.to_str().unwrap()]));
    for n in [1usize, 2, 5] {
        let out = d.path().join(format!("shards{n}"));
        let o = out.to_str().unwrap();
        for k in 0..n {
            if n == 2 {
                // Job-array form: k from SLURM_ARRAY_TASK_ID.
                ok(bin()
                    .arg("run")
                    .arg(&plan)
                    .args(["--shard", &format!("auto/{n}"), "--output", o])
                    .env("SLURM_ARRAY_TASK_ID", k.to_string())
                    .output()
                    .unwrap());
            } else {
                ok(run_plan(
                    &plan,
                    &["--shard", &format!("{k}/{n}"), "--output", o],
                ));
            }
            assert!(out.join(format!("shards/shard-{k}-of-{n}.json")).exists());
        }
        assert!(!out.join("xi").exists(), "a shard ran later stages");
        let m = ok(run_plan(&plan, &["--merge-only", "--output", o]));
        assert!(!String::from_utf8_lossy(&m.stderr).contains(r#""event":"part""#));
        assert_same(&reference, &out);
    }
}

#[test]
fn merge_refuses_foreign_or_incomplete_shards() {
    let (d, plan) = setup("");
    let other = d.path().join("other.toml");
    std::fs::write(&other, plan_text("").replace("40:160:8", "40:160:10")).unwrap();
    let out = d.path().join("mixed");
    let o = out.to_str().unwrap();
    ok(run_plan(&plan, &["--shard", "0/2", "--output", o]));
    // Missing shard 1: --merge-only says what is missing.
    let e = run_plan(&plan, &["--merge-only", "--output", o]);
    assert_eq!(e.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&e.stderr).contains("missing"));
    // A shard of another plan is refused as soon as it meets this folder...
    let e = run_plan(&other, &["--shard", "1/2", "--output", o]);
    assert_eq!(e.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&e.stderr).contains("different plan"));
    // ...and when its files are copied in anyway, merging refuses them.
    let elsewhere = d.path().join("elsewhere");
    ok(run_plan(
        &other,
        &["--shard", "1/2", "--output", elsewhere.to_str().unwrap()],
    ));
    for sub in ["shards", "checkpoints"] {
        for e in std::fs::read_dir(elsewhere.join(sub)).unwrap() {
            let p = e.unwrap().path();
            std::fs::copy(&p, out.join(sub).join(p.file_name().unwrap())).unwrap();
        }
    }
    for p in [&plan, &other] {
        let e = run_plan(p, &["--output", o]);
        assert_eq!(e.status.code(), Some(2));
        let msg = String::from_utf8_lossy(&e.stderr);
        assert!(msg.contains("different plan"), "{msg}");
    }
    // Same plan, but one shard claims another tool version.
    let out = d.path().join("versions");
    let o = out.to_str().unwrap();
    ok(run_plan(&plan, &["--shard", "0/2", "--output", o]));
    ok(run_plan(&plan, &["--shard", "1/2", "--output", o]));
    let rec = out.join("shards/shard-1-of-2.json");
    let text = std::fs::read_to_string(&rec).unwrap();
    let edited = text.replace(
        &format!("\"version\": \"{}\"", env!("CARGO_PKG_VERSION")),
        "\"version\": \"0.0.1-old\"",
    );
    assert_ne!(text, edited);
    std::fs::write(&rec, edited).unwrap();
    let e = run_plan(&plan, &["--merge-only", "--output", o]);
    assert_eq!(e.status.code(), Some(2));
    let msg = String::from_utf8_lossy(&e.stderr);
    assert!(
        msg.contains("0.0.1-old") && msg.contains("shard-1-of-2"),
        "{msg}"
    );
}

#[test]
fn unknown_plan_key_is_exit_2_with_key_and_line() {
    let (d, _) = setup("");
    let p = d.path().join("typo.toml");
    std::fs::write(&p, plan_text("").replace("rr_splits = 2", "rr_split = 2")).unwrap();
    let e = run_plan(&p, &[]);
    assert_eq!(e.status.code(), Some(2));
    let msg = String::from_utf8_lossy(&e.stderr);
    assert!(msg.contains("rr_split") && msg.contains("line 9"), "{msg}");
}

#[test]
fn dry_run_prints_plan_and_work() {
    let (d, plan) = setup("");
    let o = ok(run_plan(&plan, &["--dry-run"]));
    let text = String::from_utf8_lossy(&o.stdout);
    let toml_part = text.split("# work").next().unwrap();
    let v: toml::Value = toml::from_str(toml_part).unwrap();
    assert_eq!(v["estimator"]["rr_splits"].as_integer(), Some(2));
    // 700 galaxies: DD = 700*699/2 = 244650 pairs to consider (closed form).
    assert!(text.contains("DD 244650,"), "{text}");
    assert!(text.contains("memory estimate"), "{text}");
    assert!(!d.path().join("out/checkpoints").exists());
}

#[test]
fn mocks_give_a_mock_covariance() {
    let (d, _) = setup("");
    for i in 0..3 {
        write_catalogue(&d.path().join(format!("m{i}.csv")), 500, 100 + i);
    }
    let p = d.path().join("mocks.toml");
    let text = plan_text("")
        .replace("regions = 12\n", "")
        .replace(
            "randoms = \"r.csv\"",
            "randoms = \"r.csv\"\nmocks = [\"m0.csv\", \"m1.csv\", \"m2.csv\"]",
        )
        .replace("[fit]\n", "[fit]\nenabled = false\n");
    std::fs::write(&p, text).unwrap();
    ok(run_plan(&p, &[]));
    let out = d.path().join("out");
    let s: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("xi/xi_summary.json")).unwrap())
            .unwrap();
    assert_eq!(s["covariance"], "mocks");
    assert_eq!(s["n_samples"], 3);
    for i in 0..3 {
        assert!(out.join(format!("mocks/{i:03}-m{i}/xi/xi.ecsv")).exists());
    }
}

#[test]
fn slurm_scripts_are_valid() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("scripts");
    let mut seen = 0;
    let mut all = String::new();
    for e in std::fs::read_dir(&dir).unwrap() {
        let p = e.unwrap().path();
        let name = p.file_name().unwrap().to_string_lossy().into_owned();
        if !(name.starts_with("slurm_") && name.ends_with(".sh")) {
            continue;
        }
        seen += 1;
        let st = Command::new("bash").arg("-n").arg(&p).status().unwrap();
        assert!(st.success(), "{name}: bash -n failed");
        let text = std::fs::read_to_string(&p).unwrap();
        all.push_str(&text);
        for line in text.lines().filter(|l| l.starts_with("#SBATCH")) {
            let toks: Vec<&str> = line["#SBATCH".len()..].split_whitespace().collect();
            assert!(!toks.is_empty(), "{name}: empty directive");
            let mut i = 0;
            while i < toks.len() {
                let t = toks[i];
                if let Some(long) = t.strip_prefix("--") {
                    let key = long.split('=').next().unwrap();
                    assert!(
                        !key.is_empty() && key.chars().all(|c| c.is_ascii_lowercase() || c == '-'),
                        "{name}: bad option in '{line}'"
                    );
                    if let Some((_, v)) = long.split_once('=') {
                        assert!(!v.is_empty(), "{name}: empty value in '{line}'");
                    }
                    i += 1;
                } else if t.len() == 2 && t.starts_with('-') {
                    assert!(
                        i + 1 < toks.len(),
                        "{name}: '{t}' needs a value in '{line}'"
                    );
                    i += 2;
                } else if t.starts_with('#') {
                    break; // trailing comment
                } else {
                    panic!("{name}: cannot parse '{line}'");
                }
            }
        }
    }
    assert!(seen >= 3, "expected the array, merge and MPI scripts");
    assert!(all.contains("--array="));
    assert!(all.contains("--dependency=afterok:"));
    assert!(all.contains("--mpi"));
}

#[test]
fn shipped_example_plans_are_valid() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo_catalogs/plans");
    let mut n = 0;
    for e in std::fs::read_dir(&dir).unwrap() {
        let p = e.unwrap().path();
        if p.extension().is_some_and(|x| x == "toml") {
            let plan = ringscale::pipeline::load_plan(&p)
                .unwrap_or_else(|e| panic!("{}: {e}", p.display()));
            assert!(plan
                .inputs
                .data
                .to_string_lossy()
                .contains("lantern_bay_galaxies"));
            n += 1;
        }
    }
    assert!(n >= 2);
}
