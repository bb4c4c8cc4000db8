//! `ringscale run PLAN.toml`: the whole chain from one plan, resumable and shardable (see
//! `crate::pipeline`).
use crate::pipeline::log::{LogFormat, Logger};
use crate::pipeline::{self, Plan, RunOptions};
use crate::{Error, Result};
use std::path::PathBuf;

/// Command-line options of `ringscale run`.
#[derive(Debug, Clone, clap::Args)]
pub struct RunArgs {
    /// The run plan (TOML).
    pub plan: PathBuf,
    /// Count only part k of N (0-based) and stop; "auto/N" or just "N" takes k from
    /// SLURM_ARRAY_TASK_ID (minus SLURM_ARRAY_TASK_MIN when set).
    #[arg(long)]
    pub shard: Option<String>,
    /// Merge the parts found in the output folder and finish; fail if any part is missing.
    #[arg(long, conflicts_with = "shard")]
    pub merge_only: bool,
    /// Threads (default: [run] threads, else SLURM_CPUS_PER_TASK, else all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Log format: auto (JSON lines unless stderr is a terminal), human or json.
    #[arg(long, default_value = "auto")]
    pub log_format: String,
    /// Print the resolved plan and the work it implies, then stop.
    #[arg(long)]
    pub dry_run: bool,
    /// Replace the plan's output folder.
    #[arg(long)]
    pub output: Option<PathBuf>,
    /// Run under MPI: each rank counts a shard, rank 0 merges and finishes (needs a build with
    /// the `mpi` feature and an output folder all ranks can see).
    #[arg(long, conflicts_with_all = ["shard", "merge_only"])]
    pub mpi: bool,
}

/// Parse a `--shard` value; `task` is (SLURM_ARRAY_TASK_ID, SLURM_ARRAY_TASK_MIN).
pub fn parse_shard_spec(
    spec: &str,
    task: (Option<String>, Option<String>),
) -> Result<(usize, usize)> {
    let (k, n) = match spec.split_once('/') {
        Some((k, n)) => (k.trim(), n.trim()),
        None => ("auto", spec.trim()),
    };
    if k != "auto" {
        return crate::app::count::parse_shard(spec);
    }
    let n: usize = n
        .parse()
        .ok()
        .filter(|&n| n > 0)
        .ok_or_else(|| Error::input(format!("--shard '{spec}': expected k/N, auto/N or N")))?;
    let id = task.0.ok_or_else(|| {
        Error::input(format!(
            "--shard '{spec}': SLURM_ARRAY_TASK_ID is not set; give k/N explicitly outside a job array"
        ))
    })?;
    let parse = |v: &str, what: &str| {
        v.trim()
            .parse::<usize>()
            .map_err(|_| Error::input(format!("{what} = '{v}' is not a non-negative integer")))
    };
    let id = parse(&id, "SLURM_ARRAY_TASK_ID")?;
    let min = task
        .1
        .as_deref()
        .map(|m| parse(m, "SLURM_ARRAY_TASK_MIN"))
        .transpose()?
        .unwrap_or(0);
    let k = id.checked_sub(min).unwrap_or(usize::MAX);
    if k >= n {
        return Err(Error::input(format!(
            "--shard '{spec}': array task {id} (first task {min}) is outside 0..{n}; submit with --array=0-{}",
            n - 1
        )));
    }
    Ok((k, n))
}

/// Load the plan with the command-line overrides applied.
pub fn load(args: &RunArgs) -> Result<Plan> {
    let mut plan = pipeline::load_plan(&args.plan)?;
    if let Some(o) = &args.output {
        plan.output = o.clone();
    }
    Ok(plan)
}

