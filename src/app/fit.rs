//! `ringscale fit`: xi + covariance + fiducial -> isotropic alpha, D_V/r_d, chi2 curve, plots.
//!
//! Only the bins inside the fit range enter: their covariance block is inverted (with the
//! Hartlap et al. 2007 factor when it came from mocks), so bins outside the range may be empty.
use crate::cosmology::power::LinearPower;
use crate::cosmology::Cosmology;
use crate::estimator::{hartlap_factor, inverse_spd};
use crate::fit::{
    dv_over_rd, fit_isotropic, BaoTemplate, IsotropicFit, IsotropicOptions, TemplateOptions,
};
use crate::report::{ecsv, json, npy, plots};
use crate::{Error, Result};
use ndarray::Array2;
use serde::Serialize;
use std::path::{Path, PathBuf};

#[derive(Debug, Clone)]
pub struct FitOptions {
    /// Folder with xi.ecsv and covariance.npy (from `ringscale xi`).
    pub xi_dir: PathBuf,
    pub out: PathBuf,
    /// Fiducial/template cosmology; default: the one recorded with the counts.
    pub cosmology: Option<String>,
    pub fit: IsotropicOptions,
    pub template: TemplateOptions,
    /// Optional linear power table (k [h/Mpc], P [(Mpc/h)^3]) for the template.
    pub power_table: Option<PathBuf>,
    /// A user r_d [Mpc] to also report D_V in Mpc.
    pub rd_user: Option<f64>,
    pub plots: bool,
}

/// The JSON result of a fit.
#[derive(Debug, Clone, Serialize)]
pub struct FitResult {
    pub alpha: f64,
    pub alpha_err_lo: f64,
    pub alpha_err_hi: f64,
    pub alpha_err: f64,
    pub interval_open: bool,
    pub chi2_min: f64,
    pub dof: i64,
    pub chi2_per_dof: f64,
    pub detection_sigma: f64,
    pub z_eff: f64,
    pub dv_over_rd: f64,
    pub dv_over_rd_err: f64,
    pub dv_over_rd_err_lo: f64,
    pub dv_over_rd_err_hi: f64,
    pub dv_fid_mpc: f64,
    pub rd_fid_mpc: f64,
    pub dv_mpc_for_user_rd: Option<(f64, f64)>,
    pub rd_user_mpc: Option<f64>,
    pub fit_range_mpc_h: (f64, f64),
    pub n_bins_fit: usize,
    pub b2: f64,
    pub broadband: (f64, f64, f64),
    pub sigma_nl_mpc_h: f64,
    pub covariance: String,
    pub hartlap_factor: f64,
    pub fiducial: serde_json::Value,
    pub tool: String,
    pub version: String,
}

pub struct FitOutcome {
    pub result: FitResult,
    pub fit: IsotropicFit,
    pub files: Vec<PathBuf>,
}

/// Everything read from an xi folder.
pub struct XiInput {
    pub s_mean: Vec<f64>,
    pub xi: Vec<f64>,
    pub z_mean: Vec<f64>,
    pub dd_wpairs: Vec<f64>,
    pub cov: Array2<f64>,
    pub cov_source: String,
    pub n_samples: usize,
    pub fiducial: Option<Cosmology>,
    pub fiducial_name: Option<String>,
}

pub fn read_xi_dir(dir: &Path) -> Result<XiInput> {
    let t = ecsv::read_ecsv(&dir.join("xi.ecsv"))?;
    let col = |n: &str| {
        t.f64_column(n)
            .map(|v| v.to_vec())
            .map_err(|e| Error::input(format!("{}/xi.ecsv: {e}", dir.display())))
    };
    let cov_path = dir.join("covariance.npy");
    if !cov_path.exists() {
        return Err(Error::input(format!(
            "{}: no covariance.npy; count with jackknife regions (--regions K) or give mock xi files to `ringscale xi`",
            dir.display()
        )));
    }
    let a = npy::read_npy(&cov_path)?;
    let n = t.n_rows();
    let data = match a.data {
        npy::NpyData::F64(v) => v,
        _ => {
            return Err(Error::input(format!(
                "{}: covariance must be float64",
                cov_path.display()
            )))
        }
    };
    if a.shape != [n, n] {
        return Err(Error::input(format!(
            "{}: covariance shape {:?} does not match the {n} xi bins",
            cov_path.display(),
            a.shape
        )));
    }
    let cov = Array2::from_shape_vec((n, n), data).map_err(|e| Error::other(e.to_string()))?;
    let prov = &t.meta["provenance"];
    let fiducial = if prov["fiducial"].is_null() {
        None
    } else {
        Some(
            serde_json::from_value(prov["fiducial"].clone())
                .map_err(|e| Error::input(format!("{}/xi.ecsv: fiducial: {e}", dir.display())))?,
        )
    };
    Ok(XiInput {
        s_mean: col("s_mean")?,
        xi: col("xi")?,
        z_mean: col("z_mean")?,
        dd_wpairs: col("dd_wpairs")?,
        cov,
        cov_source: t.meta["covariance"]
            .as_str()
            .unwrap_or("unknown")
            .to_string(),
        n_samples: t.meta["n_covariance_samples"].as_u64().unwrap_or(0) as usize,
        fiducial,
        fiducial_name: prov["fiducial_name"].as_str().map(String::from),
    })
}

