//! `ringscale curvature`: what D_V/r_d measurements say about Omega_k.
use crate::inference::{
    read_bao_files, run_inference, write_outputs, InferenceResult, Priors, SamplerSettings,
};
use crate::Result;
use std::path::{Path, PathBuf};

#[derive(Debug, Clone)]
pub struct CurvatureOptions {
    /// `ringscale fit` result JSON files and/or tables of (z_eff, D_V/r_d, error).
    pub bao: Vec<PathBuf>,
    /// Priors TOML; default: r_d = 147.09 +- 0.26 Mpc (Planck 2018), flat Omega_k, Omega_m, h.
    pub priors: Option<PathBuf>,
    pub settings: SamplerSettings,
    pub out: PathBuf,
}

pub fn run(opt: &CurvatureOptions) -> Result<InferenceResult> {
    let paths: Vec<&Path> = opt.bao.iter().map(|p| p.as_path()).collect();
    let data = read_bao_files(&paths)?;
    let priors = match &opt.priors {
        Some(p) => Priors::from_toml_file(p)?,
        None => Priors::with_rd_planck18(),
    };
    super::count::ensure_writable(&opt.out)?;
    let result = run_inference(&data, &priors, &opt.settings)?;
    write_outputs(&opt.out, &result)?;
    Ok(result)
}

/// Short human summary of an inference (the statement already carries the numbers).
pub fn render(r: &InferenceResult) -> String {
    let mut s = r.statement.clone();
    s.push('\n');
    s
}
