//! Cosmological parameters, the Planck 2018 preset and TOML loading.
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Parameters of a Lambda/w0-wa CDM cosmology with curvature.
///
/// Massive neutrinos are treated as matter today: omega_nu h^2 = m_nu_sum / 93.14 eV is added to
/// the matter density, and when the sum is positive one of the N_eff species is taken as massive
/// (a single massive eigenstate, as in the Planck 2018 baseline) and removed from the radiation.
/// Dark energy fills the rest of the budget: Omega_DE = 1 - Omega_m - Omega_k - Omega_r.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Cosmology {
    /// H0 / (100 km/s/Mpc).
    pub h: f64,
    pub omega_b_h2: f64,
    pub omega_c_h2: f64,
    pub omega_k: f64,
    pub w0: f64,
    pub wa: f64,
    /// CMB temperature today in K.
    #[serde(rename = "T_cmb")]
    pub t_cmb: f64,
    /// Effective number of neutrino species.
    #[serde(rename = "N_eff")]
    pub n_eff: f64,
    /// Sum of neutrino masses in eV.
    pub m_nu_sum_ev: f64,
    pub n_s: f64,
    pub sigma8: f64,
}

impl Default for Cosmology {
    fn default() -> Self {
        Self::planck18()
    }
}

/// Where a cosmology came from, for provenance in output headers.
#[derive(Debug, Clone, Serialize)]
pub struct CosmologySource {
    pub name: String,
    pub params: Cosmology,
}

/// eV per unit omega_nu h^2 for massive neutrinos (common practice, no source: 93.14 eV).
pub const NU_MASS_EV_PER_OMEGA_H2: f64 = 93.14;

impl Cosmology {
    /// Planck 2018 best fit, TT,TE,EE+lowE+lensing (Planck 2018 results VI, A&A 641, A6, Table 2),
    /// with one massive neutrino of 0.06 eV as in the Planck baseline.
    pub fn planck18() -> Self {
        Cosmology {
            h: 0.6736,
            omega_b_h2: 0.02237,
            omega_c_h2: 0.1200,
            omega_k: 0.0,
            w0: -1.0,
            wa: 0.0,
            t_cmb: 2.7255,
            n_eff: 3.046,
            m_nu_sum_ev: 0.06,
            n_s: 0.9649,
            sigma8: 0.8111,
        }
    }

    /// Resolve `--cosmology NAME|FILE.toml`.
    pub fn from_name_or_file(spec: &str) -> Result<CosmologySource> {
        let params = match spec.to_ascii_lowercase().as_str() {
            "planck18" | "planck2018" => Self::planck18(),
            _ => {
                let p = Path::new(spec);
                if !p.exists() {
                    return Err(Error::input(format!(
                        "cosmology '{spec}': not a preset (known: planck18) and no such file"
                    )));
                }
                Self::from_toml_file(p)?
            }
        };
        Ok(CosmologySource {
            name: spec.to_string(),
            params,
        })
    }