pub fn run(opt: &FitOptions) -> Result<FitOutcome> {
    let inp = read_xi_dir(&opt.xi_dir)?;
    let (fid, fid_name) = match &opt.cosmology {
        Some(spec) => {
            let src = Cosmology::from_name_or_file(spec)?;
            if let Some(f) = &inp.fiducial {
                if *f != src.params {
                    return Err(Error::input(format!(
                        "--cosmology {spec} differs from the fiducial the pairs were counted with ({}); alpha is relative to the counting fiducial",
                        inp.fiducial_name.clone().unwrap_or_default()
                    )));
                }
            }
            (src.params, src.name)
        }
        None => match inp.fiducial {
            Some(f) => (
                f,
                inp.fiducial_name
                    .clone()
                    .unwrap_or_else(|| "from counts".into()),
            ),
            None => return Err(Error::input(
                "the counts have no fiducial cosmology (a box): give --cosmology for the template",
            )),
        },
    };
    let (lo, hi) = (opt.fit.s_min, opt.fit.s_max);
    let idx: Vec<usize> = (0..inp.s_mean.len())
        .filter(|&i| inp.s_mean[i] >= lo && inp.s_mean[i] <= hi)
        .collect();
    if idx.len() < 6 {
        let (a, b) = inp
            .s_mean
            .iter()
            .filter(|v| v.is_finite())
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
                (a.min(v), b.max(v))
            });
        return Err(Error::input(format!(
            "fit range [{lo}, {hi}] Mpc/h holds {} bins (need >= 6); the bins span [{a:.1}, {b:.1}] Mpc/h",
            idx.len()
        )));
    }
    let s: Vec<f64> = idx.iter().map(|&i| inp.s_mean[i]).collect();
    let xi: Vec<f64> = idx.iter().map(|&i| inp.xi[i]).collect();
    if let Some(k) = xi.iter().position(|v| !v.is_finite()) {
        return Err(Error::input(format!(
            "xi is not finite at s = {:.2} Mpc/h inside the fit range",
            s[k]
        )));
    }
    let n = idx.len();
    let sub = Array2::from_shape_fn((n, n), |(a, b)| inp.cov[[idx[a], idx[b]]]);
    let mut prec = inverse_spd(&sub).map_err(|e| {
        Error::input(format!(
            "covariance of the fit range is not invertible: {e}"
        ))
    })?;
    let hartlap = if inp.cov_source == "mocks" {
        hartlap_factor(inp.n_samples, n)?
    } else {
        1.0
    };
    prec.mapv_inplace(|v| v * hartlap);

    let power = match &opt.power_table {
        Some(p) => LinearPower::from_file(p, &fid)?,
        None => LinearPower::eh98(&fid),
    };
    let template = BaoTemplate::new(&power, &opt.template)?;
    let fit = fit_isotropic(&s, &xi, &prec, &template, &opt.fit)?;

    // z_eff: pair-weighted mean redshift over the fit range.
    let (mut wz, mut w) = (0.0, 0.0);
    for &i in &idx {
        if inp.dd_wpairs[i] > 0.0 && inp.z_mean[i].is_finite() {
            wz += inp.dd_wpairs[i] * inp.z_mean[i];
            w += inp.dd_wpairs[i];
        }
    }
    // A periodic box carries no redshifts: alpha is then relative to the template's acoustic
    // scale (r_d h of the template cosmology, in Mpc/h) and no distance is formed.
    let z_eff = if w > 0.0 { wz / w } else { f64::NAN };
    let rd_fid = fid.r_d();
    let dv = if z_eff > 0.0 {
        dv_over_rd(&fit, &fid, z_eff, rd_fid)?
    } else {
        crate::fit::DvOverRd {
            z_eff: f64::NAN,
            alpha: fit.alpha,
            dv_fid_mpc: f64::NAN,
            rd_fid_mpc: rd_fid,
            dv_over_rd: f64::NAN,
            sigma: f64::NAN,
            sigma_lo: f64::NAN,
            sigma_hi: f64::NAN,
            lower_open: fit.lower_open,
            upper_open: fit.upper_open,
        }
    };
    let src = crate::cosmology::CosmologySource {
        name: fid_name,
        params: fid,
    };
    let result = FitResult {
        alpha: fit.alpha,
        alpha_err_lo: fit.sigma_lo,
        alpha_err_hi: fit.sigma_hi,
        alpha_err: fit.sigma,
        interval_open: fit.lower_open || fit.upper_open,
        chi2_min: fit.chi2_min,
        dof: fit.dof,
        chi2_per_dof: fit.chi2_min / fit.dof as f64,
        detection_sigma: fit.detection_sigma,
        z_eff,
        dv_over_rd: dv.dv_over_rd,
        dv_over_rd_err: dv.sigma,
        dv_over_rd_err_lo: dv.sigma_lo,
        dv_over_rd_err_hi: dv.sigma_hi,
        dv_fid_mpc: dv.dv_fid_mpc,
        rd_fid_mpc: rd_fid,
        dv_mpc_for_user_rd: opt.rd_user.map(|r| dv.dv_mpc(r)),
        rd_user_mpc: opt.rd_user,
        fit_range_mpc_h: (lo, hi),
        n_bins_fit: n,
        b2: fit.b2,
        broadband: (fit.a0, fit.a1, fit.a2),
        sigma_nl_mpc_h: opt.template.sigma_nl,
        covariance: inp.cov_source.clone(),
        hartlap_factor: hartlap,
        fiducial: super::distances::cosmology_json(&src),
        tool: "ringscale".into(),
        version: crate::VERSION.into(),
    };

    super::count::ensure_writable(&opt.out)?;
    let mut files = vec![opt.out.join("fit.json"), opt.out.join("chi2.ecsv")];
    json::write_json(&files[0], &result)?;
    let t = ecsv::Table {
        columns: vec![
            ecsv::Column::f64("alpha", fit.alpha_grid.clone()),
            ecsv::Column::f64("chi2", fit.chi2_grid.clone()),
            ecsv::Column::f64("chi2_nowiggle", fit.chi2_nowiggle_grid.clone()),
        ],
        meta: serde_json::json!({"alpha": fit.alpha, "chi2_min": fit.chi2_min, "fit_range_mpc_h": [lo, hi], "tool": "ringscale", "version": crate::VERSION}),
    };
    ecsv::write_ecsv(&files[1], &t)?;
    if opt.plots {
        // Data over the whole measured range; models on a fine grid across it.
        let err: Vec<f64> = (0..inp.s_mean.len())
            .map(|i| inp.cov[[i, i]].max(0.0).sqrt())
            .collect();
        // The broadband terms are only constrained inside the fit range: draw the model there.
        let smin = inp
            .s_mean
            .iter()
            .copied()
            .filter(|v| v.is_finite())
            .fold(f64::INFINITY, f64::min)
            .max(lo * 0.5);
        let grid: Vec<f64> = (0..300)
            .map(|k| lo + (hi - lo) * k as f64 / 299.0)
            .collect();
        let model: Vec<f64> = grid.iter().map(|&x| model_at(&fit, &template, x)).collect();
        let keep: Vec<usize> = (0..inp.s_mean.len())
            .filter(|&i| inp.s_mean[i] >= smin && inp.xi[i].is_finite())
            .collect();
        let pick = |v: &[f64]| keep.iter().map(|&i| v[i]).collect::<Vec<f64>>();
        let stem = opt.out.join("xi_fit");
        plots::xi_plot(
            &stem,
            &pick(&inp.s_mean),
            &pick(&inp.xi),
            &pick(&err),
            Some((&grid, &model)),
            Some((&fit.s, &fit.model_nowiggle)),
            &format!("ξ(s), best fit α = {:.4} ± {:.4}", fit.alpha, fit.sigma),
        )?;
        let stem2 = opt.out.join("chi2_alpha");
        plots::chi2_plot(
            &stem2,
            &fit.alpha_grid,
            &fit.chi2_grid,
            Some(&fit.chi2_nowiggle_grid),
            fit.alpha,
            (fit.alpha_lo, fit.alpha_hi),
            "χ²(α)",
        )?;
        for st in [stem, stem2] {
            files.push(st.with_extension("png"));
            files.push(st.with_extension("svg"));
        }
    }
    Ok(FitOutcome { result, fit, files })
}

/// Best-fit model at any s (for drawing it beyond the fitted bins).
fn model_at(fit: &IsotropicFit, t: &BaoTemplate, s: f64) -> f64 {
    fit.b2 * t.xi(fit.alpha * s) + fit.a0 + fit.a1 / s + fit.a2 / (s * s)
}
