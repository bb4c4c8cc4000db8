//! Priors for the curvature inference, read from TOML.
//!
//! Each parameter table holds either `fixed = v`, a Gaussian `mean`/`sigma` (optionally
//! truncated by `min`/`max`), or a flat range `min`/`max`. The sound horizon enters in one of two
//! ways, chosen by which tables are present:
//! - `[rd]`: r_d is a free parameter (parameters Omega_k, Omega_m, h, r_d);
//! - `[omega_b_h2]` and `[omega_c_h2]`: physical densities are sampled (parameters Omega_k, h,
//!   omega_b h^2, omega_c h^2); Omega_m = (omega_b h^2 + omega_c h^2 + omega_nu h^2)/h^2 and
//!   r_d follows from Aubourg et al. 2015 eq. 16. `[omega_m]` then only bounds the derived value.
use crate::cosmology::Cosmology;
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Prior on one parameter as written in the TOML file.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ParamPrior {
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fixed: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mean: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sigma: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub min: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub max: Option<f64>,
}

/// A resolved prior density.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Prior {
    Fixed(f64),
    /// Uniform on [min, max].
    Flat {
        min: f64,
        max: f64,
    },
    /// Gaussian, truncated to [min, max] (infinite when not given).
    Gauss {
        mean: f64,
        sigma: f64,
        min: f64,
        max: f64,
    },
}

impl ParamPrior {
    pub fn flat(min: f64, max: f64) -> Self {
        ParamPrior {
            min: Some(min),
            max: Some(max),
            ..Default::default()
        }
    }
    pub fn gauss(mean: f64, sigma: f64) -> Self {
        ParamPrior {
            mean: Some(mean),
            sigma: Some(sigma),
            ..Default::default()
        }
    }
    pub fn fixed(v: f64) -> Self {
        ParamPrior {
            fixed: Some(v),
            ..Default::default()
        }
    }

    /// Check the combination of keys and the values; `name` is the parameter for messages.
    pub fn resolve(&self, name: &str) -> Result<Prior> {
        let bad = |msg: String| Error::input(format!("prior [{name}]: {msg}"));
        for (k, v) in [
            ("fixed", self.fixed),
            ("mean", self.mean),
            ("sigma", self.sigma),
            ("min", self.min),
            ("max", self.max),
        ] {
            if let Some(x) = v {
                if !x.is_finite() {
                    return Err(bad(format!("{k} = {x} is not finite")));
                }
            }
        }
        if let Some(v) = self.fixed {
            if self.mean.is_some()
                || self.sigma.is_some()
                || self.min.is_some()
                || self.max.is_some()
            {
                return Err(bad("'fixed' cannot be combined with other keys".into()));
            }
            return Ok(Prior::Fixed(v));
        }
        let min = self.min.unwrap_or(f64::NEG_INFINITY);
        let max = self.max.unwrap_or(f64::INFINITY);
        if min >= max {
            return Err(bad(format!("min = {min} must be below max = {max}")));
        }
        match (self.mean, self.sigma) {
            (Some(mean), Some(sigma)) => {
                if sigma <= 0.0 {
                    return Err(bad(format!("sigma = {sigma} must be positive")));
                }
                if mean < min || mean > max {
                    return Err(bad(format!("mean = {mean} lies outside [min, max]")));
                }
                Ok(Prior::Gauss {
                    mean,
                    sigma,
                    min,
                    max,
                })
            }
            (None, None) => {
                if self.min.is_none() || self.max.is_none() {
                    return Err(bad(
                        "give 'fixed', or 'mean' and 'sigma', or both 'min' and 'max'".into(),
                    ));
                }
                Ok(Prior::Flat { min, max })
            }
            _ => Err(bad("'mean' and 'sigma' must be given together".into())),
        }
    }
}

impl Prior {
    /// Log density up to a constant; -inf outside the support.
    pub fn ln_pdf(&self, x: f64) -> f64 {
        match *self {
            Prior::Fixed(_) => 0.0,
            Prior::Flat { min, max } => {
                if x >= min && x <= max {
                    0.0
                } else {
                    f64::NEG_INFINITY
                }
            }
            Prior::Gauss {
                mean,
                sigma,
                min,
                max,
            } => {
                if x >= min && x <= max {
                    let t = (x - mean) / sigma;
                    -0.5 * t * t
                } else {
                    f64::NEG_INFINITY
                }
            }
        }
    }
    /// Range used to start samplers and grids: the flat range, or mean +- `nsig` sigma clipped
    /// to the truncation.
    pub fn box_range(&self, nsig: f64) -> (f64, f64) {
        match *self {
            Prior::Fixed(v) => (v, v),
            Prior::Flat { min, max } => (min, max),
            Prior::Gauss {
                mean,
                sigma,
                min,
                max,
            } => (
                (mean - nsig * sigma).max(min),
                (mean + nsig * sigma).min(max),
            ),
        }
    }
    pub fn is_fixed(&self) -> bool {
        matches!(self, Prior::Fixed(_))
    }
}

