//! Command-line front end: parse arguments, call the library, map errors to exit codes
//! (0 ok, 1 other, 2 bad input or usage, 3 resource problem).
use clap::{Args, Parser, Subcommand};
use ringscale::app;
use ringscale::catalog::{ColumnMap, RowFilter};
use ringscale::cosmology::Cosmology;
use ringscale::Result;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Parser)]
#[command(
    name = "ringscale",
    version,
    about = "Measure the BAO scale in galaxy redshift surveys and what it says about curvature"
)]
struct Cli {
    #[command(subcommand)]
    cmd: Cmd,
}

/// Column mapping shared by every command that reads a catalogue.
#[derive(Args, Clone)]
struct ColumnArgs {
    /// Right-ascension column (degrees).
    #[arg(long, default_value = "RA")]
    ra_column: String,
    /// Declination column (degrees).
    #[arg(long, default_value = "DEC")]
    dec_column: String,
    /// Redshift column.
    #[arg(long, default_value = "Z")]
    z_column: String,
    /// Weight columns, multiplied together (comma-separated).
    #[arg(long, value_delimiter = ',')]
    weight_columns: Vec<String>,
    /// Integer jackknife-region column.
    #[arg(long)]
    region_column: Option<String>,
    /// Keep only rows with redshift >= this (removed rows are counted and reported).
    #[arg(long)]
    z_min: Option<f64>,
    /// Keep only rows with redshift < this.
    #[arg(long)]
    z_max: Option<f64>,
}

impl ColumnArgs {
    fn sky_map(&self) -> ColumnMap {
        ColumnMap::sky(
            &self.ra_column,
            &self.dec_column,
            &self.z_column,
            self.weight_columns.clone(),
            self.region_column.clone(),
        )
    }
    fn filter(&self) -> RowFilter {
        RowFilter {
            z_min: self.z_min,
            z_max: self.z_max,
        }
    }
}

#[derive(Subcommand)]
enum Cmd {
    /// Background distances, r_d and the particle horizon for a list of redshifts.
    Distances {
        /// Preset name (planck18) or a cosmology TOML file.
        #[arg(long, default_value = "planck18")]
        cosmology: String,
        /// Comma-separated redshifts.
        #[arg(long, allow_hyphen_values = true)]
        z: String,
        /// Output format: json or ecsv.
        #[arg(long, default_value = "json")]
        format: String,
    },
    /// Count DD (and DR, RR with randoms) pairs into a counts folder.
    Count(Box<CountArgs>),
    /// Count, estimate and fit under several fiducial cosmologies in one traversal of the pairs.
    Sweep(Box<SweepArgs>),
    /// Merge the folders of `count --shard k/N` runs into one, bit for bit.
    Merge {
        /// Output counts folder.
        #[arg(long)]
        out: PathBuf,
        /// Shard folders.
        #[arg(required = true)]
        shards: Vec<PathBuf>,
    },
    /// Correlation function and covariance from a counts folder.
    Xi {
        /// Counts folder (from `ringscale count` or `merge`).
        #[arg(long)]
        counts: PathBuf,
        /// Output folder.
        #[arg(long)]
        out: PathBuf,
        /// Merge groups of G adjacent separation bins (summing counts) first.
        #[arg(long, default_value_t = 1)]
        rebin: usize,
        /// xi.ecsv files of mocks for a sample covariance (instead of the jackknife).
        #[arg(long, num_args = 1..)]
        mock_xi: Vec<PathBuf>,
    },
    /// Fit the acoustic peak: alpha, D_V/r_d, chi2 curve and plots.
    Fit(Box<FitArgs>),
    /// Run a whole TOML plan: count, estimate, fit, report; resumable and shardable.
    Run(Box<app::run::RunArgs>),
    /// Lognormal mock catalogues.
    #[command(subcommand)]
    Mock(MockCmd),
    /// What D_V/r_d measurements say about spatial curvature (Omega_k).
    Curvature {
        /// `ringscale fit` result files (fit.json) and/or tables of z_eff, D_V/r_d, error.
        #[arg(long, required = true, num_args = 1..)]
        bao: Vec<PathBuf>,
        /// Priors TOML (default: r_d = 147.09 +- 0.26 Mpc, flat Omega_k, Omega_m, h).
        #[arg(long)]
        priors: Option<PathBuf>,
        /// MCMC seed.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Output folder.
        #[arg(long)]
        out: PathBuf,
    },
    /// Run the whole chain on the shipped demo catalogues.
    Demo {
        /// Output folder.
        #[arg(long, default_value = "demo_out")]
        out: PathBuf,
        /// Folder holding the demo catalogues.
        #[arg(long, default_value = "demo_catalogs")]
        catalogs: PathBuf,
        /// Threads (default: SLURM_CPUS_PER_TASK, else all cores).
        #[arg(long)]
        threads: Option<usize>,
    },
    /// Read, validate and summarise a catalogue.
    Inspect {
        catalogue: PathBuf,
        #[command(flatten)]
        columns: ColumnArgs,
        /// Print the summary as JSON.
        #[arg(long)]
        json: bool,
    },
    /// Benchmark the counting path (file read + count) against single-thread baselines.
    Bench(Box<BenchArgs>),
}

