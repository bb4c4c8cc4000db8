//! `ringscale bench`: wall-clock benchmark of the whole counting path (write a seeded catalogue
//! file, read it back through `catalog::read_catalogue`, convert, count) on uniform boxes and a
//! survey-like sky cap, with 1 and N threads, peak memory, and the ratio against two single-thread
//! baselines measured in the same run: an in-project single-tree count (kiddo within-radius query
//! per point, then binning of the returned distances) and scipy's cKDTree.count_neighbors through
//! scripts/bench_reference.py. A benchmark, not a test: nothing here asserts on timings.
use super::on_threads;
use crate::catalog::{read_catalogue, ColumnMap, RowFilter};
use crate::cosmology::{Cosmology, DistanceTable};
use crate::geometry::{positions, take_positions, Curvature};
use crate::pairs::{self, Binning, CountConfig, Metric, PairCounts, PointSet};
use crate::{Error, Result};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::Serialize;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Box side for the uniform workloads (Mpc/h).
const BOX: f64 = 1000.0;
/// Largest separation and number of linear bins.
const S_MAX: f64 = 200.0;
const N_BINS: usize = 40;
/// Survey cap: half-angle around the +z axis and redshift range.
const CAP_DEG: f64 = 60.0;
const Z_LO: f64 = 0.4;
const Z_HI: f64 = 0.7;
/// Full-size survey: galaxies and randoms at scale 1.
const SURVEY_GAL: f64 = 2e5;
const SURVEY_RAN: f64 = 2e6;
/// Runs of each timed workload (1 and N threads alternately); the fastest counts.
const BENCH_REPEATS: usize = 2;
/// Split-RR subsets.
const RR_SPLITS: usize = 10;
/// Fiducial curvatures of the sweep workload.
const SWEEP_OMEGA_K: [f64; 5] = [-0.1, -0.05, 0.0, 0.05, 0.1];

/// Options of `ringscale bench`.
#[derive(Debug, Clone)]
pub struct BenchOptions {
    /// Tiny sizes (seconds; for smoke tests).
    pub quick: bool,
    /// Add the 1e6-point box workloads.
    pub large: bool,
    /// Survey size relative to 2e5 galaxies / 2e6 randoms.
    pub scale: f64,
    /// Threads for the N-thread runs (0 = resolve as elsewhere).
    pub threads: usize,
    /// Python interpreter with numpy + scipy for the cKDTree reference (None: skip).
    pub python: Option<PathBuf>,
    /// Folder for the generated catalogue files (None: a fresh folder under the temp dir).
    pub workdir: Option<PathBuf>,
    pub seed: u64,
    /// Parts to run (empty: all).
    pub only: Vec<BenchPart>,
    /// Time the kiddo and cKDTree baselines (minutes to hours at full survey scale).
    pub baselines: bool,
}

/// Independently selectable parts of the benchmark (`--only`), so that one part can be run at
/// full scale without the hours the baselines would need there.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BenchPart {
    /// Uniform boxes, periodic and not (with the baselines).
    Boxes,
    /// Survey DD+DR+RR and survey RR (with the baselines).
    Survey,
    /// Split RR against full RR (counting time only).
    SplitRr,
    /// Five-fiducial sweep against one count.
    Sweep,
}

