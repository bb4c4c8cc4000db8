//! Curvature inference: what do D_V/r_d measurements say about Omega_k?
//!
//! Model: LambdaCDM + Omega_k (w = -1), with radiation and neutrino masses fixed from a base
//! cosmology (`[base]` in the priors). Two parametrisations (see `priors`):
//! (Omega_k, Omega_m, h, r_d) with an r_d prior, or (Omega_k, h, omega_b h^2, omega_c h^2) with
//! r_d from Aubourg et al. 2015 eq. 16 (needed for the compressed CMB prior).
//!
//! Samplers: a grid (`grid`) and an affine-invariant ensemble MCMC (`mcmc`); both are reported
//! when both run, so each checks the other. The grid's means and widths are accurate; its
//! quantiles come from projected grid points and are coarser in 3-4 dimensions, so the MCMC is
//! the primary summary when it runs. BAO D_V/r_d alone constrains only Omega_m, Omega_k
//! and the product h r_d, so without outside information Omega_k is degenerate with Omega_m and
//! h; the summary says which regime the data are in.
pub mod data;
pub mod grid;
pub mod mcmc;
pub mod model;
pub mod priors;

pub use data::{parse_bao_table, parse_fit_json, read_bao_files, BaoPoint};
pub use model::{Model, Parametrisation, Phys, REPORT_NAMES};
pub use priors::{BaseParams, CmbPrior, ParamPrior, Prior, Priors};

use crate::{Error, Result};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Flatness level reached by CMB + BAO (common practice, no source): |Omega_k| < ~0.0025.
pub const CMB_BAO_FLATNESS: f64 = 0.0025;

/// Sampler choices. Defaults suit up to four free parameters.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct SamplerSettings {
    pub seed: u64,
    pub run_mcmc: bool,
    pub run_grid: bool,
    /// Walkers per ensemble (0: max(32, 4 * ndim), rounded up to even).
    pub n_walkers: usize,
    /// Steps per ensemble before the first convergence check.
    pub n_steps: usize,
    /// Chains are extended (doubling) until they exceed 50 tau or reach this length.
    pub max_steps: usize,
    /// Fraction of each chain discarded as burn-in.
    pub burn_fraction: f64,
    /// Independent ensembles, compared by Gelman-Rubin.
    pub n_chains: usize,
    /// Stretch-move scale a (Goodman & Weare 2010 use 2).
    pub stretch: f64,
    /// Final grid points per dimension (0: 200, 60, 32, 24 for 1-4 free parameters).
    pub grid_points: usize,
}

impl Default for SamplerSettings {
    fn default() -> Self {
        SamplerSettings {
            seed: 1,
            run_mcmc: true,
            run_grid: true,
            n_walkers: 0,
            n_steps: 2000,
            max_steps: 32000,
            burn_fraction: 0.25,
            n_chains: 4,
            stretch: 2.0,
            grid_points: 0,
        }
    }
}

impl SamplerSettings {
    pub fn validate(&self) -> Result<()> {
        let bad = |m: &str| Err(Error::input(format!("sampler settings: {m}")));
        if !self.run_mcmc && !self.run_grid {
            return bad("enable the MCMC, the grid, or both");
        }
        if self.n_walkers != 0 && self.n_walkers < 4 {
            return bad("n_walkers must be 0 (auto) or at least 4");
        }
        if self.n_steps < 100 || self.max_steps < self.n_steps {
            return bad("n_steps must be >= 100 and max_steps >= n_steps");
        }
        if !(self.burn_fraction >= 0.0 && self.burn_fraction < 0.9) {
            return bad("burn_fraction must lie in [0, 0.9)");
        }
        if self.n_chains < 1 {
            return bad("n_chains must be at least 1");
        }
        if !(self.stretch > 1.0 && self.stretch.is_finite()) {
            return bad("stretch must be > 1");
        }
        if self.grid_points != 0 && self.grid_points < 4 {
            return bad("grid_points must be 0 (auto) or at least 4");
        }
        Ok(())
    }
}

