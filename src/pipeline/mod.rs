//! Unattended runs: one TOML plan drives load -> count -> estimate -> fit -> (curvature) ->
//! (sweep) -> report, with content-addressed checkpoints so a rerun (or a run resumed after a kill) skips
//! finished work and ends with the same bytes as an uninterrupted run.
//!
//! Counting is cut into `run.units` deterministic parts per pairing (dd, dr, each RR subset);
//! part u counts the pair-engine shard (u, units), and integer pair sums merge exactly, so any
//! set of processes that together finish all parts gives bitwise the single-process result.
//! Job-array shard k of N takes the parts u with u % N == k and records itself in
//! `shards/shard-K-of-N.json`; a run without `--shard` checks those records against its own
//! plan, reuses their parts, counts whatever is missing and finishes the later stages.
//!
//! Output folder layout:
//! - `counts/`, `xi/`, `fit/`, `curvature/`, `sweep/`: the same files `ringscale count`, `xi`,
//!   `fit`, `curvature` and `sweep` write (`curvature/` and `sweep/` only when their plan table
//!   says `enabled = true`);
//! - `mocks/NNN-NAME/{counts,xi}/` for each mock catalogue;
//! - `summary.json`: the headline numbers; `manifest.json`: provenance, timings, peak memory;
//! - `checkpoints/`: per-part counts, count headers and stage markers; `shards/`: shard records.
pub mod checkpoint;
pub mod log;
#[cfg(feature = "mpi")]
pub mod mpi;
pub mod plan;

use crate::app::count::{self, assemble, CountHeader, CountState, Piece};
use crate::pairs::PairCounts;
use crate::{Error, Result};
use checkpoint::{hash_file, hash_json, StageDone};
use log::Logger;
pub use plan::{load_plan, parse_plan, Plan};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Git revision baked in at build time (`RINGSCALE_GIT_REV=$(git rev-parse HEAD) cargo build`).
pub const GIT_REVISION: &str = match option_env!("RINGSCALE_GIT_REV") {
    Some(v) => v,
    None => "unknown",
};

/// How to run a plan (from the command line).
#[derive(Debug, Clone, Default)]
pub struct RunOptions {
    /// Resolved thread count.
    pub threads: usize,
    /// (k, N): count only this job-array shard's parts, then stop.
    pub shard: Option<(usize, usize)>,
    /// Finish from existing parts only; fail if any part is missing.
    pub merge_only: bool,
    /// The plan file, for the manifest.
    pub plan_file: Option<PathBuf>,
}

/// One galaxy catalogue to count: the data or a mock.
#[derive(Debug, Clone)]
struct Target {
    name: String,
    path: PathBuf,
    /// Folder holding its counts/ and xi/ (the output root for the data).
    dir: PathBuf,
}

fn targets(plan: &Plan) -> Vec<Target> {
    let mut v = vec![Target {
        name: "data".into(),
        path: plan.inputs.data.clone(),
        dir: plan.output.clone(),
    }];
    for (i, m) in plan.inputs.mocks.iter().enumerate() {
        let stem = m
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "mock".into());
        let name = format!("{i:03}-{stem}");
        v.push(Target {
            dir: plan.output.join("mocks").join(&name),
            name: format!("mock {name}"),
            path: m.clone(),
        });
    }
    v
}

/// The pieces a plan counts, known without reading the catalogues.
fn plan_pieces(plan: &Plan) -> Vec<Piece> {
    let mut v = vec![Piece::Dd];
    if plan.inputs.randoms.is_some() {
        v.push(Piece::Dr);
        v.extend((0..plan.estimator.rr_splits).map(Piece::Rr));
    }
    v
}

/// Input file checksums by path.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct InputChecksum {
    pub role: String,
    pub path: String,
    pub sha256: String,
}