impl BenchPart {
    pub const ALL: [(&'static str, BenchPart); 4] = [
        ("boxes", BenchPart::Boxes),
        ("survey", BenchPart::Survey),
        ("split-rr", BenchPart::SplitRr),
        ("sweep", BenchPart::Sweep),
    ];

    pub fn parse(name: &str) -> Result<Self> {
        Self::ALL
            .iter()
            .find(|(n, _)| *n == name.trim())
            .map(|&(_, p)| p)
            .ok_or_else(|| {
                let names: Vec<&str> = Self::ALL.iter().map(|(n, _)| *n).collect();
                Error::input(format!(
                    "--only {name}: unknown part (one of {})",
                    names.join(", ")
                ))
            })
    }
}

/// One benchmark row.
#[derive(Debug, Clone, Serialize)]
pub struct BenchRow {
    pub workload: String,
    /// Objects per catalogue involved (galaxies, randoms for the survey).
    pub n_objects: Vec<usize>,
    /// Pairs with s_min <= s < s_max counted.
    pub pairs: u64,
    /// Whole path (read file + convert + count) with 1 thread and with `threads` threads, best
    /// of `BENCH_REPEATS` runs each.
    pub wall_1t_s: f64,
    pub wall_nt_s: f64,
    pub threads: usize,
    /// pairs / wall / threads, for the N-thread run, and pairs / wall for the 1-thread run.
    pub pairs_per_s_per_core_nt: f64,
    pub pairs_per_s_1t: f64,
    /// CPU seconds of the 1-thread run and pairs per CPU second (less sensitive to other load).
    pub cpu_1t_s: Option<f64>,
    pub pairs_per_cpu_s_1t: Option<f64>,
    pub speedup: f64,
    /// Peak resident memory of the process during this workload (VmHWM, bytes).
    pub peak_bytes: Option<u64>,
    /// Resident memory just before the workload started (the program itself and what earlier
    /// workloads left mapped), not counted against the workload.
    pub baseline_bytes: Option<u64>,
    /// Bytes of positions + weights of the inputs plus the result histograms.
    pub payload_bytes: u64,
    /// (peak - baseline) / payload: the memory the workload itself needed per payload byte.
    pub memory_ratio: Option<f64>,
    /// Single-thread baselines: wall seconds and our speed-up over them (their time / our
    /// 1-thread time, same pairs).
    pub kiddo_s: Option<f64>,
    pub vs_kiddo: Option<f64>,
    pub scipy_s: Option<f64>,
    pub vs_scipy: Option<f64>,
    pub notes: Vec<String>,
}

/// The whole report.
#[derive(Debug, Clone, Serialize)]
pub struct BenchReport {
    pub binning: String,
    pub threads: usize,
    pub survey_scale: f64,
    pub rows: Vec<BenchRow>,
    /// Split RR (M = 10 subsets) counting time / full RR counting time, N threads, file read once
    /// outside the timing.
    pub split_rr_time_ratio: Option<f64>,
    /// The same ratio in CPU seconds of the process (N threads; robust to other load), and in
    /// wall time with 1 thread (no load-balance effects).
    pub split_rr_cpu_ratio: Option<f64>,
    pub split_rr_time_ratio_1t: Option<f64>,
    /// CPU time of a five-fiducial sweep of the survey RR over one single-fiducial RR count
    /// (1 thread, both including reading the file).
    pub sweep5_time_ratio: Option<f64>,
    pub notes: Vec<String>,
}

fn edges() -> Vec<f64> {
    (0..=N_BINS)
        .map(|i| S_MAX * i as f64 / N_BINS as f64)
        .collect()
}

/// A `/proc/self/status` memory field (VmHWM, VmRSS) in bytes; None where unavailable.
fn status_bytes(field: &str) -> Option<u64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = s.lines().find(|l| l.starts_with(field))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb * 1024)
}

/// Peak resident set (VmHWM) in bytes.
fn peak_rss() -> Option<u64> {
    status_bytes("VmHWM:")
}