/// Marginal summary of one quantity.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ParamSummary {
    pub name: String,
    pub mean: f64,
    pub std: f64,
    pub median: f64,
    /// Equal-tailed 68% and 95% credible intervals.
    pub ci68: [f64; 2],
    pub ci95: [f64; 2],
}

/// MCMC convergence diagnostics (per free parameter, in `free_parameters` order).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct McmcDiagnostics {
    pub n_chains: usize,
    pub n_walkers: usize,
    pub n_steps: usize,
    pub n_burn: usize,
    pub acceptance: f64,
    /// Integrated autocorrelation time in steps (largest over chains).
    pub tau: Vec<f64>,
    /// Post-burn chain length over the largest tau (want > 50).
    pub length_over_tau: f64,
    pub rhat: Vec<f64>,
    /// Largest distance of one chain's mean from the pooled mean, in posterior sigmas.
    pub max_mean_shift_sigma: Vec<f64>,
    pub converged: bool,
}

/// What the Omega_k posterior says about the geometry.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CurvatureSummary {
    /// Posterior probability of a closed (Omega_k < 0) and an open (Omega_k > 0) universe.
    pub p_closed: f64,
    pub p_open: f64,
    pub flat_inside_95: bool,
    /// "consistent with flat", "closed" or "open".
    pub preference: String,
    /// 95% upper limit on |Omega_k|.
    pub abs_omega_k_95: f64,
    /// Lower bound on the curvature radius (c/H0)/sqrt(|Omega_k|_95) in Gpc, when consistent
    /// with flat (c/H0 from the posterior-mean h).
    pub r_k_lower_gpc: Option<f64>,
    /// The same bound over the particle-horizon radius of the posterior-mean model.
    pub r_k_lower_over_horizon: Option<f64>,
    /// Curvature radius median and 95% interval in Gpc, when flat lies outside the 95% interval.
    pub r_k_gpc: Option<[f64; 3]>,
    pub particle_horizon_gpc: f64,
    /// sigma(Omega_k) / 0.0025 (CMB + BAO flatness level, common practice, no source).
    pub width_over_cmb_bao: f64,
    /// Correlation coefficients of Omega_k with Omega_m and with h.
    pub corr_omega_k_omega_m: f64,
    pub corr_omega_k_h: f64,
}

/// Everything the inference reports (written as JSON).
#[derive(Debug, Clone, Serialize)]
pub struct InferenceResult {
    pub version: String,
    pub parametrisation: Parametrisation,
    pub free_parameters: Vec<String>,
    pub data: Vec<BaoPoint>,
    pub priors: Priors,
    pub settings: SamplerSettings,
    /// Summaries of Omega_k, Omega_m, h, r_d from the MCMC (or the grid when only it ran).
    pub parameters: Vec<ParamSummary>,
    pub mcmc: Option<Vec<ParamSummary>>,
    pub mcmc_diagnostics: Option<McmcDiagnostics>,
    pub grid: Option<Vec<ParamSummary>>,
    pub grid_points: Option<usize>,
    pub curvature: CurvatureSummary,
    pub statement: String,
    /// Posterior samples of (Omega_k, Omega_m, h, r_d) for plots (thinned; not in the JSON).
    #[serde(skip)]
    pub samples: Vec<[f64; 4]>,
}

impl InferenceResult {
    pub fn omega_k(&self) -> &ParamSummary {
        &self.parameters[0]
    }
}

/// Weighted quantile by linear interpolation of the cumulative weight at sorted values.
fn quantile(sorted: &[(f64, f64)], cum: &[f64], q: f64) -> f64 {
    let total = *cum.last().unwrap();
    let t = q * total;
    let i = cum.partition_point(|&c| c < t);
    if i == 0 {
        return sorted[0].0;
    }
    if i >= sorted.len() {
        return sorted[sorted.len() - 1].0;
    }
    let (c0, c1) = (cum[i - 1], cum[i]);
    let f = if c1 > c0 { (t - c0) / (c1 - c0) } else { 0.0 };
    sorted[i - 1].0 + f * (sorted[i].0 - sorted[i - 1].0)
}