/// Entry point of `ringscale run`.
pub fn main(args: &RunArgs) -> Result<()> {
    let plan = load(args)?;
    let threads = crate::app::resolve_threads(args.threads.or(plan.run.threads));
    let log = Logger::new(LogFormat::parse(&args.log_format)?);
    if args.dry_run {
        return dry_run(&plan, threads);
    }
    let shard = args
        .shard
        .as_deref()
        .map(|s| {
            parse_shard_spec(
                s,
                (
                    std::env::var("SLURM_ARRAY_TASK_ID").ok(),
                    std::env::var("SLURM_ARRAY_TASK_MIN").ok(),
                ),
            )
        })
        .transpose()?;
    let opt = RunOptions {
        threads,
        shard,
        merge_only: args.merge_only,
        plan_file: Some(args.plan.clone()),
    };
    if args.mpi {
        #[cfg(feature = "mpi")]
        {
            pipeline::mpi::run(&plan, &opt, &log)?;
            return Ok(());
        }
        #[cfg(not(feature = "mpi"))]
        return Err(Error::input(
            "--mpi: this ringscale was built without MPI support (rebuild with --features mpi)",
        ));
    }
    pipeline::execute(&plan, &opt, &log)?;
    Ok(())
}

/// Assumed pair-kernel throughput per thread for the time estimate (order of magnitude only).
const PAIRS_PER_SECOND_PER_THREAD: f64 = 5e7;

fn dry_run(plan: &Plan, threads: usize) -> Result<()> {
    let text = toml::to_string(plan)
        .map_err(|e| Error::other(format!("cannot print the resolved plan: {e}")))?;
    println!("# resolved plan\n{text}");
    let opt = plan.count_options(&plan.inputs.data, threads)?;
    let p = crate::app::count::prepare(&opt)?;
    let nd = p.data.len() as f64;
    let nr = p.randoms.as_ref().map_or(0.0, |r| r.len() as f64);
    let m = plan.estimator.rr_splits as f64;
    let dd = nd * (nd - 1.0) / 2.0;
    let dr = nd * nr;
    let rr = if nr > 0.0 {
        m * (nr / m) * (nr / m - 1.0) / 2.0
    } else {
        0.0
    };
    let n_cat = 1.0 + plan.inputs.mocks.len() as f64;
    let total = n_cat * (dd + dr + rr);
    // Fraction of pairs within s_max: a sphere of radius s_max over the bounding-box volume.
    let pts = p.randoms.as_ref().unwrap_or(&p.data);
    let ext = |v: &[f64]| {
        v.iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
                (a.min(x), b.max(x))
            })
    };
    let vol: f64 = [&pts.x, &pts.y, &pts.z]
        .iter()
        .map(|v| {
            let (a, b) = ext(v);
            (b - a).max(1e-9)
        })
        .product();
    let smax = opt.binning.s_max();
    let frac = (4.0 / 3.0 * std::f64::consts::PI * smax.powi(3) / vol).min(1.0);
    let secs = total * frac / (PAIRS_PER_SECOND_PER_THREAD * threads as f64);
    println!("# work");
    println!(
        "catalogues: {} galaxy catalogue(s) of ~{} objects, {} randoms",
        n_cat, nd, nr
    );
    println!(
        "pairs to consider per catalogue: DD {dd:.0}, DR {dr:.0}, RR {rr:.0} ({} RR subsets); total {total:.0}",
        plan.estimator.rr_splits
    );
    println!(
        "checkpoint parts: {} per pairing, {} in all",
        plan.run.units,
        plan.run.units * p.header.pieces.len() * n_cat as usize
    );
    println!(
        "memory estimate: {:.1} MiB per process",
        p.memory_estimate as f64 / 1048576.0
    );
    println!(
        "time estimate: ~{:.0} s on {threads} threads (about {:.1}% of pairs within s_max = {smax}; rough)",
        secs.max(1.0),
        100.0 * frac
    );
    for m in &p.messages {
        println!("note: {m}");
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shard_specs() {
        let none = (None, None);
        assert_eq!(parse_shard_spec("2/5", none.clone()).unwrap(), (2, 5));
        assert!(parse_shard_spec("5/5", none.clone()).is_err());
        assert!(parse_shard_spec("auto/4", none).is_err());
        let t = |id: &str, min: Option<&str>| (Some(id.to_string()), min.map(String::from));
        assert_eq!(parse_shard_spec("auto/4", t("3", None)).unwrap(), (3, 4));
        assert_eq!(parse_shard_spec("4", t("1", None)).unwrap(), (1, 4));
        assert_eq!(parse_shard_spec("4", t("4", Some("1"))).unwrap(), (3, 4));
        assert!(parse_shard_spec("4", t("4", None)).is_err());
        assert!(parse_shard_spec("0", t("0", None)).is_err());
    }
}