/// CPU seconds (user + system) used by the process so far, from /proc/self/stat (clock ticks of
/// 1/100 s, the Linux default); None where unavailable. Robust to other load on the machine,
/// unlike wall time.
fn cpu_seconds() -> Option<f64> {
    let s = std::fs::read_to_string("/proc/self/stat").ok()?;
    // fields after the parenthesised command name; utime and stime are fields 14 and 15
    let rest = &s[s.rfind(')')? + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    let ut: f64 = f.get(11)?.parse().ok()?;
    let st: f64 = f.get(12)?.parse().ok()?;
    Some((ut + st) / 100.0)
}

/// Reset the peak-RSS mark so each workload reports its own peak (Linux clear_refs "5").
fn reset_peak() -> bool {
    std::fs::write("/proc/self/clear_refs", "5").is_ok()
}

fn io_err(path: &Path, e: std::io::Error) -> Error {
    Error::resource(format!("{}: {e}", path.display()))
}

fn write_csv(path: &Path, header: &[&str], cols: &[&[f64]]) -> Result<()> {
    let f = std::fs::File::create(path).map_err(|e| io_err(path, e))?;
    let mut w = std::io::BufWriter::new(f);
    let n = cols[0].len();
    let mut line = String::new();
    writeln!(w, "{}", header.join(",")).map_err(|e| io_err(path, e))?;
    for i in 0..n {
        line.clear();
        for (k, c) in cols.iter().enumerate() {
            if k > 0 {
                line.push(',');
            }
            line.push_str(&format!("{}", c[i]));
        }
        writeln!(w, "{line}").map_err(|e| io_err(path, e))?;
    }
    w.flush().map_err(|e| io_err(path, e))
}

/// Uniform points in the box, seeded.
fn uniform_box(n: usize, seed: u64) -> [Vec<f64>; 3] {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut c = [
        Vec::with_capacity(n),
        Vec::with_capacity(n),
        Vec::with_capacity(n),
    ];
    for _ in 0..n {
        for v in c.iter_mut() {
            v.push(rng.gen_range(0.0..BOX));
        }
    }
    c
}

/// Uniform-in-comoving-volume points in the sky cap and redshift range: (RA, Dec, z).
fn survey_points(n: usize, seed: u64, table: &DistanceTable) -> Result<[Vec<f64>; 3]> {
    let h = table.cosmology().h;
    let chi = |z: f64| -> Result<f64> {
        Ok(table
            .comoving_radial(z)
            .ok_or_else(|| Error::other("distance table too short"))?
            * h)
    };
    let (c1, c2) = (chi(Z_LO)?.powi(3), chi(Z_HI)?.powi(3));
    let cmin = CAP_DEG.to_radians().cos();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut out = [
        Vec::with_capacity(n),
        Vec::with_capacity(n),
        Vec::with_capacity(n),
    ];
    for _ in 0..n {
        let ct: f64 = rng.gen_range(cmin..1.0);
        let ph: f64 = rng.gen_range(0.0..std::f64::consts::TAU);
        let u: f64 = rng.gen_range(0.0..1.0);
        let r = (c1 + u * (c2 - c1)).cbrt();
        let z = table
            .redshift_at(r / h)
            .ok_or_else(|| Error::other("distance table too short"))?
            .clamp(Z_LO, Z_HI);
        out[0].push(ph.to_degrees());
        out[1].push(90.0 - ct.acos().to_degrees());
        out[2].push(z);
    }
    Ok(out)
}

fn total_pairs(c: &PairCounts) -> u64 {
    c.npairs.iter().sum()
}

fn config(metric: Metric, threads: usize) -> Result<CountConfig> {
    Ok(CountConfig {
        binning: Binning::new(edges(), 1)?,
        metric,
        n_regions: 0,
        threads,
        shard: (0, 1),
    })
}

/// Read a file through the library with `threads` threads and convert it to a point set.
fn load(
    path: &Path,
    map: &ColumnMap,
    table: Option<&DistanceTable>,
    threads: usize,
) -> Result<PointSet> {
    // read and convert with `threads` threads; the conversion reuses the catalogue's columns
    let (cat, pos) = on_threads(threads, || {
        let mut cat = read_catalogue(path, map, &RowFilter::default())?;
        let pos = take_positions(&mut cat, table)?;
        Ok((cat, pos))
    })?;
    Ok(PointSet {
        x: pos.x,
        y: pos.y,
        z: pos.z,
        w: cat.w,
        redshift: pos.redshift,
        region: Vec::new(),
    })
}

fn payload(ns: &[usize]) -> u64 {
    // x, y, z, w per object plus the four histograms (u64 + 3 x i128) per bin
    ns.iter().map(|&n| 32 * n as u64).sum::<u64>() + (N_BINS * (8 + 3 * 16)) as u64
}

/// In-project single-tree baseline: kiddo within-radius query of s_max per point, binning of
/// the returned distances; single thread, auto pairs j > i. Returns (seconds, pairs counted).
fn kiddo_auto(p: &PointSet) -> (f64, u64) {
    use kiddo::{ImmutableKdTree, SquaredEuclidean};
    let t = Instant::now();
    let pts: Vec<[f64; 3]> = (0..p.len()).map(|i| [p.x[i], p.y[i], p.z[i]]).collect();
    let tree: ImmutableKdTree<f64, 3> = ImmutableKdTree::new_from_slice(&pts);
    let e = edges();
    let mut hist = vec![0u64; N_BINS];
    for (i, q) in pts.iter().enumerate() {
        for nb in tree.within_unsorted::<SquaredEuclidean>(q, S_MAX * S_MAX) {
            if (nb.item as usize) > i && nb.distance < S_MAX * S_MAX {
                let s = nb.distance.sqrt();
                let b = e[1..N_BINS].partition_point(|&x| x <= s);
                hist[b] += 1;
            }
        }
    }
    (t.elapsed().as_secs_f64(), hist.iter().sum())
}

#[derive(serde::Deserialize)]
struct RefOut {
    seconds: f64,
    pairs: u64,
}

/// scipy cKDTree reference on a Cartesian CSV (X, Y, Z); None with a note when unavailable.
fn scipy_auto(
    python: Option<&Path>,
    file: &Path,
    box_size: Option<f64>,
) -> (Option<RefOut>, String) {
    let Some(py) = python else {
        return (
            None,
            "scipy reference skipped: no --python and no .venv/bin/python".into(),
        );
    };
    // the working directory's copy first (a checkout), else the source tree this was built from
    let local = Path::new("scripts/bench_reference.py");
    let script = if local.exists() {
        local.to_path_buf()
    } else {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("scripts/bench_reference.py")
    };
    let mut cmd = std::process::Command::new(py);
    cmd.arg(&script)
        .arg("--points")
        .arg(file)
        .arg("--rmax")
        .arg(S_MAX.to_string())
        .arg("--nbins")
        .arg(N_BINS.to_string());
    if let Some(l) = box_size {
        cmd.arg("--box").arg(l.to_string());
    }
    match cmd.output() {
        Ok(o) if o.status.success() => match serde_json::from_slice::<RefOut>(&o.stdout) {
            Ok(r) => (Some(r), String::new()),
            Err(e) => (None, format!("scipy reference: unreadable output ({e})")),
        },
        Ok(o) => (
            None,
            format!(
                "scipy reference failed: {}",
                String::from_utf8_lossy(&o.stderr)
                    .lines()
                    .last()
                    .unwrap_or("")
            ),
        ),
        Err(e) => (None, format!("scipy reference not run: {e}")),
    }
}

/// Time `f` with 1 and with n threads (best of `BENCH_REPEATS`), resetting the peak-memory mark first.
fn both<F: Fn(usize) -> Result<u64>>(n: usize, f: F) -> Result<Timing> {
    reset_peak();
    let base = status_bytes("VmRSS:");
    // 1 and n threads alternately, twice; the faster of each pair (other load on a shared
    // machine only ever slows a run down)
    let (mut t1, mut tn, mut cpu1) = (f64::INFINITY, f64::INFINITY, None::<f64>);
    let mut pairs1 = 0;
    for _ in 0..BENCH_REPEATS {
        let c0 = cpu_seconds();
        let t = Instant::now();
        pairs1 = f(1)?;
        t1 = t1.min(t.elapsed().as_secs_f64());
        if let Some(c) = c0.and_then(|c0| Some(cpu_seconds()? - c0)) {
            cpu1 = Some(cpu1.map_or(c, |v| v.min(c)));
        }
        let t = Instant::now();
        let pairsn = f(n)?;
        tn = tn.min(t.elapsed().as_secs_f64());
        if pairs1 != pairsn {
            return Err(Error::other(format!(
                "bench: 1-thread and {n}-thread pair totals differ ({pairs1} vs {pairsn})"
            )));
        }
    }
    Ok(Timing {
        pairs: pairs1,
        t1,
        tn,
        cpu1,
        peak: peak_rss(),
        base,
    })
}

/// Measurements of one workload.
struct Timing {
    pairs: u64,
    t1: f64,
    tn: f64,
    cpu1: Option<f64>,
    peak: Option<u64>,
    base: Option<u64>,
}

fn row(name: &str, ns: Vec<usize>, m: Timing, threads: usize) -> BenchRow {
    let Timing {
        pairs,
        t1,
        tn,
        cpu1,
        peak,
        base,
    } = m;
    let pay = payload(&ns);
    BenchRow {
        workload: name.into(),
        n_objects: ns,
        pairs,
        wall_1t_s: t1,
        wall_nt_s: tn,
        threads,
        pairs_per_s_per_core_nt: pairs as f64 / tn / threads as f64,
        pairs_per_s_1t: pairs as f64 / t1,
        cpu_1t_s: cpu1,
        pairs_per_cpu_s_1t: cpu1.filter(|&c| c > 0.0).map(|c| pairs as f64 / c),
        speedup: t1 / tn,
        peak_bytes: peak,
        baseline_bytes: base,
        payload_bytes: pay,
        memory_ratio: peak.map(|p| p.saturating_sub(base.unwrap_or(0)) as f64 / pay as f64),
        kiddo_s: None,
        vs_kiddo: None,
        scipy_s: None,
        vs_scipy: None,
        notes: Vec::new(),
    }
}

fn add_refs(
    r: &mut BenchRow,
    p: &PointSet,
    kiddo: bool,
    read_s: f64,
    python: Option<&Path>,
    file: &Path,
    box_size: Option<f64>,
) {
    if kiddo {
        let (ks, kp) = kiddo_auto(p);
        let ks = ks + read_s;
        r.kiddo_s = Some(ks);
        r.vs_kiddo = Some(ks / r.wall_1t_s);
        if kp != r.pairs {
            r.notes.push(format!("kiddo baseline counted {kp} pairs"));
        }
    } else {
        r.notes
            .push("kiddo baseline n/a (no periodic within-radius query)".into());
    }
    let (so, note) = scipy_auto(python, file, box_size);
    if let Some(so) = so {
        r.scipy_s = Some(so.seconds);
        r.vs_scipy = Some(so.seconds / r.wall_1t_s);
        if so.pairs != r.pairs {
            r.notes.push(format!("cKDTree counted {} pairs", so.pairs));
        }
    } else {
        r.notes.push(note);
    }
}

/// Run the benchmark.
pub fn run(opt: &BenchOptions) -> Result<BenchReport> {
    if !(opt.scale > 0.0 && opt.scale <= 1.0) {
        return Err(Error::input(format!(
            "--scale {}: must be in (0, 1]",
            opt.scale
        )));
    }
    let threads = super::resolve_threads(Some(opt.threads));
    let dir = match &opt.workdir {
        Some(d) => d.clone(),
        None => std::env::temp_dir().join(format!("ringscale-bench-{}", std::process::id())),
    };
    std::fs::create_dir_all(&dir).map_err(|e| io_err(&dir, e))?;
    let python = opt.python.clone().or_else(|| {
        let p = PathBuf::from(".venv/bin/python");
        p.exists().then_some(p)
    });
    let python = python.as_deref();
    let mut notes = Vec::new();
    if !opt.baselines {
        notes.push("baselines not run (--no-baselines)".into());
    }
    if !reset_peak() {
        notes.push("peak memory is the process peak so far (cannot reset VmHWM)".into());
    }
    let mut rows = Vec::new();
    let want = |p: BenchPart| opt.only.is_empty() || opt.only.contains(&p);
    let (mut split_ratio, mut split_cpu, mut split_wall_1t) = (None, None, None);
    let mut sweep_ratio = None;

    // (a) uniform boxes
    if want(BenchPart::Boxes) {
        let mut sizes = vec![if opt.quick { 3000 } else { 100_000 }];
        if opt.large && !opt.quick {
            sizes.push(1_000_000);
        }
        let cart = ColumnMap::cartesian("X", "Y", "Z", vec![], None);
        for (k, &n) in sizes.iter().enumerate() {
            let c = uniform_box(n, opt.seed.wrapping_add(k as u64));
            let file = dir.join(format!("box_{n}.csv"));
            write_csv(&file, &["X", "Y", "Z"], &[&c[0], &c[1], &c[2]])?;
            drop(c);
            for periodic in [false, true] {
                let metric = if periodic {
                    Metric::Periodic { box_size: BOX }
                } else {
                    Metric::Euclidean
                };
                let run1 = |t: usize| -> Result<u64> {
                    let p = load(&file, &cart, None, t)?;
                    let cfg = config(metric, t)?;
                    let ip = pairs::Indexed::new(p, "box", &cfg)?;
                    Ok(total_pairs(&pairs::count_auto_indexed(&ip, &cfg)?))
                };
                let m = both(threads, run1)?;
                let name = format!(
                    "box {n} {}",
                    if periodic { "periodic" } else { "non-periodic" }
                );
                let mut r = row(&name, vec![n], m, threads);
                if opt.baselines {
                    let t = Instant::now();
                    let p = load(&file, &cart, None, 1)?;
                    let read_s = t.elapsed().as_secs_f64();
                    add_refs(
                        &mut r,
                        &p,
                        !periodic,
                        read_s,
                        python,
                        &file,
                        periodic.then_some(BOX),
                    );
                }
                rows.push(r);
            }
        }
    }

    // (b) survey cap
    let scale = if opt.quick { 0.005 } else { opt.scale };
    if want(BenchPart::Survey) || want(BenchPart::SplitRr) || want(BenchPart::Sweep) {
        let (ng, nr) = (
            (SURVEY_GAL * scale).round().max(10.0) as usize,
            (SURVEY_RAN * scale).round().max(10.0) as usize,
        );
        let cosmo = Cosmology::planck18();
        let table = DistanceTable::new(&cosmo, Z_HI + 0.1)?;
        let metric = match Curvature::of(&cosmo) {
            Curvature::Flat => Metric::Euclidean,
            Curvature::Closed { radius } => Metric::Closed { radius },
            Curvature::Open { radius } => Metric::Open { radius },
        };
        let gal = survey_points(ng, opt.seed ^ 0x5eed_0001, &table)?;
        let ran = survey_points(nr, opt.seed ^ 0x5eed_0002, &table)?;
        let gfile = dir.join("survey_galaxies.csv");
        let rfile = dir.join("survey_randoms.csv");
        write_csv(&gfile, &["RA", "DEC", "Z"], &[&gal[0], &gal[1], &gal[2]])?;
        write_csv(&rfile, &["RA", "DEC", "Z"], &[&ran[0], &ran[1], &ran[2]])?;
        drop((gal, ran));
        let sky = ColumnMap::sky("RA", "DEC", "Z", vec![], None);
        let full = |t: usize| -> Result<u64> {
            let g = load(&gfile, &sky, Some(&table), t)?;
            let r = load(&rfile, &sky, Some(&table), t)?;
            let cfg = config(metric, t)?;
            // each catalogue indexed once, shared by the three counts
            let g = pairs::Indexed::new(g, "galaxies", &cfg)?;
            let r = pairs::Indexed::new(r, "randoms", &cfg)?;
            let dd = pairs::count_auto_indexed(&g, &cfg)?;
            let dr = pairs::count_cross_indexed(&g, &r, &cfg)?;
            let rr = pairs::count_auto_indexed(&r, &cfg)?;
            Ok(total_pairs(&dd) + total_pairs(&dr) + total_pairs(&rr))
        };
        if want(BenchPart::Survey) {
            let m = both(threads, full)?;
            let mut r = row("survey DD+DR+RR", vec![ng, nr], m, threads);
            if scale < 1.0 {
                r.notes.push(format!(
            "survey at scale {scale}: {ng} galaxies, {nr} randoms (full size 2e5 / 2e6; --scale 1)"
        ));
            }
            rows.push(r);

            // RR alone (for the baselines) and split RR
            let rr_full = |t: usize| -> Result<u64> {
                let r = load(&rfile, &sky, Some(&table), t)?;
                let cfg = config(metric, t)?;
                let r = pairs::Indexed::new(r, "randoms", &cfg)?;
                Ok(total_pairs(&pairs::count_auto_indexed(&r, &cfg)?))
            };
            let m = both(threads, rr_full)?;
            let mut rrow = row("survey RR", vec![nr], m, threads);
            if opt.baselines {
                let t = Instant::now();
                let rp = load(&rfile, &sky, Some(&table), 1)?;
                let read_s = t.elapsed().as_secs_f64();
                // the Python reference needs Cartesian positions: export the converted randoms
                let xfile = dir.join("survey_randoms_xyz.csv");
                write_csv(&xfile, &["X", "Y", "Z"], &[&rp.x, &rp.y, &rp.z])?;
                add_refs(&mut rrow, &rp, true, read_s, python, &xfile, None);
                rrow.notes
                    .push("cKDTree reads the converted Cartesian randoms file".into());
            }
            rows.push(rrow);
        }

        if want(BenchPart::SplitRr) {
            let rp = load(&rfile, &sky, Some(&table), threads)?;
            // Split RR against full RR, counting only (the file is read once, outside the timing:
            // reading is the same for both and would hide the ratio of the pair work), best of two.
            let split_count = |cfg: &CountConfig| -> Result<(f64, Option<f64>)> {
                let (st, c0) = (Instant::now(), cpu_seconds());
                let c = pairs::count_auto_split(&rp, RR_SPLITS, cfg)?;
                c.iter().map(total_pairs).sum::<u64>();
                Ok((
                    st.elapsed().as_secs_f64(),
                    c0.and_then(|c0| Some(cpu_seconds()? - c0)),
                ))
            };
            let full_count = |cfg: &CountConfig| -> Result<(f64, Option<f64>)> {
                let (st, c0) = (Instant::now(), cpu_seconds());
                let r = pairs::Indexed::new(rp.clone(), "randoms", cfg)?;
                total_pairs(&pairs::count_auto_indexed(&r, cfg)?);
                Ok((
                    st.elapsed().as_secs_f64(),
                    c0.and_then(|c0| Some(cpu_seconds()? - c0)),
                ))
            };
            // best of two for wall and CPU time each
            let best = |f: &dyn Fn() -> Result<(f64, Option<f64>)>| -> Result<(f64, Option<f64>)> {
                let (a, b) = (f()?, f()?);
                let cpu = match (a.1, b.1) {
                    (Some(x), Some(y)) => Some(x.min(y)),
                    _ => None,
                };
                Ok((a.0.min(b.0), cpu))
            };
            let ratio = |cfg: &CountConfig| -> Result<(f64, Option<f64>)> {
                let (tf, cf) = best(&|| full_count(cfg))?;
                let (ts, cs) = best(&|| split_count(cfg))?;
                let cpu = match (cf, cs) {
                    (Some(f), Some(s)) if f > 0.0 => Some(s / f),
                    _ => None,
                };
                Ok((ts / tf, cpu))
            };
            let (wall, cpu) = ratio(&config(metric, threads)?)?;
            (split_ratio, split_cpu) = (Some(wall), cpu);
            split_wall_1t = Some(ratio(&config(metric, 1)?)?.0);
        }

        // Fiducial sweep: RR under five Omega_k fiducials (fixed physical densities and h) in one
        // traversal, against one single-fiducial RR count; 1 thread, CPU seconds, both including
        // reading the file and the conversion to positions.
        let single = || -> Result<u64> {
            let r = load(&rfile, &sky, Some(&table), 1)?;
            let cfg = config(metric, 1)?;
            let r = pairs::Indexed::new(r, "randoms", &cfg)?;
            Ok(total_pairs(&pairs::count_auto_indexed(&r, &cfg)?))
        };
        let sweep5 = || -> Result<u64> {
            let cat = on_threads(1, || read_catalogue(&rfile, &sky, &RowFilter::default()))?;
            let mut sets = Vec::new();
            let mut metrics = Vec::new();
            for ok in SWEEP_OMEGA_K {
                let c = cosmo.with_omega_k(ok);
                let t = DistanceTable::new(&c, Z_HI + 0.1)?;
                let pos = positions(&cat, Some(&t))?;
                sets.push(PointSet {
                    x: pos.x,
                    y: pos.y,
                    z: pos.z,
                    w: cat.w.clone(),
                    redshift: pos.redshift,
                    region: Vec::new(),
                });
                metrics.push(match Curvature::of(&c) {
                    Curvature::Flat => Metric::Euclidean,
                    Curvature::Closed { radius } => Metric::Closed { radius },
                    Curvature::Open { radius } => Metric::Open { radius },
                });
            }
            let cfg = pairs::SweepConfig {
                binning: Binning::new(edges(), 1)?,
                n_regions: 0,
                threads: 1,
            };
            let out = pairs::sweep_auto(&sets, &metrics, &cfg)?;
            Ok(out.iter().map(total_pairs).sum())
        };
        let cpu_of = |f: &dyn Fn() -> Result<u64>| -> Result<Option<f64>> {
            let c0 = cpu_seconds();
            f()?;
            Ok(c0.and_then(|c0| Some(cpu_seconds()? - c0)))
        };
        if want(BenchPart::Sweep) {
            let t_single = cpu_of(&single)?;
            let t_sweep = cpu_of(&sweep5)?;
            sweep_ratio = match (t_single, t_sweep) {
                (Some(a), Some(b)) if a > 0.0 => Some(b / a),
                _ => None,
            };
        }
    }

    if opt.workdir.is_none() {
        let _ = std::fs::remove_dir_all(&dir);
    }
    Ok(BenchReport {
        binning: format!("{N_BINS} linear bins on [0, {S_MAX}) Mpc/h"),
        threads,
        survey_scale: scale,
        rows,
        split_rr_time_ratio: split_ratio,
        split_rr_cpu_ratio: split_cpu,
        split_rr_time_ratio_1t: split_wall_1t,
        sweep5_time_ratio: sweep_ratio,
        notes,
    })
}

fn opt_f(v: Option<f64>, prec: usize) -> String {
    v.map_or("-".into(), |x| format!("{x:.prec$}"))
}

/// Plain-text table of a report.
pub fn render_table(r: &BenchReport) -> String {
    let mut s = format!(
        "ringscale bench: {}, {} threads; survey scale {} (2e5 galaxies / 2e6 randoms at scale 1)\n",
        r.binning, r.threads, r.survey_scale
    );
    s.push_str(&format!(
        "{:<26} {:>14} {:>9} {:>9} {:>10} {:>10} {:>10} {:>7} {:>8} {:>7} {:>8} {:>8}\n",
        "workload",
        "pairs",
        "t_1 [s]",
        "t_N [s]",
        "Mp/s 1t",
        "Mp/cpu-s",
        "Mp/s/core",
        "x 1->N",
        "peak MB",
        "mem x",
        "x kiddo",
        "x scipy"
    ));
    for w in &r.rows {
        s.push_str(&format!(
            "{:<26} {:>14} {:>9.3} {:>9.3} {:>10.1} {:>10} {:>10.1} {:>7.2} {:>8} {:>7} {:>8} {:>8}\n",
            w.workload,
            w.pairs,
            w.wall_1t_s,
            w.wall_nt_s,
            w.pairs_per_s_1t / 1e6,
            opt_f(w.pairs_per_cpu_s_1t.map(|v| v / 1e6), 1),
            w.pairs_per_s_per_core_nt / 1e6,
            w.speedup,
            opt_f(w.peak_bytes.map(|b| b as f64 / 1048576.0), 0),
            opt_f(w.memory_ratio, 1),
            opt_f(w.vs_kiddo, 1),
            opt_f(w.vs_scipy, 1),
        ));
        for n in w.notes.iter().filter(|n| !n.is_empty()) {
            s.push_str(&format!("    note: {n}\n"));
        }
    }
    if let Some(x) = r.split_rr_time_ratio {
        s.push_str(&format!(
            "split RR (M = {RR_SPLITS}) / full RR counting time (file read once, outside), {} threads: {x:.3}\n",
            r.threads
        ));
    }
    if let Some(x) = r.split_rr_cpu_ratio {
        s.push_str(&format!(
            "split RR / full RR counting, CPU time, {} threads: {x:.3}\n",
            r.threads
        ));
    }
    if let Some(x) = r.split_rr_time_ratio_1t {
        s.push_str(&format!(
            "split RR / full RR counting time, 1 thread: {x:.3}\n"
        ));
    }
    if let Some(x) = r.sweep5_time_ratio {
        s.push_str(&format!(
            "five-fiducial sweep (Omega_k = {SWEEP_OMEGA_K:?}) / one count, survey RR, 1 thread CPU time: {x:.2}\n"
        ));
    }
    for n in &r.notes {
        s.push_str(&format!("note: {n}\n"));
    }
    s.push_str("Mp/cpu-s: 1-thread pairs per CPU second of the process (robust to other load)\n");
    s.push_str("times include reading the catalogue file; x kiddo / x scipy = baseline time / our 1-thread time\n");
    s
}

/// Run, print the table, and write the JSON report when asked.
pub fn run_and_report(opt: &BenchOptions, out: Option<&Path>) -> Result<BenchReport> {
    let r = run(opt)?;
    print!("{}", render_table(&r));
    if let Some(p) = out {
        let text = serde_json::to_string_pretty(&r)
            .map_err(|e| Error::other(format!("bench report: {e}")))?;
        std::fs::write(p, text).map_err(|e| io_err(p, e))?;
    }
    Ok(r)
}
