//! `ringscale demo`: the whole chain on the shipped Lantern Bay Redshift Survey catalogues
//! (an invented survey of an invented universe): count with split randoms and jackknife regions,
//! Landy-Szalay xi with its covariance, the BAO fit, D_V/r_d, and the curvature statement, with
//! plots and a summary.json. The alpha the demo should find follows from its true cosmology.
use super::count::{CountOptions, GeometryChoice, RegionChoice};
use crate::catalog::{read_catalogue, ColumnMap, RowFilter};
use crate::cosmology::Cosmology;
use crate::fit::{IsotropicOptions, TemplateOptions};
use crate::inference::SamplerSettings;
use crate::pairs::Binning;
use crate::report::{json, npy, plots};
use crate::{Error, Result};
use serde::Serialize;
use std::path::{Path, PathBuf};
use std::time::Instant;

pub const GALAXIES: &str = "lantern_bay_galaxies.fits";
pub const RANDOMS: &str = "lantern_bay_randoms.fits";
pub const TRUTH: &str = "lantern_bay_truth.toml";
/// The fiducial the demo analyses with.
pub const FIDUCIAL: &str = "planck18";

#[derive(Debug, Clone)]
pub struct DemoOptions {
    pub catalogs: PathBuf,
    pub out: PathBuf,
    pub threads: usize,
}

#[derive(Debug, Serialize)]
pub struct DemoSummary {
    pub survey: String,
    pub alpha: f64,
    pub alpha_err_lo: f64,
    pub alpha_err_hi: f64,
    pub alpha_expected: f64,
    pub alpha_pull: f64,
    pub dv_over_rd: f64,
    pub dv_over_rd_err: f64,
    pub dv_over_rd_true: f64,
    pub z_eff: f64,
    pub detection_sigma: f64,
    pub chi2_min: f64,
    pub dof: i64,
    pub n_galaxies: usize,
    pub n_randoms: usize,
    pub omega_k_mean: f64,
    pub omega_k_std: f64,
    pub omega_k_ci95: [f64; 2],
    pub curvature_statement: String,
    pub fiducial: String,
    pub true_cosmology: Cosmology,
    pub plots: Vec<String>,
    pub seconds: Vec<(String, f64)>,
    pub tool: String,
    pub version: String,
}

fn need(path: &Path) -> Result<()> {
    if path.exists() {
        Ok(())
    } else {
        Err(Error::input(format!(
            "{}: demo catalogue not found; run the demo from the repository root or pass --catalogs DIR",
            path.display()
        )))
    }
}