/// Summary of weighted values (weights need not be normalised).
pub fn summarize(name: &str, values: &[f64], weights: &[f64]) -> ParamSummary {
    let wsum: f64 = weights.iter().sum();
    let mean = values.iter().zip(weights).map(|(v, w)| v * w).sum::<f64>() / wsum;
    let var = values
        .iter()
        .zip(weights)
        .map(|(v, w)| w * (v - mean).powi(2))
        .sum::<f64>()
        / wsum;
    let mut sorted: Vec<(f64, f64)> = values
        .iter()
        .copied()
        .zip(weights.iter().copied())
        .collect();
    sorted.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut cum = Vec::with_capacity(sorted.len());
    let mut c = 0.0;
    for (_, w) in &sorted {
        // Mid-point cumulative weight: each sample sits at the centre of its mass.
        cum.push(c + 0.5 * w);
        c += w;
    }
    let q = |p: f64| quantile(&sorted, &cum, p);
    ParamSummary {
        name: name.to_string(),
        mean,
        std: var.max(0.0).sqrt(),
        median: q(0.5),
        ci68: [q(0.158_655_3), q(0.841_344_7)],
        ci95: [q(0.025), q(0.975)],
    }
}

fn weighted_corr(a: &[f64], b: &[f64], w: &[f64]) -> f64 {
    let ws: f64 = w.iter().sum();
    let ma = a.iter().zip(w).map(|(x, w)| x * w).sum::<f64>() / ws;
    let mb = b.iter().zip(w).map(|(x, w)| x * w).sum::<f64>() / ws;
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for ((x, y), w) in a.iter().zip(b).zip(w) {
        sab += w * (x - ma) * (y - mb);
        saa += w * (x - ma).powi(2);
        sbb += w * (y - mb).powi(2);
    }
    if saa > 0.0 && sbb > 0.0 {
        sab / (saa * sbb).sqrt()
    } else {
        0.0
    }
}

/// Prior draw inside the start box.
fn draw_start(model: &Model, rng: &mut ChaCha8Rng) -> Vec<f64> {
    model
        .free
        .iter()
        .map(|&i| {
            let p = model.priors[i];
            let (lo, hi) = p.box_range(4.0);
            match p {
                Prior::Gauss { mean, sigma, .. } => {
                    let z: f64 = rng.sample(StandardNormal);
                    (mean + sigma * z).clamp(lo, hi)
                }
                _ => lo + (hi - lo) * rng.gen::<f64>(),
            }
        })
        .collect()
}

/// Output of the ensemble runs: pooled post-burn samples per chain and diagnostics.
struct McmcRun {
    per_chain: Vec<Vec<Vec<f64>>>,
    diag: McmcDiagnostics,
}