#[derive(Args)]
struct BenchArgs {
    /// Tiny sizes (a smoke run of a few seconds).
    #[arg(long)]
    quick: bool,
    /// Also run the 1e6-point boxes.
    #[arg(long)]
    large: bool,
    /// Survey size relative to 2e5 galaxies / 2e6 randoms.
    #[arg(long, default_value_t = 0.1)]
    scale: f64,
    /// Threads for the N-thread runs (default: as for count).
    #[arg(long)]
    threads: Option<usize>,
    /// Python with numpy + scipy for the cKDTree reference (default .venv/bin/python if present).
    #[arg(long)]
    python: Option<PathBuf>,
    /// Keep the generated catalogue files in this folder.
    #[arg(long)]
    workdir: Option<PathBuf>,
    #[arg(long, default_value_t = 20261201)]
    seed: u64,
    /// Write the report as JSON.
    #[arg(long)]
    out: Option<PathBuf>,
    /// Run only these parts, comma-separated: boxes, survey, split-rr, sweep (default: all).
    /// For example `--only split-rr --scale 1` times split RR on the full-size randoms.
    #[arg(long, value_delimiter = ',')]
    only: Vec<String>,
    /// Skip the kiddo and cKDTree baselines (for full-scale runs of our own counter).
    #[arg(long)]
    no_baselines: bool,
}

#[derive(Args)]
struct FitArgs {
    /// Folder with xi.ecsv and covariance.npy (from `ringscale xi`).
    #[arg(long)]
    xi: PathBuf,
    /// Output folder.
    #[arg(long)]
    out: PathBuf,
    /// Template/fiducial cosmology (default: the counting fiducial).
    #[arg(long)]
    cosmology: Option<String>,
    /// Fit range LO:HI in Mpc/h.
    #[arg(long, default_value = "50:150")]
    fit_range: String,
    /// alpha grid LO:HI:STEP.
    #[arg(long, default_value = "0.8:1.2:0.001")]
    alpha_grid: String,
    /// BAO damping scale Sigma_nl in Mpc/h (about 8 before reconstruction).
    #[arg(long, default_value_t = 8.0)]
    sigma_nl: f64,
    /// Linear power table (k [h/Mpc], P [(Mpc/h)^3]) for the template instead of EH98.
    #[arg(long)]
    power_table: Option<PathBuf>,
    /// Also report D_V in Mpc for this r_d [Mpc].
    #[arg(long)]
    rd: Option<f64>,
    /// Skip the PNG/SVG plots.
    #[arg(long)]
    no_plots: bool,
}