/// Fixed ingredients taken from a base cosmology (radiation and neutrino masses).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct BaseParams {
    #[serde(rename = "T_cmb")]
    pub t_cmb: f64,
    #[serde(rename = "N_eff")]
    pub n_eff: f64,
    pub m_nu_sum_ev: f64,
}

impl Default for BaseParams {
    fn default() -> Self {
        let c = Cosmology::planck18();
        BaseParams {
            t_cmb: c.t_cmb,
            n_eff: c.n_eff,
            m_nu_sum_ev: c.m_nu_sum_ev,
        }
    }
}

/// Compressed CMB likelihood: shift parameter R, acoustic scale l_A and omega_b h^2 with their
/// covariance (order R, l_A, omega_b h^2).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CmbPrior {
    #[serde(rename = "R")]
    pub r: f64,
    pub l_a: f64,
    pub omega_b_h2: f64,
    pub cov: [[f64; 3]; 3],
}

impl CmbPrior {
    /// Planck 2018 compressed distance priors for LambdaCDM, value from memory (Chen, Huang &
    /// Wang 2019, JCAP 02, 028, Table I): R = 1.7502 +- 0.0046, l_A = 301.471 +- 0.09,
    /// omega_b h^2 = 0.02236 +- 0.00015, correlations 0.46 (R,l_A), -0.66 (R,omega_b),
    /// -0.33 (l_A,omega_b). Check against the paper before relying on them.
    pub fn planck18_compressed() -> Self {
        let s = [0.0046, 0.09, 0.00015];
        let rho = [[1.0, 0.46, -0.66], [0.46, 1.0, -0.33], [-0.66, -0.33, 1.0]];
        let mut cov = [[0.0; 3]; 3];
        for i in 0..3 {
            for j in 0..3 {
                cov[i][j] = rho[i][j] * s[i] * s[j];
            }
        }
        CmbPrior {
            r: 1.7502,
            l_a: 301.471,
            omega_b_h2: 0.02236,
            cov,
        }
    }
}

/// All priors of the curvature inference (the TOML file's top-level tables).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Priors {
    /// Default: flat in [-0.5, 0.5]. `fixed = 0` gives the flat-only model.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub omega_k: Option<ParamPrior>,
    /// Default: flat in [0.05, 0.95].
    #[serde(skip_serializing_if = "Option::is_none")]
    pub omega_m: Option<ParamPrior>,
    /// Default: flat in [0.4, 1.0].
    #[serde(skip_serializing_if = "Option::is_none")]
    pub h: Option<ParamPrior>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub rd: Option<ParamPrior>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub omega_b_h2: Option<ParamPrior>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub omega_c_h2: Option<ParamPrior>,
    #[serde(default)]
    pub base: BaseParams,
    /// Compressed CMB distance prior; needs the physical-density parametrisation.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cmb: Option<CmbPrior>,
}

impl Priors {
    /// r_d with the Planck 2018 value 147.09 +- 0.26 Mpc (Planck 2018 results VI, A&A 641, A6,
    /// Table 2), flat priors on Omega_k, Omega_m and h at their defaults.
    pub fn with_rd_planck18() -> Self {
        Priors {
            rd: Some(ParamPrior::gauss(147.09, 0.26)),
            ..Default::default()
        }
    }
    pub fn from_toml_str(text: &str, source: &str) -> Result<Self> {
        let p: Priors = toml::from_str(text)
            .map_err(|e| Error::input(format!("{source}: invalid priors: {e}")))?;
        Ok(p)
    }
    pub fn from_toml_file(path: &Path) -> Result<Self> {
        let text =
            std::fs::read_to_string(path).map_err(|e| Error::io(path, "cannot read priors", e))?;
        Self::from_toml_str(&text, &path.display().to_string())
    }
}
