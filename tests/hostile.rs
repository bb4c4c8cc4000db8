//! Hostile-input corpus: every case generates a bad input in a temporary folder, runs the real
//! binary on it and checks that it fails cleanly: no panic, the documented exit code (2 bad
//! input, 3 resource), a message naming the file/row/column or option, and no partial output in
//! the --out folder (absent or empty). Positive cases (BOM, CRLF, comments, integer positions,
//! warnings) check that awkward but valid files are accepted.
//!
//! The corpus itself lives in `tests/hostile/cases.rs`; see `tests/hostile/README.md`.
//!
//! Full-disk simulation: `RINGSCALE_TEST_FAIL_WRITE_AFTER_BYTES=N` makes the atomic writer of
//! the binary fail with "no space left" after N bytes (`report::atomic::FAIL_WRITE_ENV`). When
//! the tests run as root and may mount, a real 16 KiB tmpfs is used as well (skipped otherwise).
//!
//! Free-space guard: `RINGSCALE_TEST_FREE_BYTES=N` makes the binary believe its output
//! filesystem has N free bytes (`report::space::FREE_BYTES_ENV`), so outputs that would not fit
//! are refused with exit 3 before any file is written.
#[path = "hostile/cases.rs"]
mod cases;

use cases::{Case, Expect};
use std::path::Path;
use std::process::Command;

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_ringscale"))
}

/// Files left in `dir` (recursively), or none when it does not exist.
fn leftovers(dir: &Path) -> Vec<String> {
    let mut out = Vec::new();
    if let Ok(rd) = std::fs::read_dir(dir) {
        for e in rd.flatten() {
            let p = e.path();
            if p.is_dir() {
                out.extend(leftovers(&p));
            } else {
                out.push(p.display().to_string());
            }
        }
    }
    out
}

/// Run one case; return a description of what went wrong, if anything.
fn check(case: &Case) -> Option<String> {
    let mut cmd = bin();
    cmd.args(&case.args);
    for (k, v) in &case.env {
        cmd.env(k, v);
    }
    let out = match cmd.output() {
        Ok(o) => o,
        Err(e) => return Some(format!("cannot run the binary: {e}")),
    };
    let code = out.status.code().unwrap_or(-1);
    let err = String::from_utf8_lossy(&out.stderr);
    let mut problems = Vec::new();
    if err.contains("panicked") {
        problems.push("the binary panicked".to_string());
    }
    let (want_code, frags) = match &case.expect {
        Expect::Fail { code, fragments } => (*code, fragments),
        Expect::Ok { fragments } => (0, fragments),
    };
    if code != want_code {
        problems.push(format!("exit code {code}, expected {want_code}"));
    }
    for f in frags {
        if !err.contains(f.as_str()) {
            problems.push(format!("stderr lacks '{f}'"));
        }
    }
    if let (Expect::Fail { .. }, Some(dir)) = (&case.expect, &case.out) {
        let left = leftovers(dir);
        if !left.is_empty() {
            problems.push(format!("partial output left behind: {left:?}"));
        }
    }
    if problems.is_empty() {
        None
    } else {
        Some(format!("{}\n  stderr: {}", problems.join("; "), err.trim()))
    }
}

#[test]
fn hostile_corpus() {
    let dir = tempfile::tempdir().unwrap();
    let corpus = cases::all(dir.path());
    let n_fail = corpus
        .iter()
        .filter(|c| matches!(c.expect, Expect::Fail { .. }))
        .count();
    assert!(
        n_fail >= 30,
        "the corpus must hold at least 30 bad inputs, it has {n_fail}"
    );
    let mut failures = Vec::new();
    for case in &corpus {
        if let Some(why) = check(case) {
            failures.push(format!("case {}: {why}", case.name));
        }
    }
    assert!(
        failures.is_empty(),
        "{} of {} cases failed:\n{}",
        failures.len(),
        corpus.len(),
        failures.join("\n")
    );
}

/// Every bad-input message names where the problem is: the file (or the option) is in every
/// expected fragment list. This guards the corpus itself against vague expectations.
#[test]
fn every_failure_case_names_a_place() {
    let dir = tempfile::tempdir().unwrap();
    for case in cases::all(dir.path()) {
        if let Expect::Fail { fragments, .. } = &case.expect {
            assert!(
                fragments.iter().any(|f| f.contains('.')
                    || f.contains("--")
                    || f.contains('/')
                    || f.starts_with("edges '")
                    || f.starts_with("row ")
                    || f.starts_with("line ")),
                "case {} expects no file, row, line or option in its message",
                case.name
            );
        }
    }
}