#[derive(Subcommand)]
enum MockCmd {
    /// A periodic box of galaxies (X, Y, Z in Mpc/h).
    Box {
        /// True cosmology (preset or TOML file).
        #[arg(long, default_value = "planck18")]
        cosmology: String,
        #[arg(long, default_value_t = 256)]
        n_grid: usize,
        /// Box side in Mpc/h.
        #[arg(long = "box", default_value_t = 1000.0)]
        box_size: f64,
        /// Number density in (h/Mpc)^3.
        #[arg(long, default_value_t = 3e-4)]
        nbar: f64,
        #[arg(long, default_value_t = 2.0)]
        bias: f64,
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Output catalogue (.fits or .csv).
        #[arg(long)]
        out: PathBuf,
        /// Store single-precision columns (half the size).
        #[arg(long)]
        single_precision: bool,
    },
    /// Galaxies and randoms in a sky footprint and redshift range.
    Survey {
        #[arg(long, default_value = "planck18")]
        cosmology: String,
        /// Sky cap RA,DEC,RADIUS in degrees.
        #[arg(long, group = "footprint")]
        cap: Option<String>,
        /// Sky polygon RA1,DEC1;RA2,DEC2;... in degrees (great-circle edges).
        #[arg(long, group = "footprint")]
        polygon: Option<String>,
        /// Redshift range LO:HI.
        #[arg(long)]
        z_range: String,
        /// Constant number density in (h/Mpc)^3.
        #[arg(long)]
        nbar: Option<f64>,
        /// n(z) table: lines "z nbar".
        #[arg(long)]
        nz_table: Option<PathBuf>,
        #[arg(long, default_value_t = 2.0)]
        bias: f64,
        #[arg(long, default_value_t = 256)]
        n_grid: usize,
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Randoms per galaxy.
        #[arg(long, default_value_t = 10.0)]
        random_factor: f64,
        /// Galaxy catalogue output (.fits or .csv).
        #[arg(long)]
        out_galaxies: PathBuf,
        /// Random catalogue output (.fits or .csv).
        #[arg(long)]
        out_randoms: PathBuf,
        /// Store single-precision columns (half the size).
        #[arg(long)]
        single_precision: bool,
    },
}

fn precision(single: bool) -> ringscale::catalog::Precision {
    if single {
        ringscale::catalog::Precision::Single
    } else {
        ringscale::catalog::Precision::Double
    }
}

fn parse_range(spec: &str, what: &str) -> Result<(f64, f64)> {
    let bad = || ringscale::Error::input(format!("{what} '{spec}': expected LO:HI"));
    let (a, b) = spec.split_once(':').ok_or_else(bad)?;
    let lo: f64 = a.trim().parse().map_err(|_| bad())?;
    let hi: f64 = b.trim().parse().map_err(|_| bad())?;
    if lo.is_nan() || hi.is_nan() || lo >= hi {
        return Err(bad());
    }
    Ok((lo, hi))
}

fn fit_options(a: &FitArgs) -> Result<app::fit::FitOptions> {
    let (s_min, s_max) = parse_range(&a.fit_range, "--fit-range")?;
    let g: Vec<f64> = a
        .alpha_grid
        .split(':')
        .map(|t| t.trim().parse::<f64>())
        .collect::<std::result::Result<_, _>>()
        .map_err(|_| {
            ringscale::Error::input(format!(
                "--alpha-grid '{}': expected LO:HI:STEP",
                a.alpha_grid
            ))
        })?;
    if g.len() != 3 {
        return Err(ringscale::Error::input(format!(
            "--alpha-grid '{}': expected LO:HI:STEP",
            a.alpha_grid
        )));
    }
    Ok(app::fit::FitOptions {
        xi_dir: a.xi.clone(),
        out: a.out.clone(),
        cosmology: a.cosmology.clone(),
        fit: ringscale::fit::IsotropicOptions {
            s_min,
            s_max,
            alpha_min: g[0],
            alpha_max: g[1],
            alpha_step: g[2],
        },
        template: ringscale::fit::TemplateOptions {
            sigma_nl: a.sigma_nl,
            ..Default::default()
        },
        power_table: a.power_table.clone(),
        rd_user: a.rd,
        plots: !a.no_plots,
    })
}