/// Everything a count depends on; its hash names the count's checkpoints.
#[derive(Serialize)]
struct CountIdentity<'a> {
    tool: &'static str,
    version: &'static str,
    data: &'a InputChecksum,
    randoms: Option<&'a InputChecksum>,
    cosmology_file_sha256: Option<String>,
    geometry: &'a plan::GeometryPlan,
    columns: &'a plan::Columns,
    binning: crate::pairs::Binning,
    rr_splits: usize,
    regions: usize,
    region_seed: u64,
    units: usize,
}

/// One checkpointed part of a count.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct UnitCheckpoint {
    pub count_key: String,
    pub version: String,
    pub piece: Piece,
    pub unit: usize,
    pub units: usize,
    pub counts: PairCounts,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
struct HeaderCheckpoint {
    count_key: String,
    version: String,
    header: CountHeader,
}

/// Timing of one stage.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct StageTiming {
    pub stage: String,
    pub status: String,
    pub seconds: f64,
}

/// `manifest.json` (and, per job-array shard, `shards/shard-K-of-N.json`).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Manifest {
    pub tool: String,
    pub version: String,
    pub git_revision: String,
    pub plan_file: Option<String>,
    pub plan: Plan,
    pub inputs: Vec<InputChecksum>,
    /// Count key per catalogue: shards are only merged when these agree.
    pub count_keys: BTreeMap<String, String>,
    pub threads: usize,
    pub units: usize,
    pub shard: Option<(usize, usize)>,
    pub units_counted_here: usize,
    pub stages: Vec<StageTiming>,
    pub peak_memory_kib: Option<u64>,
    pub covariance: String,
}

/// What a run did.
#[derive(Debug)]
pub struct RunSummary {
    pub manifest: Manifest,
    pub finished: bool,
}

/// Peak resident memory (VmHWM) of this process in KiB, where /proc offers it.
pub fn peak_memory_kib() -> Option<u64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = s.lines().find(|l| l.starts_with("VmHWM:"))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

struct Stages<'a> {
    log: &'a Logger,
    list: Vec<StageTiming>,
}

impl Stages<'_> {
    fn done(&mut self, stage: &str, status: &str, t: Instant) {
        let secs = t.elapsed().as_secs_f64();
        self.log.event(
            stage,
            status,
            &format!("{status} in {secs:.2} s"),
            serde_json::json!({"seconds": secs}),
        );
        self.list.push(StageTiming {
            stage: stage.into(),
            status: status.into(),
            seconds: secs,
        });
    }
}

fn checksum(role: &str, p: &Path) -> Result<InputChecksum> {
    Ok(InputChecksum {
        role: role.into(),
        path: p.display().to_string(),
        sha256: hash_file(p)?,
    })
}

fn short(key: &str) -> &str {
    &key[..24.min(key.len())]
}