/// A real full filesystem: a 16 KiB tmpfs as the output folder. Needs root and permission to
/// mount (skipped, with a note, when either is missing).
#[test]
fn real_full_disk_exit_3_and_no_partial_file() {
    let dir = tempfile::tempdir().unwrap();
    let mnt = dir.path().join("small");
    std::fs::create_dir(&mnt).unwrap();
    let mounted = Command::new("mount")
        .args(["-t", "tmpfs", "-o", "size=16k", "tmpfs"])
        .arg(&mnt)
        .output()
        .map(|o| o.status.success())
        .unwrap_or(false);
    if !mounted {
        eprintln!("skipped: cannot mount a tmpfs here (not root or not permitted)");
        return;
    }
    struct Unmount<'a>(&'a Path);
    impl Drop for Unmount<'_> {
        fn drop(&mut self) {
            let _ = Command::new("umount").arg(self.0).status();
        }
    }
    let _guard = Unmount(&mnt);
    let (g, r) = cases::good_pair(dir.path());
    let out = mnt.join("counts");
    // Many bins make the count files far larger than 16 KiB.
    let o = bin()
        .args(["count", "--cosmology", "planck18", "--edges", "0:60:600"])
        .args(["--mu-bins", "4", "--threads", "1", "--data"])
        .arg(&g)
        .arg("--randoms")
        .arg(&r)
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(3), "{err}");
    assert!(!err.contains("panicked"), "{err}");
    assert!(err.contains("counts"), "message lacks the path: {err}");
    assert!(leftovers(&out).is_empty(), "{:?}", leftovers(&out));
}

/// The counts-folder estimate behind the free-space guard (`report::space`) is an upper bound
/// on what `count` writes, and not a wild one (within 4x), with mu bins and jackknife regions,
/// where the state files and region arrays dominate. Sizes are measured, no external source.
#[test]
fn counts_folder_estimate_bounds_written_bytes() {
    use ringscale::app::count::{folder_bytes_estimate, state_bytes_estimate};
    use ringscale::pairs::Binning;
    let dir = tempfile::tempdir().unwrap();
    let (g, r) = cases::good_pair(dir.path());
    let out = dir.path().join("counts");
    let o = bin()
        .args(["count", "--cosmology", "planck18", "--edges", "0:60:30"])
        .args([
            "--mu-bins",
            "4",
            "--regions",
            "8",
            "--threads",
            "1",
            "--data",
        ])
        .arg(&g)
        .arg("--randoms")
        .arg(&r)
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let files = leftovers(&out);
    assert_eq!(files.len(), 10, "{files:?}");
    let written: u64 = files
        .iter()
        .map(|p| std::fs::metadata(p).unwrap().len())
        .sum();
    let edges: Vec<f64> = (0..=30).map(|i| 2.0 * i as f64).collect();
    let binning = Binning::new(edges, 4).unwrap();
    let est = folder_bytes_estimate(3, &binning, 8);
    assert!(written <= est, "{written} bytes written, estimate {est}");
    assert!(est <= 4 * written, "estimate {est} far above {written}");
    // The state estimate (also used for the checkpoints of plan runs) bounds each state file.
    let state_est = state_bytes_estimate(&binning, 8);
    for p in files.iter().filter(|p| p.ends_with(".state.json")) {
        let size = std::fs::metadata(p).unwrap().len();
        assert!(size <= state_est, "{p}: {size} bytes, estimate {state_est}");
        assert!(state_est <= 4 * size, "{p}: estimate {state_est} > 4x");
    }
}

/// The coverage check against a direct count: randoms on RA 155-165 cover exactly the galaxies
/// with RA >= 155; cells within one cell of a random count as covered (a grid-resolution
/// allowance), so galaxies in the two cell columns below RA = 155 may count as covered too, and
/// a matching footprint gives none.
#[test]
fn uncovered_fraction_matches_direct_count() {
    use ringscale::app::count::uncovered_fraction;
    use ringscale::catalog::{read_catalogue, ColumnMap, RowFilter};
    let dir = tempfile::tempdir().unwrap();
    let (g, r) = cases::good_pair(dir.path());
    let map = ColumnMap::default_sky();
    let gal = read_catalogue(&g, &map, &RowFilter::default()).unwrap();
    let ran = read_catalogue(&r, &map, &RowFilter::default()).unwrap();
    let (f, n, _) = uncovered_fraction(&gal, &ran);
    assert_eq!((f, n), (0.0, 0));
    // Shift the randoms by +5 deg in RA.
    let mut shifted = ran.clone();
    shifted.pos[0].iter_mut().for_each(|a| *a += 5.0);
    let (f, n, cells) = uncovered_fraction(&gal, &shifted);
    let direct = gal.ra().iter().filter(|&&a| a < 155.0).count();
    let cell_width = 360.0 / (2.0 * (cells as f64 / 2.0).sqrt());
    let edge_col = gal
        .ra()
        .iter()
        .filter(|&&a| a < 155.0 && a >= 155.0 - 2.0 * cell_width)
        .count();
    assert!(
        n <= direct && n + edge_col >= direct && n >= direct / 2,
        "uncovered {n}, direct {direct}, edge column {edge_col}"
    );
    assert!((f - n as f64 / gal.len() as f64).abs() < 1e-15);
    assert!(n > 0);
}