#[derive(Args)]
struct CountArgs {
    /// Galaxy catalogue (FITS or CSV).
    #[arg(long)]
    data: PathBuf,
    /// Random catalogue (FITS or CSV).
    #[arg(long)]
    randoms: Option<PathBuf>,
    /// Fiducial cosmology (preset or TOML file) for RA, Dec, z catalogues.
    #[arg(long, conflicts_with = "cartesian")]
    cosmology: Option<String>,
    /// Positions are X, Y, Z columns in Mpc/h.
    #[arg(long)]
    cartesian: bool,
    /// Periodic box of this side (Mpc/h), with --cartesian.
    #[arg(long = "box", requires = "cartesian")]
    box_size: Option<f64>,
    /// Linear separation bins LO:HI:N in Mpc/h.
    #[arg(long, group = "bins")]
    edges: Option<String>,
    /// Logarithmic separation bins LO:HI:N in Mpc/h.
    #[arg(long, group = "bins")]
    log_edges: Option<String>,
    /// File of explicit separation edges in Mpc/h.
    #[arg(long, group = "bins")]
    edges_file: Option<PathBuf>,
    /// Number of mu bins on [0, 1].
    #[arg(long, default_value_t = 1)]
    mu_bins: usize,
    /// Split the randoms into M disjoint subsets for RR.
    #[arg(long, default_value_t = 1)]
    rr_splits: usize,
    /// Assign K jackknife regions (k-means on the sky; slabs for Cartesian input).
    #[arg(long)]
    regions: Option<usize>,
    /// Seed of the k-means region assignment.
    #[arg(long, default_value_t = 1)]
    region_seed: u64,
    /// Threads (default: SLURM_CPUS_PER_TASK, else all cores).
    #[arg(long)]
    threads: Option<usize>,
    /// Compute part k of N (0-based) of the work.
    #[arg(long)]
    shard: Option<String>,
    /// Refuse to start when the memory estimate exceeds this many MiB.
    #[arg(long)]
    max_memory: Option<f64>,
    /// Output counts folder.
    #[arg(long)]
    out: PathBuf,
    /// X column for --cartesian.
    #[arg(long, default_value = "X")]
    x_column: String,
    /// Y column for --cartesian.
    #[arg(long, default_value = "Y")]
    y_column: String,
    /// Z-position column for --cartesian.
    #[arg(long, default_value = "Z")]
    zpos_column: String,
    #[command(flatten)]
    columns: ColumnArgs,
}

#[derive(Args)]
struct SweepArgs {
    /// Galaxy catalogue (FITS or CSV, RA/DEC/Z).
    #[arg(long)]
    data: PathBuf,
    /// Random catalogue (FITS or CSV, RA/DEC/Z).
    #[arg(long)]
    randoms: PathBuf,
    /// Base cosmology (preset or TOML) whose Omega_k is replaced by each --omega-k-list value.
    #[arg(long, default_value = "planck18")]
    cosmology: String,
    /// Comma-separated Omega_k values of the fiducials (physical densities and h fixed).
    #[arg(long, allow_hyphen_values = true, group = "fids")]
    omega_k_list: Option<String>,
    /// Comma-separated cosmology presets or TOML files, one per fiducial.
    #[arg(long, group = "fids")]
    cosmology_files: Option<String>,
    /// Linear separation bins LO:HI:N in Mpc/h.
    #[arg(long, default_value = "0:200:40")]
    edges: String,
    /// Split the randoms into M disjoint subsets for RR.
    #[arg(long, default_value_t = 1)]
    rr_splits: usize,
    /// Assign K jackknife regions (k-means on the sky).
    #[arg(long)]
    regions: Option<usize>,
    /// Seed of the k-means region assignment.
    #[arg(long, default_value_t = 1)]
    region_seed: u64,
    /// Also measure every curved fiducial with the radial-only mapping and the flat formula.
    #[arg(long)]
    naive: bool,
    /// Threads (default: SLURM_CPUS_PER_TASK, else all cores).
    #[arg(long)]
    threads: Option<usize>,
    /// Fit range LO:HI in Mpc/h.
    #[arg(long, default_value = "50:150")]
    fit_range: String,
    /// BAO damping scale Sigma_nl in Mpc/h.
    #[arg(long, default_value_t = 8.0)]
    sigma_nl: f64,
    /// Skip the PNG/SVG plots of the per-fiducial fits.
    #[arg(long)]
    no_plots: bool,
    /// Output folder.
    #[arg(long)]
    out: PathBuf,
    #[command(flatten)]
    columns: ColumnArgs,
}