/// Run (part of) a plan. See the module documentation for the stages and layout.
pub fn execute(plan: &Plan, opt: &RunOptions, log: &Logger) -> Result<RunSummary> {
    let out = &plan.output;
    count::ensure_writable(out)?;
    let ckdir = out.join("checkpoints");
    let mut st = Stages {
        log,
        list: Vec::new(),
    };
    if opt.shard.is_none() {
        let n = checkpoint::sweep_temps(out)?;
        if n > 0 {
            log.event(
                "load",
                "cleanup",
                &format!("removed {n} half-written file(s) left by an interrupted run"),
                serde_json::json!({"removed": n}),
            );
        }
    }

    // Load: checksums and keys.
    let t = Instant::now();
    log.event(
        "load",
        "start",
        "checksumming inputs",
        serde_json::json!({}),
    );
    let randoms = plan
        .inputs
        .randoms
        .as_ref()
        .map(|p| checksum("randoms", p))
        .transpose()?;
    let cosmo_sha = {
        let c = Path::new(&plan.geometry.cosmology);
        if plan.geometry.kind == "survey" && c.is_file() {
            Some(hash_file(c)?)
        } else {
            None
        }
    };
    let binning = plan.binning()?;
    let tg = targets(plan);
    let mut inputs = Vec::new();
    let mut keys = Vec::new();
    for t in &tg {
        let role = if t.name == "data" { "data" } else { "mock" };
        let data = checksum(role, &t.path)?;
        let id = CountIdentity {
            tool: "ringscale",
            version: crate::VERSION,
            data: &data,
            randoms: randoms.as_ref(),
            cosmology_file_sha256: cosmo_sha.clone(),
            geometry: &plan.geometry,
            columns: &plan.inputs.columns,
            binning: binning.clone(),
            rr_splits: plan.estimator.rr_splits,
            regions: plan.estimator.regions,
            region_seed: plan.estimator.region_seed,
            units: plan.run.units,
        };
        keys.push(hash_json(&id));
        inputs.push(data);
    }
    inputs.extend(randoms.clone());
    let count_keys: BTreeMap<String, String> = tg
        .iter()
        .zip(&keys)
        .map(|(t, k)| (t.name.clone(), k.clone()))
        .collect();
    check_shard_records(out, &count_keys)?;
    st.done("load", "ran", t);

    // Count: every part this process is responsible for.
    let t = Instant::now();
    let units = plan.run.units;
    let pieces = plan_pieces(plan);
    let (k, n) = opt.shard.unwrap_or((0, 1));
    let mut counted_here = 0;
    let mut headers = Vec::new();
    for (tgt, key) in tg.iter().zip(&keys) {
        let unit_path = |piece: Piece, u: usize| unit_path(&ckdir, key, piece, u, units);
        let header_path = ckdir.join(format!("count-header-{}.json", short(key)));
        let mine: Vec<(Piece, usize)> = pieces
            .iter()
            .flat_map(|&p| (0..units).map(move |u| (p, u)))
            .filter(|&(_, u)| u % n == k)
            .collect();
        let mut missing = Vec::new();
        for &(p, u) in &mine {
            match checkpoint::read::<UnitCheckpoint>(&unit_path(p, u))? {
                Some(c) => check_unit(&c, key, &unit_path(p, u))?,
                None => missing.push((p, u)),
            }
        }
        let mut header = checkpoint::read::<HeaderCheckpoint>(&header_path)?;
        if let Some(h) = &header {
            if h.version != crate::VERSION || h.count_key != *key {
                return Err(mismatch(&header_path, &h.version, &h.count_key, key));
            }
        }
        if opt.merge_only && opt.shard.is_none() && (!missing.is_empty() || header.is_none()) {
            let shards: Vec<String> = missing
                .iter()
                .map(|(p, u)| format!("{} part {u}", p.name()))
                .take(8)
                .collect();
            return Err(Error::input(format!(
                "--merge-only: {} of {} counting parts of {} are missing in {} (e.g. {}); run the missing job-array shards or drop --merge-only",
                missing.len(),
                mine.len(),
                tgt.name,
                ckdir.display(),
                shards.join(", ")
            )));
        }
        if !missing.is_empty() || header.is_none() {
            log.event(
                "count",
                "start",
                &format!(
                    "{}: reading catalogues; {} of {} parts to count",
                    tgt.name,
                    missing.len(),
                    mine.len()
                ),
                serde_json::json!({"catalogue": tgt.name, "parts_missing": missing.len(), "parts": mine.len()}),
            );
            let copt = plan.count_options(&tgt.path, opt.threads)?;
            let prep = count::prepare(&copt)?;
            for m in &prep.messages {
                log.event(
                    "count",
                    "warning",
                    m,
                    serde_json::json!({"catalogue": tgt.name}),
                );
            }
            // Room for the parts about to be counted and, unsharded, the counts folder.
            let (b, regions) = (&prep.header.meta.binning, prep.header.meta.n_regions);
            let mut needed = missing.len() as u64 * count::state_bytes_estimate(b, regions);
            if opt.shard.is_none() {
                let h = &prep.header;
                let pairings = 1 + h.norm_dr.is_some() as u64 + h.norm_rr.is_some() as u64;
                needed += count::folder_bytes_estimate(pairings, b, regions);
            }
            crate::report::space::ensure_space(out, "checkpoints and counts", needed)?;
            if header.is_none() {
                let h = HeaderCheckpoint {
                    count_key: key.clone(),
                    version: crate::VERSION.into(),
                    header: prep.header.clone(),
                };
                checkpoint::write(&header_path, &h)?;
                header = Some(h);
            }
            // each catalogue indexed once for all the parts counted here
            let need: Vec<Piece> = missing.iter().map(|&(p, _)| p).collect();
            let prep = prep.index_for(&need)?;
            for &(p, u) in &missing {
                let tp = Instant::now();
                let c = prep.count_piece(p, (u, units))?;
                let npairs: u64 = c.npairs.iter().sum();
                checkpoint::write(
                    &unit_path(p, u),
                    &UnitCheckpoint {
                        count_key: key.clone(),
                        version: crate::VERSION.into(),
                        piece: p,
                        unit: u,
                        units,
                        counts: c,
                    },
                )?;
                counted_here += 1;
                log.event(
                    "count",
                    "part",
                    &format!(
                        "{} {} part {}/{units}: {npairs} pairs in {:.2} s",
                        tgt.name,
                        p.name(),
                        u + 1,
                        tp.elapsed().as_secs_f64()
                    ),
                    serde_json::json!({"catalogue": tgt.name, "pairing": p.name(), "part": u, "pairs": npairs}),
                );
            }
        }
        headers.push(header.map(|h| h.header));
    }
    st.done("count", if counted_here > 0 { "ran" } else { "skipped" }, t);

    let covariance = plan.covariance_source().to_string();
    let mut manifest = Manifest {
        tool: "ringscale".into(),
        version: crate::VERSION.into(),
        git_revision: GIT_REVISION.into(),
        plan_file: opt.plan_file.as_ref().map(|p| p.display().to_string()),
        plan: plan.clone(),
        inputs,
        count_keys: count_keys.clone(),
        threads: opt.threads,
        units,
        shard: opt.shard,
        units_counted_here: counted_here,
        stages: vec![],
        peak_memory_kib: None,
        covariance: covariance.clone(),
    };

    if let Some((k, n)) = opt.shard {
        manifest.stages = st.list;
        manifest.peak_memory_kib = peak_memory_kib();
        let p = out.join("shards").join(format!("shard-{k}-of-{n}.json"));
        checkpoint::write(&p, &manifest)?;
        log.event(
            "count",
            "shard-done",
            &format!("shard {k}/{n} finished; run without --shard to merge and finish"),
            serde_json::json!({"shard": [k, n]}),
        );
        return Ok(RunSummary {
            manifest,
            finished: false,
        });
    }

    // Merge the parts into counts folders (the same files `ringscale count` writes).
    let t = Instant::now();
    let mut ran = false;
    let mut count_markers = Vec::new();
    for ((tgt, key), header) in tg.iter().zip(&keys).zip(&headers) {
        let header = header
            .as_ref()
            .ok_or_else(|| Error::other("count header missing after counting"))?;
        let dir = tgt.dir.join("counts");
        let marker_path = ckdir.join(format!("stage-counts-{}.json", short(key)));
        if let Some(m) = checkpoint::read::<StageDone>(&marker_path)? {
            if m.still_valid(key, out) {
                count_markers.push(m);
                continue;
            }
        }
        let mut counts = Vec::new();
        for &p in &header.pieces {
            let mut acc = PairCounts::zeros(header.meta.binning.clone(), header.meta.n_regions);
            for u in 0..units {
                let path = unit_path(&ckdir, key, p, u, units);
                let c = checkpoint::read::<UnitCheckpoint>(&path)?.ok_or_else(|| {
                    Error::input(format!("{}: counting part missing", path.display()))
                })?;
                check_unit(&c, key, &path)?;
                acc.merge(&c.counts)?;
            }
            counts.push(acc);
        }
        let states: Vec<CountState> = assemble(header, counts)?;
        count::write_folder(&dir, &states)?;
        let m = StageDone::record("counts", key, out, &dir)?;
        checkpoint::write(&marker_path, &m)?;
        count_markers.push(m);
        ran = true;
    }
    st.done("merge", if ran { "ran" } else { "skipped" }, t);

    // Estimate: mocks first (their xi feed a mock covariance), then the data.
    let t = Instant::now();
    let mut ran = false;
    let mut mock_xi = Vec::new();
    let mut mock_markers: Vec<Vec<(String, String)>> = Vec::new();
    let mut data_xi_files = Vec::new();
    for i in (1..tg.len()).chain(std::iter::once(0)) {
        let tgt = &tg[i];
        let is_data = i == 0;
        let use_mocks = is_data && covariance == "mocks";
        let dir = tgt.dir.join("xi");
        let no_mocks = Vec::new();
        let key = hash_json(&(
            "xi",
            crate::VERSION,
            &count_markers[i].files,
            plan.estimator.rebin,
            &covariance,
            if use_mocks { &mock_markers } else { &no_mocks },
        ));
        let marker_path = ckdir.join(format!("stage-xi-{}.json", short(&key)));
        let marker = match checkpoint::read::<StageDone>(&marker_path)? {
            Some(m) if m.still_valid(&key, out) => m,
            _ => {
                let s = crate::app::xi::run(&crate::app::xi::XiOptions {
                    counts: tgt.dir.join("counts"),
                    out: dir.clone(),
                    rebin: plan.estimator.rebin,
                    mock_xi: if use_mocks { mock_xi.clone() } else { vec![] },
                })?;
                if !s.empty_bins.is_empty() {
                    log.event(
                        "estimate",
                        "warning",
                        &format!("{}: {} empty bins", tgt.name, s.empty_bins.len()),
                        serde_json::json!({"catalogue": tgt.name, "empty_bins": s.empty_bins}),
                    );
                }
                let m = StageDone::record("xi", &key, out, &dir)?;
                checkpoint::write(&marker_path, &m)?;
                ran = true;
                m
            }
        };
        if is_data {
            data_xi_files = marker.files;
        } else {
            mock_xi.push(dir.join("xi.ecsv"));
            mock_markers.push(marker.files);
        }
    }
    st.done("estimate", if ran { "ran" } else { "skipped" }, t);

    // Fit.
    let t = Instant::now();
    let has_cov = plan.output.join("xi").join("covariance.npy").exists();
    let mut fit_result = None;
    // Checksums of the fit's files, which key the curvature stage.
    let mut fit_files: Option<Vec<(String, String)>> = None;
    if !plan.fit.enabled {
        st.done("fit", "disabled", t);
    } else if covariance == "none" || !has_cov {
        log.event(
            "fit",
            "warning",
            "no covariance (set [estimator] regions or list mocks): fit skipped",
            serde_json::json!({}),
        );
        st.done("fit", "skipped-no-covariance", t);
    } else {
        let key = hash_json(&(
            "fit",
            crate::VERSION,
            &data_xi_files,
            &plan.fit,
            power_sha(plan)?,
        ));
        let marker_path = ckdir.join(format!("stage-fit-{}.json", short(&key)));
        let dir = out.join("fit");
        match checkpoint::read::<StageDone>(&marker_path)? {
            Some(m) if m.still_valid(&key, out) => {
                fit_files = Some(m.files);
                st.done("fit", "skipped", t);
            }
            _ => {
                let o = crate::app::fit::run(&fit_options(plan))?;
                fit_result = Some(serde_json::to_value(&o.result).unwrap_or_default());
                let m = StageDone::record("fit", &key, out, &dir)?;
                checkpoint::write(&marker_path, &m)?;
                fit_files = Some(m.files);
                st.done("fit", "ran", t);
            }
        }
        if fit_result.is_none() {
            let text = std::fs::read_to_string(dir.join("fit.json"))
                .map_err(|e| Error::io(&dir.join("fit.json"), "cannot read", e))?;
            fit_result = serde_json::from_str(&text).ok();
        }
    }

    // Curvature: the run's D_V/r_d (plus any extra measurements) -> Omega_k.
    let t = Instant::now();
    let mut curvature_statement = None;
    let cp = &plan.curvature;
    if !cp.enabled {
        st.done("curvature", "disabled", t);
    } else if let Some(fit_files) = &fit_files {
        // The priors and extra measurements enter by content as well as by path.
        let extra_sha = cp
            .extra_bao
            .iter()
            .map(|p| hash_file(p))
            .collect::<Result<Vec<_>>>()?;
        let priors_sha = cp.priors.as_deref().map(hash_file).transpose()?;
        let key = hash_json(&(
            "curvature",
            crate::VERSION,
            fit_files,
            cp,
            priors_sha,
            extra_sha,
        ));
        let marker_path = ckdir.join(format!("stage-curvature-{}.json", short(&key)));
        let dir = out.join("curvature");
        let valid =
            checkpoint::read::<StageDone>(&marker_path)?.is_some_and(|m| m.still_valid(&key, out));
        if valid {
            st.done("curvature", "skipped", t);
        } else {
            crate::app::curvature::run(&curvature_options(plan))?;
            let m = StageDone::record("curvature", &key, out, &dir)?;
            checkpoint::write(&marker_path, &m)?;
            st.done("curvature", "ran", t);
        }
        let path = dir.join("inference.json");
        let text =
            std::fs::read_to_string(&path).map_err(|e| Error::io(&path, "cannot read", e))?;
        let v: serde_json::Value = serde_json::from_str(&text)
            .map_err(|e| Error::input(format!("{}: not valid JSON ({e})", path.display())))?;
        curvature_statement = v["statement"].as_str().map(String::from);
    } else {
        log.event(
            "curvature",
            "warning",
            "no fit result: curvature stage skipped",
            serde_json::json!({}),
        );
        st.done("curvature", "skipped-no-fit", t);
    }

    // Sweep: the measurement under fiducials differing only in Omega_k.
    let t = Instant::now();
    let mut sweep_summary = serde_json::Value::Null;
    if !plan.sweep.enabled {
        st.done("sweep", "disabled", t);
    } else {
        // Everything the sweep reads, by content; the thread count is left out because the
        // result is bitwise the same for any.
        let key = hash_json(&(
            "sweep",
            crate::VERSION,
            &manifest.inputs[0],
            &randoms,
            &cosmo_sha,
            &plan.geometry,
            &plan.inputs.columns,
            &binning,
            plan.estimator.rr_splits,
            plan.estimator.regions,
            plan.estimator.region_seed,
            plan.fit.range,
            plan.fit.alpha_grid,
            plan.fit.sigma_nl,
            plan.fit.plots,
            &plan.sweep,
        ));
        let marker_path = ckdir.join(format!("stage-sweep-{}.json", short(&key)));
        let dir = out.join("sweep");
        let valid =
            checkpoint::read::<StageDone>(&marker_path)?.is_some_and(|m| m.still_valid(&key, out));
        if valid {
            st.done("sweep", "skipped", t);
        } else {
            crate::app::sweep::run(&sweep_options(plan, opt.threads)?)?;
            let m = StageDone::record("sweep", &key, out, &dir)?;
            checkpoint::write(&marker_path, &m)?;
            st.done("sweep", "ran", t);
        }
        // Read back from the file either way, so a rerun reports the same bytes.
        let path = dir.join("sweep.json");
        let text =
            std::fs::read_to_string(&path).map_err(|e| Error::io(&path, "cannot read", e))?;
        let v: serde_json::Value = serde_json::from_str(&text)
            .map_err(|e| Error::input(format!("{}: not valid JSON ({e})", path.display())))?;
        sweep_summary = serde_json::json!({
            "exact_spread_sigma": v["exact_spread_sigma"],
            "reference": v["reference"],
        });
    }

    // Report.
    let t = Instant::now();
    let xi_summary: serde_json::Value = std::fs::read_to_string(out.join("xi/xi_summary.json"))
        .ok()
        .and_then(|s| serde_json::from_str(&s).ok())
        .unwrap_or(serde_json::Value::Null);
    let summary = serde_json::json!({
        "tool": "ringscale",
        "version": crate::VERSION,
        "inputs": manifest.inputs,
        "n_mocks": plan.inputs.mocks.len(),
        "covariance": covariance,
        "xi": xi_summary,
        "curvature": curvature_statement,
        "sweep": sweep_summary,
    });
    // fit.json goes in verbatim: re-encoding parsed floats could change their last digit.
    let mut text = serde_json::to_string_pretty(&summary)
        .map_err(|e| Error::other(format!("cannot encode summary: {e}")))?;
    let fit_text = if fit_result.is_some() {
        std::fs::read_to_string(out.join("fit/fit.json"))
            .map_err(|e| Error::io(&out.join("fit/fit.json"), "cannot read", e))?
    } else {
        "null".into()
    };
    text.truncate(text.trim_end().len() - 1);
    text = format!(
        "{},\n  \"fit\": {}\n}}\n",
        text.trim_end(),
        fit_text.trim_end()
    );
    checkpoint::write_text(&out.join("summary.json"), &text)?;
    st.done("report", "ran", t);
    if let Some(f) = &fit_result {
        log.event(
            "report",
            "result",
            &format!(
                "alpha = {:.4} +- {:.4}, D_V/r_d = {:.3} +- {:.3} at z_eff = {:.3}",
                f["alpha"].as_f64().unwrap_or(f64::NAN),
                f["alpha_err"].as_f64().unwrap_or(f64::NAN),
                f["dv_over_rd"].as_f64().unwrap_or(f64::NAN),
                f["dv_over_rd_err"].as_f64().unwrap_or(f64::NAN),
                f["z_eff"].as_f64().unwrap_or(f64::NAN)
            ),
            serde_json::json!({"alpha": f["alpha"], "dv_over_rd": f["dv_over_rd"]}),
        );
    }
    if let Some(s) = &curvature_statement {
        log.event("report", "curvature", s, serde_json::json!({}));
    }
    manifest.stages = st.list;
    manifest.peak_memory_kib = peak_memory_kib();
    crate::report::json::write_json(&out.join("manifest.json"), &manifest)?;
    Ok(RunSummary {
        manifest,
        finished: true,
    })
}