fn run_mcmc(model: &Model, s: &SamplerSettings) -> Result<McmcRun> {
    let ndim = model.ndim();
    let nw = if s.n_walkers == 0 {
        (4 * ndim).max(32)
    } else {
        s.n_walkers
    };
    let nw = nw + nw % 2;
    let lp = |x: &[f64]| model.ln_post(x);
    let mut chains = Vec::with_capacity(s.n_chains);
    let mut rngs = Vec::with_capacity(s.n_chains);
    for c in 0..s.n_chains {
        let mut rng = ChaCha8Rng::seed_from_u64(s.seed);
        rng.set_stream(c as u64 + 1);
        // Start from the best of many prior draws: spread out, but near the posterior.
        let cand: Vec<Vec<f64>> = (0..64 * nw).map(|_| draw_start(model, &mut rng)).collect();
        let clp: Vec<f64> = cand.par_iter().map(|x| lp(x)).collect();
        let mut order: Vec<usize> = (0..cand.len()).filter(|&i| clp[i].is_finite()).collect();
        if order.len() < nw {
            return Err(Error::input(
                "priors: almost no parameter values inside the prior ranges give a valid cosmology",
            ));
        }
        order.sort_by(|&a, &b| clp[b].total_cmp(&clp[a]).then(a.cmp(&b)));
        let init: Vec<Vec<f64>> = order[..nw].iter().map(|&i| cand[i].clone()).collect();
        chains.push(mcmc::stretch_sample(
            &lp, &init, s.n_steps, s.stretch, &mut rng,
        ));
        rngs.push(rng);
    }
    loop {
        let n_steps = chains[0].n_steps;
        let burn = (s.burn_fraction * n_steps as f64) as usize;
        let tau: Vec<f64> = (0..ndim)
            .map(|d| {
                chains
                    .iter()
                    .map(|c| mcmc::ensemble_tau(c, d, burn))
                    .fold(0.0, f64::max)
            })
            .collect();
        let tmax = tau.iter().copied().fold(0.0, f64::max);
        let ratio = (n_steps - burn) as f64 / tmax;
        if ratio > 50.0 || n_steps * 2 > s.max_steps {
            let per_chain: Vec<Vec<Vec<f64>>> = chains
                .iter()
                .map(|c| {
                    (burn..c.n_steps)
                        .flat_map(|st| (0..c.n_walkers).map(move |w| (st, w)))
                        .map(|(st, w)| c.at(st, w).to_vec())
                        .collect()
                })
                .collect();
            let mut rhat = Vec::new();
            let mut shift = Vec::new();
            for d in 0..ndim {
                let cols: Vec<Vec<f64>> = per_chain
                    .iter()
                    .map(|ch| ch.iter().map(|x| x[d]).collect())
                    .collect();
                rhat.push(mcmc::gelman_rubin(&cols));
                let all: Vec<f64> = cols.iter().flatten().copied().collect();
                let n = all.len() as f64;
                let m = all.iter().sum::<f64>() / n;
                let sd = (all.iter().map(|x| (x - m).powi(2)).sum::<f64>() / n).sqrt();
                let worst = cols
                    .iter()
                    .map(|c| ((c.iter().sum::<f64>() / c.len() as f64) - m).abs())
                    .fold(0.0, f64::max);
                shift.push(if sd > 0.0 { worst / sd } else { 0.0 });
            }
            let acc = chains.iter().map(|c| c.accepted).sum::<usize>() as f64
                / (chains.len() * n_steps * nw) as f64;
            let agree = if s.n_chains > 1 {
                rhat.iter().all(|&r| r < 1.01) || shift.iter().all(|&x| x < 0.1)
            } else {
                true
            };
            let diag = McmcDiagnostics {
                n_chains: s.n_chains,
                n_walkers: nw,
                n_steps,
                n_burn: burn,
                acceptance: acc,
                tau,
                length_over_tau: ratio,
                rhat,
                max_mean_shift_sigma: shift,
                converged: ratio > 50.0 && agree,
            };
            return Ok(McmcRun { per_chain, diag });
        }
        // Extend every chain by its current length from its last positions.
        for (c, rng) in chains.iter_mut().zip(rngs.iter_mut()) {
            let last: Vec<Vec<f64>> = (0..nw).map(|w| c.at(c.n_steps - 1, w).to_vec()).collect();
            let more = mcmc::stretch_sample(&lp, &last, n_steps, s.stretch, rng);
            c.positions.extend_from_slice(&more.positions);
            c.n_steps += more.n_steps;
            c.accepted += more.accepted;
        }
    }
}

fn summaries(reports: &[[f64; 4]], weights: &[f64]) -> Vec<ParamSummary> {
    (0..4)
        .map(|k| {
            let v: Vec<f64> = reports.iter().map(|r| r[k]).collect();
            summarize(REPORT_NAMES[k], &v, weights)
        })
        .collect()
}

/// Grid-only plot samples: deterministic systematic resampling of the weighted points.
fn resample(reports: &[[f64; 4]], weights: &[f64], n: usize) -> Vec<[f64; 4]> {
    let total: f64 = weights.iter().sum();
    let mut out = Vec::with_capacity(n);
    let mut c = 0.0;
    let mut k = 0;
    for (r, w) in reports.iter().zip(weights) {
        c += w / total * n as f64;
        while (k as f64 + 0.5) < c && k < n {
            out.push(*r);
            k += 1;
        }
    }
    out
}