fn sweep_options(a: &SweepArgs) -> Result<app::sweep::SweepOptions> {
    use app::count::{parse_edges, RegionChoice};
    use app::sweep::FiducialList;
    let list = |s: &str| -> Vec<String> {
        s.split(',')
            .map(|t| t.trim().to_string())
            .filter(|t| !t.is_empty())
            .collect()
    };
    let fiducials = match (&a.omega_k_list, &a.cosmology_files) {
        (Some(v), _) => FiducialList::OmegaK {
            base: a.cosmology.clone(),
            values: list(v)
                .iter()
                .map(|t| {
                    t.parse::<f64>().map_err(|_| {
                        ringscale::Error::input(format!("--omega-k-list: '{t}' is not a number"))
                    })
                })
                .collect::<Result<_>>()?,
        },
        (_, Some(f)) => FiducialList::Files(list(f)),
        _ => {
            return Err(ringscale::Error::input(
                "give the fiducials: --omega-k-list or --cosmology-files",
            ))
        }
    };
    let regions = match (a.regions, &a.columns.region_column) {
        (Some(_), Some(_)) => {
            return Err(ringscale::Error::input(
                "use either --regions K or --region-column, not both",
            ))
        }
        (Some(k), None) => RegionChoice::Assign {
            k,
            seed: a.region_seed,
        },
        (None, Some(_)) => RegionChoice::Column,
        (None, None) => RegionChoice::None,
    };
    let (s_min, s_max) = parse_range(&a.fit_range, "--fit-range")?;
    Ok(app::sweep::SweepOptions {
        data: a.data.clone(),
        randoms: a.randoms.clone(),
        fiducials,
        columns: a.columns.sky_map(),
        filter: a.columns.filter(),
        binning: ringscale::pairs::Binning::new(parse_edges(&a.edges, false)?, 1)?,
        rr_splits: a.rr_splits,
        regions,
        naive: a.naive,
        threads: app::resolve_threads(a.threads),
        out: a.out.clone(),
        fit: ringscale::fit::IsotropicOptions {
            s_min,
            s_max,
            ..Default::default()
        },
        template: ringscale::fit::TemplateOptions {
            sigma_nl: a.sigma_nl,
            ..Default::default()
        },
        plots: !a.no_plots,
    })
}