/// Content-addressed name of one counting part.
fn unit_path(ckdir: &Path, key: &str, piece: Piece, u: usize, units: usize) -> PathBuf {
    ckdir.join(format!(
        "count-{}-u{u:04}of{units:04}-{}.json",
        piece.name(),
        short(&hash_json(&(key, piece, u, units)))
    ))
}

fn power_sha(plan: &Plan) -> Result<Option<String>> {
    plan.fit.power_table.as_deref().map(hash_file).transpose()
}

/// The `ringscale fit` options a plan implies.
pub fn fit_options(plan: &Plan) -> crate::app::fit::FitOptions {
    let f = &plan.fit;
    crate::app::fit::FitOptions {
        xi_dir: plan.output.join("xi"),
        out: plan.output.join("fit"),
        cosmology: f.cosmology.clone(),
        fit: f.isotropic_options(),
        template: f.template_options(),
        power_table: f.power_table.clone(),
        rd_user: f.rd,
        plots: f.plots,
    }
}

/// The `ringscale curvature` options a plan implies: the run's own fit first, then the extras.
pub fn curvature_options(plan: &Plan) -> crate::app::curvature::CurvatureOptions {
    let c = &plan.curvature;
    let mut bao = vec![plan.output.join("fit").join("fit.json")];
    bao.extend(c.extra_bao.iter().cloned());
    crate::app::curvature::CurvatureOptions {
        bao,
        priors: c.priors.clone(),
        settings: crate::inference::SamplerSettings {
            seed: c.seed,
            ..Default::default()
        },
        out: plan.output.join("curvature"),
    }
}