/// Infer Omega_k (with Omega_m, h, r_d) from BAO D_V/r_d points and priors.
pub fn run_inference(
    data: &[BaoPoint],
    priors: &Priors,
    settings: &SamplerSettings,
) -> Result<InferenceResult> {
    settings.validate()?;
    let model = Model::new(data, priors)?;
    let ndim = model.ndim();

    let mut mcmc_sum = None;
    let mut diag = None;
    let mut mcmc_reports: Vec<[f64; 4]> = Vec::new();
    if settings.run_mcmc {
        let run = run_mcmc(&model, settings)?;
        mcmc_reports = run
            .per_chain
            .iter()
            .flatten()
            .map(|x| model.report(x))
            .collect();
        let w = vec![1.0; mcmc_reports.len()];
        mcmc_sum = Some(summaries(&mcmc_reports, &w));
        diag = Some(run.diag);
    }

    let mut grid_sum = None;
    let mut grid_n = None;
    let mut grid_data: Option<(Vec<[f64; 4]>, Vec<f64>)> = None;
    if settings.run_grid {
        let n = if settings.grid_points == 0 {
            [200, 60, 32, 24][ndim - 1]
        } else {
            settings.grid_points
        };
        let total = (n as f64).powi(ndim as i32);
        if total > 2.0e7 {
            return Err(Error::resource(format!(
                "grid of {n}^{ndim} = {total:.0} points is too large; lower grid_points"
            )));
        }
        let bounds: Vec<(f64, f64)> = model
            .free
            .iter()
            .map(|&i| model.priors[i].box_range(8.0))
            .collect();
        let lp = |x: &[f64]| model.ln_post(x);
        let g = grid::grid_posterior(&lp, &bounds, n).ok_or_else(|| {
            Error::input("priors: no grid point inside the prior ranges gives a valid cosmology")
        })?;
        let reports: Vec<[f64; 4]> = g.points.iter().map(|x| model.report(x)).collect();
        grid_sum = Some(summaries(&reports, &g.weights));
        grid_n = Some(g.points.len());
        grid_data = Some((reports, g.weights));
    }

    // Primary: the MCMC when it ran, else the grid.
    let (reports, weights): (Vec<[f64; 4]>, Vec<f64>) = if settings.run_mcmc {
        let w = vec![1.0; mcmc_reports.len()];
        (mcmc_reports, w)
    } else {
        grid_data.clone().unwrap()
    };
    let parameters = mcmc_sum.clone().or_else(|| grid_sum.clone()).unwrap();
    let curvature = curvature_summary(&model, &parameters, &reports, &weights);
    let samples = if settings.run_mcmc {
        let step = (reports.len() / 4000).max(1);
        reports.iter().step_by(step).copied().collect()
    } else {
        resample(&reports, &weights, 4000)
    };
    let statement = statement(&model, &parameters, &curvature, diag.as_ref());
    Ok(InferenceResult {
        version: crate::VERSION.to_string(),
        parametrisation: model.parametrisation,
        free_parameters: model.free_names().iter().map(|s| s.to_string()).collect(),
        data: data.to_vec(),
        priors: priors.clone(),
        settings: *settings,
        parameters,
        mcmc: mcmc_sum,
        mcmc_diagnostics: diag,
        grid: grid_sum,
        grid_points: grid_n,
        curvature,
        statement,
        samples,
    })
}