fn count_options(a: &CountArgs) -> Result<app::count::CountOptions> {
    use app::count::*;
    let edges = match (&a.edges, &a.log_edges, &a.edges_file) {
        (Some(s), _, _) => parse_edges(s, false)?,
        (_, Some(s), _) => parse_edges(s, true)?,
        (_, _, Some(p)) => read_edges_file(p)?,
        _ => {
            return Err(ringscale::Error::input(
                "give the separation bins: --edges, --log-edges or --edges-file",
            ))
        }
    };
    let binning = ringscale::pairs::Binning::new(edges, a.mu_bins)?;
    let (geometry, columns) = if a.cartesian {
        let map = ColumnMap::cartesian(
            &a.x_column,
            &a.y_column,
            &a.zpos_column,
            a.columns.weight_columns.clone(),
            a.columns.region_column.clone(),
        );
        (
            GeometryChoice::Cartesian {
                box_size: a.box_size,
            },
            map,
        )
    } else {
        let c = a.cosmology.clone().ok_or_else(|| {
            ringscale::Error::input("give --cosmology NAME|FILE (or --cartesian)")
        })?;
        (GeometryChoice::Survey { cosmology: c }, a.columns.sky_map())
    };
    let regions = match (a.regions, &a.columns.region_column) {
        (Some(_), Some(_)) => {
            return Err(ringscale::Error::input(
                "use either --regions K or --region-column, not both",
            ))
        }
        (Some(k), None) => RegionChoice::Assign {
            k,
            seed: a.region_seed,
        },
        (None, Some(_)) => RegionChoice::Column,
        (None, None) => RegionChoice::None,
    };
    let shard = match &a.shard {
        Some(s) => parse_shard(s)?,
        None => (0, 1),
    };
    Ok(CountOptions {
        data: a.data.clone(),
        randoms: a.randoms.clone(),
        skip_rr: false,
        geometry,
        columns,
        filter: a.columns.filter(),
        binning,
        rr_splits: a.rr_splits,
        regions,
        threads: app::resolve_threads(a.threads),
        shard,
        out: a.out.clone(),
        max_memory: a.max_memory.map(|m| (m * 1048576.0) as u64),
    })
}

