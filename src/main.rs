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
    /// Read, validate and summarise a catalogue.
    Inspect {
        catalogue: PathBuf,
        #[command(flatten)]
        columns: ColumnArgs,
        /// Print the summary as JSON.
        #[arg(long)]
        json: bool,
    },
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