fn curvature_summary(
    model: &Model,
    pars: &[ParamSummary],
    reports: &[[f64; 4]],
    w: &[f64],
) -> CurvatureSummary {
    let ws: f64 = w.iter().sum();
    let p_closed = reports
        .iter()
        .zip(w)
        .filter(|(r, _)| r[0] < 0.0)
        .map(|(_, w)| w)
        .sum::<f64>()
        / ws;
    let p_open = reports
        .iter()
        .zip(w)
        .filter(|(r, _)| r[0] > 0.0)
        .map(|(_, w)| w)
        .sum::<f64>()
        / ws;
    let ok = &pars[0];
    let flat_inside_95 = ok.ci95[0] <= 0.0 && ok.ci95[1] >= 0.0;
    let preference = if flat_inside_95 {
        "consistent with flat"
    } else if ok.ci95[1] < 0.0 {
        "closed"
    } else {
        "open"
    };
    let abs: Vec<f64> = reports.iter().map(|r| r[0].abs()).collect();
    // One-sided 95% upper limit: the 95% quantile of |Omega_k|.
    let abs95 = {
        let mut v: Vec<(f64, f64)> = abs.iter().copied().zip(w.iter().copied()).collect();
        v.sort_by(|a, b| a.0.total_cmp(&b.0));
        let mut cum = Vec::with_capacity(v.len());
        let mut c = 0.0;
        for (_, wi) in &v {
            cum.push(c + 0.5 * wi);
            c += wi;
        }
        quantile(&v, &cum, 0.95)
    };
    let mean_phys = Phys {
        omega_k: pars[0].mean,
        omega_m: pars[1].mean,
        h: pars[2].mean,
        rd: pars[3].mean,
        omega_b_h2: f64::NAN,
    };
    let cosmo = model.cosmology(&mean_phys);
    let horizon = cosmo.particle_horizon();
    let dh = cosmo.hubble_distance0();
    let (r_k_lower_gpc, r_k_lower_over_horizon, r_k_gpc) = if flat_inside_95 {
        let r = dh / abs95.sqrt();
        (Some(r / 1000.0), Some(r / horizon), None)
    } else {
        let rk: Vec<f64> = reports
            .iter()
            .map(|r| crate::cosmology::C_KM_S / (100.0 * r[2]) / r[0].abs().sqrt() / 1000.0)
            .collect();
        let s = summarize("r_k", &rk, w);
        (None, None, Some([s.median, s.ci95[0], s.ci95[1]]))
    };
    let om: Vec<f64> = reports.iter().map(|r| r[1]).collect();
    let hh: Vec<f64> = reports.iter().map(|r| r[2]).collect();
    let okv: Vec<f64> = reports.iter().map(|r| r[0]).collect();
    CurvatureSummary {
        p_closed,
        p_open,
        flat_inside_95,
        preference: preference.to_string(),
        abs_omega_k_95: abs95,
        r_k_lower_gpc,
        r_k_lower_over_horizon,
        r_k_gpc,
        particle_horizon_gpc: horizon / 1000.0,
        width_over_cmb_bao: ok.std / CMB_BAO_FLATNESS,
        corr_omega_k_omega_m: weighted_corr(&okv, &om, w),
        corr_omega_k_h: weighted_corr(&okv, &hh, w),
    }
}