/// The `ringscale sweep` options a plan implies: the plan's inputs, binning, regions and fit
/// settings, with fiducials `geometry.cosmology` with Omega_k replaced by each `sweep.omega_k`.
pub fn sweep_options(plan: &Plan, threads: usize) -> Result<crate::app::sweep::SweepOptions> {
    let c = plan.count_options(&plan.inputs.data, threads)?;
    let randoms = plan
        .inputs
        .randoms
        .clone()
        .ok_or_else(|| Error::input("plan: [sweep] enabled = true needs [inputs] randoms"))?;
    let f = &plan.fit;
    Ok(crate::app::sweep::SweepOptions {
        data: c.data,
        randoms,
        fiducials: crate::app::sweep::FiducialList::OmegaK {
            base: plan.geometry.cosmology.clone(),
            values: plan.sweep.omega_k.clone(),
        },
        columns: c.columns,
        filter: c.filter,
        binning: c.binning,
        rr_splits: c.rr_splits,
        regions: c.regions,
        naive: plan.sweep.naive,
        threads,
        out: plan.output.join("sweep"),
        fit: f.isotropic_options(),
        template: f.template_options(),
        plots: f.plots,
    })
}

fn mismatch(path: &Path, version: &str, got: &str, want: &str) -> Error {
    if version != crate::VERSION {
        Error::input(format!(
            "{}: written by ringscale {version}, but this is ringscale {}; results of different tool versions are never merged (use a fresh output folder)",
            path.display(),
            crate::VERSION
        ))
    } else {
        Error::input(format!(
            "{}: comes from a different plan (count key {} vs {}: inputs, binning, geometry or counting options differ); use a fresh output folder or remove it",
            path.display(),
            short(got),
            short(want)
        ))
    }
}