    pub fn from_toml_file(path: &Path) -> Result<Self> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| Error::io(path, "cannot read cosmology file", e))?;
        Self::from_toml_str(&text).map_err(|e| Error::input(format!("{}: {e}", path.display())))
    }

    pub fn from_toml_str(text: &str) -> Result<Self> {
        let c: Cosmology = toml::from_str(text)
            .map_err(|e| Error::input(format!("invalid cosmology TOML: {e}")))?;
        c.validate()?;
        Ok(c)
    }

    /// Reject parameters that cannot describe an expanding universe out to z = 10.
    pub fn validate(&self) -> Result<()> {
        let checks: [(&str, f64, bool); 6] = [
            ("h", self.h, self.h > 0.0 && self.h < 10.0),
            ("omega_b_h2", self.omega_b_h2, self.omega_b_h2 > 0.0),
            ("omega_c_h2", self.omega_c_h2, self.omega_c_h2 >= 0.0),
            ("T_cmb", self.t_cmb, self.t_cmb > 0.0),
            ("N_eff", self.n_eff, self.n_eff >= 0.0),
            ("m_nu_sum_ev", self.m_nu_sum_ev, self.m_nu_sum_ev >= 0.0),
        ];
        for (name, v, ok) in checks {
            if !v.is_finite() || !ok {
                return Err(Error::input(format!(
                    "cosmology parameter {name} = {v} is out of range"
                )));
            }
        }
        for (name, v) in [
            ("omega_k", self.omega_k),
            ("w0", self.w0),
            ("wa", self.wa),
            ("n_s", self.n_s),
            ("sigma8", self.sigma8),
        ] {
            if !v.is_finite() {
                return Err(Error::input(format!(
                    "cosmology parameter {name} = {v} is not finite"
                )));
            }
        }
        if self.sigma8 <= 0.0 {
            return Err(Error::input(format!(
                "cosmology parameter sigma8 = {} must be positive",
                self.sigma8
            )));
        }
        // E(z)^2 must stay positive over the range any distance table may use.
        let mut z = 0.0;
        while z <= 10.0 {
            let e2 = self.e2(z);
            if e2.is_nan() || e2 <= 0.0 || !e2.is_finite() {
                return Err(Error::input(format!(
                    "cosmology is unphysical: E(z)^2 = {e2:.3e} <= 0 at z = {z:.2} (omega_k = {}, Omega_m = {:.4})",
                    self.omega_k,
                    self.omega_m()
                )));
            }
            z += 0.01;
        }
        Ok(())
    }

    /// Photon density Omega_gamma h^2 from T_cmb: rho_gamma = 4 sigma_SB T^4 / c^3 over
    /// rho_crit = 3 H0^2 / (8 pi G), with CODATA 2018 constants.
    pub fn omega_gamma_h2(&self) -> f64 {
        const SIGMA_SB: f64 = 5.670374419e-8; // W m^-2 K^-4
        const C: f64 = 299_792_458.0; // m/s
        const G: f64 = 6.67430e-11; // m^3 kg^-1 s^-2
        const MPC_M: f64 = 3.085_677_581_491_367e22;
        let h100 = 100.0e3 / MPC_M; // 100 km/s/Mpc in s^-1
        let rho_crit_h2 = 3.0 * h100 * h100 / (8.0 * std::f64::consts::PI * G); // kg/m^3
        let rho_gamma = 4.0 * SIGMA_SB * self.t_cmb.powi(4) / C.powi(3);
        rho_gamma / rho_crit_h2
    }

    /// Massless-neutrino radiation Omega_nu,rad h^2 (7/8 (4/11)^(4/3) per species).
    pub fn omega_nu_rad_h2(&self) -> f64 {
        let per_species = 7.0 / 8.0 * (4.0f64 / 11.0).powf(4.0 / 3.0);
        let n_massless = if self.m_nu_sum_ev > 0.0 {
            self.n_eff * 2.0 / 3.0
        } else {
            self.n_eff
        };
        self.omega_gamma_h2() * per_species * n_massless
    }

    /// Massive-neutrino matter density omega_nu h^2.
    pub fn omega_nu_h2(&self) -> f64 {
        self.m_nu_sum_ev / NU_MASS_EV_PER_OMEGA_H2
    }
    /// Total matter density omega_m h^2 (baryons + CDM + massive neutrinos).
    pub fn omega_m_h2(&self) -> f64 {
        self.omega_b_h2 + self.omega_c_h2 + self.omega_nu_h2()
    }
    pub fn omega_m(&self) -> f64 {
        self.omega_m_h2() / (self.h * self.h)
    }
    pub fn omega_r(&self) -> f64 {
        (self.omega_gamma_h2() + self.omega_nu_rad_h2()) / (self.h * self.h)
    }
    pub fn omega_de(&self) -> f64 {
        1.0 - self.omega_m() - self.omega_k - self.omega_r()
    }

    /// Dark-energy density relative to today for the CPL law w(a) = w0 + wa (1 - a).
    pub fn de_evolution(&self, z: f64) -> f64 {
        if self.w0 == -1.0 && self.wa == 0.0 {
            return 1.0;
        }
        let a = 1.0 / (1.0 + z);
        a.powf(-3.0 * (1.0 + self.w0 + self.wa)) * (-3.0 * self.wa * (1.0 - a)).exp()
    }

    /// E(z)^2 = H(z)^2 / H0^2.
    pub fn e2(&self, z: f64) -> f64 {
        let zp = 1.0 + z;
        let zp2 = zp * zp;
        self.omega_r() * zp2 * zp2
            + self.omega_m() * zp2 * zp
            + self.omega_k * zp2
            + self.omega_de() * self.de_evolution(z)
    }

    pub fn e(&self, z: f64) -> f64 {
        self.e2(z).sqrt()
    }

    /// Hubble distance today c/H0 in Mpc.
    pub fn hubble_distance0(&self) -> f64 {
        super::C_KM_S / (100.0 * self.h)
    }

    /// Same cosmology with another curvature at fixed physical densities and h.
    pub fn with_omega_k(&self, omega_k: f64) -> Self {
        Cosmology { omega_k, ..*self }
    }

    /// Curvature radius R = (c/H0)/sqrt(|Omega_k|) in Mpc (infinite when flat).
    pub fn curvature_radius(&self) -> f64 {
        if self.omega_k == 0.0 {
            f64::INFINITY
        } else {
            self.hubble_distance0() / self.omega_k.abs().sqrt()
        }
    }
}