fn statement(
    model: &Model,
    pars: &[ParamSummary],
    c: &CurvatureSummary,
    diag: Option<&McmcDiagnostics>,
) -> String {
    let ok = &pars[0];
    let mut s = String::new();
    if model.priors[0].is_fixed() {
        s.push_str("Omega_k was held fixed (flat-only model); the data constrain Omega_m, h and r_d only. ");
        return s;
    }
    s.push_str(&format!(
        "Omega_k = {:.4} +- {:.4} (68%), 95% interval [{:.4}, {:.4}]; P(closed) = {:.2}, P(open) = {:.2}. ",
        ok.mean, ok.std, ok.ci95[0], ok.ci95[1], c.p_closed, c.p_open
    ));
    match c.preference.as_str() {
        "consistent with flat" => s.push_str(&format!(
            "The data are consistent with a flat universe: |Omega_k| < {:.4} (95%), so the curvature radius exceeds {:.1} Gpc, {:.2} times the particle-horizon radius. ",
            c.abs_omega_k_95,
            c.r_k_lower_gpc.unwrap_or(f64::NAN),
            c.r_k_lower_over_horizon.unwrap_or(f64::NAN)
        )),
        p => s.push_str(&format!(
            "Flat lies outside the 95% interval: the data prefer a {p} universe with curvature radius {:.1} Gpc (95%: {:.1} to {:.1}). ",
            c.r_k_gpc.map_or(f64::NAN, |r| r[0]),
            c.r_k_gpc.map_or(f64::NAN, |r| r[1]),
            c.r_k_gpc.map_or(f64::NAN, |r| r[2])
        )),
    }
    let degenerate = c.corr_omega_k_omega_m.abs() > 0.7 || c.corr_omega_k_h.abs() > 0.7;
    let mut prior_limited = false;
    if let Prior::Flat { min, max } = model.priors[0] {
        let tol = 0.02 * (max - min);
        if ok.ci95[0] - min < tol || max - ok.ci95[1] < tol {
            prior_limited = true;
            s.push_str("The 95% interval reaches the edge of the Omega_k prior range, so it reflects the prior as much as the data. ");
        }
    }
    // Fewer distinct redshifts than free parameters: the data fix only combinations of them,
    // whatever the sampled correlations look like (they can be masked by the prior box).
    let mut zs: Vec<f64> = model.data.iter().map(|d| d.z_eff).collect();
    zs.sort_by(f64::total_cmp);
    zs.dedup_by(|a, b| (*a - *b).abs() < 1e-6);
    // Parameters that only a flat prior bounds must be fixed by the data.
    let n_free = model
        .free
        .iter()
        .filter(|&&i| matches!(model.priors[i], Prior::Flat { .. }))
        .count();
    let underdetermined = zs.len() < n_free;
    if underdetermined {
        s.push_str(&format!(
            "{} measured redshift(s) cannot separate the {} free parameters: each D_V/r_d fixes one combination of Omega_m, Omega_k and h r_d, so Omega_k stays degenerate with Omega_m and h and its interval mostly reflects the prior ranges. ",
            zs.len(),
            n_free
        ));
    } else if degenerate || prior_limited {
        s.push_str(&format!(
            "D_V/r_d fixes only a combination of Omega_m, Omega_k and h r_d, so with an r_d prior alone Omega_k stays degenerate with Omega_m and h (correlations {:.2} and {:.2}). ",
            c.corr_omega_k_omega_m, c.corr_omega_k_h
        ));
    } else {
        s.push_str(
            "The degeneracy of Omega_k with Omega_m and h is broken by the data and priors used. ",
        );
    }
    let ratio = c.width_over_cmb_bao;
    if ratio > 2.0 {
        s.push_str(&format!(
            "This constraint is {ratio:.0} times wider than the ~0.0025 flatness level reached by CMB + BAO combinations: adding CMB information (a [cmb] prior) is what makes a flatness test."
        ));
    } else {
        s.push_str(&format!(
            "The width is {ratio:.1} times the ~0.0025 flatness level of CMB + BAO combinations, i.e. in the precision regime."
        ));
    }
    if let Some(d) = diag {
        if !d.converged {
            s.push_str(&format!(
                " Warning: the MCMC did not meet the convergence criteria (length/tau = {:.0}, R-hat max = {:.3}).",
                d.length_over_tau,
                d.rhat.iter().copied().fold(0.0, f64::max)
            ));
        }
    }
    s
}

/// Write `inference.json` and the posterior figure (`posterior_omega_k.png/.svg`) into `dir`.
pub fn write_outputs(dir: &Path, result: &InferenceResult) -> Result<()> {
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, "cannot create output folder", e))?;
    let json = serde_json::to_string_pretty(result)
        .map_err(|e| Error::other(format!("cannot serialise inference result: {e}")))?;
    let path = dir.join("inference.json");
    let tmp = dir.join(".inference.json.tmp");
    std::fs::write(&tmp, json).map_err(|e| Error::io(&tmp, "cannot write", e))?;
    std::fs::rename(&tmp, &path).map_err(|e| Error::io(&path, "cannot rename into place", e))?;
    let x: Vec<f64> = result.samples.iter().map(|r| r[0]).collect();
    let y: Vec<f64> = result.samples.iter().map(|r| r[1]).collect();
    crate::report::plots::posterior_plot(
        &dir.join("posterior_omega_k"),
        &x,
        &y,
        "Omega_k",
        "Omega_m",
        "Curvature posterior from BAO",
    )
}

#[cfg(test)]
mod tests;