fn check_unit(c: &UnitCheckpoint, key: &str, path: &Path) -> Result<()> {
    if c.version != crate::VERSION || c.count_key != key {
        return Err(mismatch(path, &c.version, &c.count_key, key));
    }
    Ok(())
}

/// Refuse to mix job-array shards of different plans or tool versions in one output folder.
fn check_shard_records(out: &Path, keys: &BTreeMap<String, String>) -> Result<()> {
    let dir = out.join("shards");
    let Ok(rd) = std::fs::read_dir(&dir) else {
        return Ok(());
    };
    let mut paths: Vec<PathBuf> = rd
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|e| e == "json") && !checkpoint::is_temp(p))
        .collect();
    paths.sort();
    for p in paths {
        let m: Manifest = checkpoint::read(&p)?
            .ok_or_else(|| Error::input(format!("{}: vanished while reading", p.display())))?;
        if m.version != crate::VERSION {
            return Err(Error::input(format!(
                "cannot merge: shard record {} was written by ringscale {}, but this is ringscale {}; rerun that shard with this version or use a fresh output folder",
                p.display(),
                m.version,
                crate::VERSION
            )));
        }
        if m.count_keys != *keys {
            return Err(Error::input(format!(
                "cannot merge: shard record {} comes from a different plan (its inputs, binning, geometry or counting options differ from {}); use a fresh output folder per plan",
                p.display(),
                m.plan_file.as_deref().unwrap_or("this plan")
            )));
        }
    }
    Ok(())
}