pub fn run(opt: &DemoOptions) -> Result<DemoSummary> {
    let gal = opt.catalogs.join(GALAXIES);
    let ran = opt.catalogs.join(RANDOMS);
    let truth_path = opt.catalogs.join(TRUTH);
    for p in [&gal, &ran, &truth_path] {
        need(p)?;
    }
    let truth = Cosmology::from_toml_file(&truth_path)?;
    super::count::ensure_writable(&opt.out)?;
    let mut seconds = Vec::new();
    let mut t = Instant::now();
    let mut lap = |name: &str, t: &mut Instant| {
        seconds.push((name.to_string(), t.elapsed().as_secs_f64()));
        *t = Instant::now();
    };

    // 1. Pair counts: 5 Mpc/h bins to 200 Mpc/h, RR from 10 split random subsets, 40 jackknife
    //    regions by k-means on the sky.
    let counts_dir = opt.out.join("counts");
    let copt = CountOptions {
        data: gal.clone(),
        randoms: Some(ran.clone()),
        geometry: GeometryChoice::Survey {
            cosmology: FIDUCIAL.into(),
        },
        columns: ColumnMap::sky("RA", "DEC", "Z", vec!["WEIGHT".into()], None),
        filter: RowFilter::default(),
        binning: Binning::new((0..=40).map(|i| 5.0 * i as f64).collect(), 1)?,
        rr_splits: 10,
        regions: RegionChoice::Assign { k: 40, seed: 1 },
        threads: opt.threads,
        shard: (0, 1),
        out: counts_dir.clone(),
        max_memory: None,
        skip_rr: false,
    };
    let counted = super::count::run_and_report(&copt)?;
    lap("count", &mut t);

    // 2. xi and jackknife covariance.
    let xi_dir = opt.out.join("xi");
    super::xi::run(&super::xi::XiOptions {
        counts: counts_dir,
        out: xi_dir.clone(),
        rebin: 1,
        mock_xi: vec![],
    })?;
    lap("xi", &mut t);

    // 3. BAO fit with plots.
    let fit_dir = opt.out.join("fit");
    let fitted = super::fit::run(&super::fit::FitOptions {
        xi_dir: xi_dir.clone(),
        out: fit_dir.clone(),
        cosmology: None,
        fit: IsotropicOptions::default(),
        template: TemplateOptions::default(),
        power_table: None,
        rd_user: None,
        plots: true,
    })?;
    lap("fit", &mut t);
    let r = &fitted.result;

    // 4. Curvature from this one measurement with the Planck 2018 r_d prior.
    let curv_dir = opt.out.join("curvature");
    let inf = super::curvature::run(&super::curvature::CurvatureOptions {
        bao: vec![fit_dir.join("fit.json")],
        priors: None,
        settings: SamplerSettings::default(),
        out: curv_dir.clone(),
    })?;
    lap("curvature", &mut t);

    // 5. Plots of the inputs: footprint, n(z), jackknife correlation matrix.
    let cat = read_catalogue(&gal, &ColumnMap::default_sky(), &RowFilter::default())?;
    let title = "Lantern Bay Redshift Survey (demo)";
    plots::sky_plot(
        &opt.out.join("footprint"),
        cat.ra(),
        cat.dec(),
        &format!("{title}: footprint"),
    )?;
    plots::nz_plot(
        &opt.out.join("nz"),
        cat.redshift(),
        Some(&cat.w),
        30,
        &format!("{title}: redshifts"),
    )?;
    let cov = match npy::read_npy(&xi_dir.join("covariance.npy"))?.data {
        npy::NpyData::F64(v) => v,
        _ => return Err(Error::other("covariance.npy is not float64")),
    };
    let n = (cov.len() as f64).sqrt().round() as usize;
    let diag: Vec<f64> = (0..n).map(|i| cov[i * n + i]).collect();
    let corr: Vec<f64> = (0..n * n)
        .map(|k| {
            let (i, j) = (k / n, k % n);
            let d = (diag[i] * diag[j]).sqrt();
            if d > 0.0 {
                cov[k] / d
            } else if i == j {
                1.0
            } else {
                0.0
            }
        })
        .collect();
    let centres: Vec<f64> = (0..n).map(|i| 5.0 * i as f64 + 2.5).collect();
    plots::correlation_matrix_plot(
        &opt.out.join("correlation_matrix"),
        &corr,
        n,
        &centres,
        "jackknife correlation matrix of ξ(s)",
    )?;
    lap("plots", &mut t);

    // Copy the fit and posterior plots to the top of the output folder for a quick look.
    let mut plot_files = Vec::new();
    for (src_dir, stem) in [
        (&fit_dir, "xi_fit"),
        (&fit_dir, "chi2_alpha"),
        (&curv_dir, "posterior_omega_k"),
    ] {
        for ext in ["png", "svg"] {
            let from = src_dir.join(format!("{stem}.{ext}"));
            let to = opt.out.join(format!("{stem}.{ext}"));
            if from.exists() {
                let bytes = std::fs::read(&from).map_err(|e| Error::io(&from, "cannot read", e))?;
                crate::report::atomic::write_atomic(&to, &bytes)?;
            }
        }
    }
    for stem in [
        "xi_fit",
        "chi2_alpha",
        "posterior_omega_k",
        "footprint",
        "nz",
        "correlation_matrix",
    ] {
        for ext in ["png", "svg"] {
            let p = opt.out.join(format!("{stem}.{ext}"));
            if p.exists() {
                plot_files.push(p.display().to_string());
            }
        }
    }

    // The alpha the true cosmology implies at the measured z_eff.
    let fid = Cosmology::from_name_or_file(FIDUCIAL)?.params;
    let dv_rd_true = truth.dv(r.z_eff) / truth.r_d();
    let alpha_expected = dv_rd_true / (fid.dv(r.z_eff) / fid.r_d());
    let err = if r.alpha > alpha_expected {
        r.alpha_err_lo
    } else {
        r.alpha_err_hi
    };
    let ok = inf.omega_k();
    let summary = DemoSummary {
        survey: "Lantern Bay Redshift Survey (invented demo data)".into(),
        alpha: r.alpha,
        alpha_err_lo: r.alpha_err_lo,
        alpha_err_hi: r.alpha_err_hi,
        alpha_expected,
        alpha_pull: (r.alpha - alpha_expected) / err,
        dv_over_rd: r.dv_over_rd,
        dv_over_rd_err: r.dv_over_rd_err,
        dv_over_rd_true: dv_rd_true,
        z_eff: r.z_eff,
        detection_sigma: r.detection_sigma,
        chi2_min: r.chi2_min,
        dof: r.dof,
        n_galaxies: counted.states[0].meta.data.rows_used,
        n_randoms: counted.states[0]
            .meta
            .randoms
            .as_ref()
            .map_or(0, |r| r.rows_used),
        omega_k_mean: ok.mean,
        omega_k_std: ok.std,
        omega_k_ci95: [ok.ci95[0], ok.ci95[1]],
        curvature_statement: inf.statement.clone(),
        fiducial: FIDUCIAL.into(),
        true_cosmology: truth,
        plots: plot_files,
        seconds,
        tool: "ringscale".into(),
        version: crate::VERSION.into(),
    };
    json::write_json(&opt.out.join("summary.json"), &summary)?;
    Ok(summary)
}

/// The human summary printed at the end of the demo.
pub fn render(s: &DemoSummary, out: &Path) -> String {
    let total: f64 = s.seconds.iter().map(|(_, t)| t).sum();
    let mut o = String::new();
    o += &format!("{}\n", s.survey);
    o += &format!(
        "  {} galaxies, {} randoms, fiducial {}\n",
        s.n_galaxies, s.n_randoms, s.fiducial
    );
    o += &format!("  z_eff = {:.4}\n", s.z_eff);
    o += &format!(
        "  alpha = {:.4} -{:.4} +{:.4}   (the demo universe implies {:.4}; pull {:+.2})\n",
        s.alpha, s.alpha_err_lo, s.alpha_err_hi, s.alpha_expected, s.alpha_pull
    );
    o += &format!(
        "  D_V/r_d = {:.3} +- {:.3}   (true {:.3})\n",
        s.dv_over_rd, s.dv_over_rd_err, s.dv_over_rd_true
    );
    o += &format!(
        "  acoustic peak detected at {:.1} sigma; chi2 = {:.1} for {} dof\n",
        s.detection_sigma, s.chi2_min, s.dof
    );
    o += &format!("  curvature: {}\n", s.curvature_statement.trim());
    o += &format!(
        "  plots and tables in {} (summary.json; {:.0} s)\n",
        out.display(),
        total
    );
    o
}