fn run(cli: Cli) -> Result<()> {
    match cli.cmd {
        Cmd::Distances {
            cosmology,
            z,
            format,
        } => {
            let src = Cosmology::from_name_or_file(&cosmology)?;
            let zs = app::distances::parse_redshifts(&z)?;
            let report = app::distances::compute(&src, &zs);
            print!("{}", app::distances::render(&report, &format)?);
        }
        Cmd::Sweep(a) => {
            let s = app::sweep::run(&sweep_options(&a)?)?;
            for r in &s.rows {
                println!(
                    "{:28} {:6} alpha = {:.4} +- {:.4}  D_V/r_d = {:.3} +- {:.3}  ({:+.2} sigma vs {})",
                    r.label,
                    r.mapping,
                    r.alpha,
                    r.alpha_err,
                    r.dv_over_rd,
                    r.dv_over_rd_err,
                    r.deviation_sigma,
                    s.reference
                );
            }
            println!(
                "spread of D_V/r_d over exact fiducials: {:.3} sigma",
                s.exact_spread_sigma
            );
        }
        Cmd::Count(a) => {
            let opt = count_options(&a)?;
            let outcome = app::count::run_and_report(&opt)?;
            for m in outcome.messages {
                eprintln!("{m}");
            }
        }
        Cmd::Merge { out, shards } => {
            let states = app::count::merge_folders(&shards)?;
            app::count::write_folder(&out, &states)?;
            eprintln!(
                "merged {} shard folders into {}",
                shards.len(),
                out.display()
            );
        }
        Cmd::Xi {
            counts,
            out,
            rebin,
            mock_xi,
        } => {
            let s = app::xi::run(&app::xi::XiOptions {
                counts,
                out: out.clone(),
                rebin,
                mock_xi,
            })?;
            eprintln!(
                "xi: {} ({} s bins, {} mu bins), covariance: {} ({} samples) -> {}",
                s.estimator,
                s.n_s,
                s.n_mu,
                s.covariance,
                s.n_samples,
                out.display()
            );
        }
        Cmd::Fit(a) => {
            let o = app::fit::run(&fit_options(&a)?)?;
            let r = &o.result;
            println!(
                "alpha = {:.4} -{:.4} +{:.4}   chi2/dof = {:.1}/{}   detection {:.1} sigma",
                r.alpha, r.alpha_err_lo, r.alpha_err_hi, r.chi2_min, r.dof, r.detection_sigma
            );
            println!(
                "z_eff = {:.4}   D_V/r_d = {:.3} +- {:.3}",
                r.z_eff, r.dv_over_rd, r.dv_over_rd_err
            );
            for f in &o.files {
                println!("wrote {}", f.display());
            }
        }
        Cmd::Run(a) => app::run::main(&a)?,
        Cmd::Mock(m) => match m {
            MockCmd::Box {
                cosmology,
                n_grid,
                box_size,
                nbar,
                bias,
                seed,
                out,
                single_precision,
            } => {
                let cfg = ringscale::mock::BoxMockConfig {
                    n_grid,
                    box_size,
                    nbar,
                    bias,
                    seed,
                };
                let info = app::mock::run_box(&cosmology, &cfg, &out, precision(single_precision))?;
                eprintln!("wrote {} galaxies to {}", info.n_galaxies, out.display());
            }
            MockCmd::Survey {
                cosmology,
                cap,
                polygon,
                z_range,
                nbar,
                nz_table,
                bias,
                n_grid,
                seed,
                random_factor,
                out_galaxies,
                out_randoms,
                single_precision,
            } => {
                let footprint = match (cap, polygon) {
                    (Some(c), None) => app::mock::parse_cap(&c)?,
                    (None, Some(p)) => app::mock::parse_polygon(&p)?,
                    _ => {
                        return Err(ringscale::Error::input(
                            "give a footprint: --cap or --polygon",
                        ))
                    }
                };
                let (z_min, z_max) = parse_range(&z_range, "--z-range")?;
                let cfg = ringscale::mock::SurveyMockConfig {
                    footprint,
                    z_min,
                    z_max,
                    nbar: app::mock::nz_spec(nbar, nz_table.as_ref())?,
                    bias,
                    n_grid,
                    seed,
                    random_factor,
                };
                let info = app::mock::run_survey(
                    &cosmology,
                    &cfg,
                    &out_galaxies,
                    &out_randoms,
                    precision(single_precision),
                )?;
                eprintln!(
                    "wrote {} galaxies to {} and {} randoms to {}",
                    info.n_galaxies,
                    out_galaxies.display(),
                    info.n_randoms,
                    out_randoms.display()
                );
            }
        },
        Cmd::Curvature {
            bao,
            priors,
            seed,
            out,
        } => {
            let settings = ringscale::inference::SamplerSettings {
                seed,
                ..Default::default()
            };
            let r = app::curvature::run(&app::curvature::CurvatureOptions {
                bao,
                priors,
                settings,
                out: out.clone(),
            })?;
            print!("{}", app::curvature::render(&r));
            println!("wrote {}", out.display());
        }
        Cmd::Demo {
            out,
            catalogs,
            threads,
        } => {
            let opt = app::demo::DemoOptions {
                catalogs,
                out: out.clone(),
                threads: app::resolve_threads(threads),
            };
            let s = app::demo::run(&opt)?;
            print!("{}", app::demo::render(&s, &out));
        }
        Cmd::Bench(a) => {
            let opt = app::bench::BenchOptions {
                quick: a.quick,
                large: a.large,
                scale: a.scale,
                threads: app::resolve_threads(a.threads),
                python: a.python.clone(),
                workdir: a.workdir.clone(),
                seed: a.seed,
                only: a
                    .only
                    .iter()
                    .map(|n| app::bench::BenchPart::parse(n))
                    .collect::<Result<_>>()?,
                baselines: !a.no_baselines,
            };
            app::bench::run_and_report(&opt, a.out.as_deref())?;
        }
        Cmd::Inspect {
            catalogue,
            columns,
            json,
        } => {
            let s = app::inspect::run(&catalogue, &columns.sky_map(), &columns.filter())?;
            if json {
                println!("{}", serde_json::to_string_pretty(&s).unwrap_or_default());
            } else {
                print!("{}", app::inspect::render_text(&s));
            }
        }
    }
    Ok(())
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("ringscale: error: {e}");
            ExitCode::from(e.exit_code() as u8)
        }
    }
}
