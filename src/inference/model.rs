//! LambdaCDM + Omega_k model for D_V/r_d data: parameters, priors and the log posterior.
use super::data::BaoPoint;
use super::priors::{BaseParams, CmbPrior, ParamPrior, Prior, Priors};
use crate::cosmology::{gauss_legendre, Cosmology};
use crate::{Error, Result};
use serde::Serialize;

/// How the sound horizon enters (see the module docs of `priors`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Parametrisation {
    /// Parameters (Omega_k, Omega_m, h, r_d).
    RdPrior,
    /// Parameters (Omega_k, h, omega_b h^2, omega_c h^2); Omega_m and r_d derived.
    Physical,
}

/// Physical quantities at one parameter point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Phys {
    pub omega_k: f64,
    pub omega_m: f64,
    pub h: f64,
    pub rd: f64,
    /// omega_b h^2 (NaN in the r_d-prior parametrisation, where it is not needed).
    pub omega_b_h2: f64,
}

/// Names of the reported quantities, in the order of `Model::report`.
pub const REPORT_NAMES: [&str; 4] = ["omega_k", "omega_m", "h", "rd"];

/// The model: parameter list, priors, data, and the fixed ingredients.
#[derive(Debug, Clone)]
pub struct Model {
    pub parametrisation: Parametrisation,
    /// Names of the four model parameters (free or fixed).
    pub names: [&'static str; 4],
    pub priors: [Prior; 4],
    /// Indices (into `names`) of the free parameters, in sampling order.
    pub free: Vec<usize>,
    /// Bound on the derived Omega_m in the physical parametrisation.
    omega_m_bound: Option<Prior>,
    pub(crate) data: Vec<BaoPoint>,
    omega_r_h2: f64,
    omega_nu_h2: f64,
    omega_gamma_h2: f64,
    /// Radiation density of one massive species while relativistic (N_eff/3 of the neutrinos).
    omega_nu_rel1_h2: f64,
    pub base: BaseParams,
    cmb: Option<(CmbPrior, [[f64; 3]; 3])>,
}

fn default_prior(p: &Option<ParamPrior>, fallback: ParamPrior) -> ParamPrior {
    p.unwrap_or(fallback)
}

/// Inverse of a symmetric positive-definite 3x3 matrix (cofactors), or None.
fn inv3(m: &[[f64; 3]; 3]) -> Option<[[f64; 3]; 3]> {
    let c = |i: usize, j: usize| {
        let (i1, i2) = ((i + 1) % 3, (i + 2) % 3);
        let (j1, j2) = ((j + 1) % 3, (j + 2) % 3);
        m[i1][j1] * m[i2][j2] - m[i1][j2] * m[i2][j1]
    };
    let det = m[0][0] * c(0, 0) + m[0][1] * c(0, 1) + m[0][2] * c(0, 2);
    if det.is_nan()
        || det <= 0.0
        || !det.is_finite()
        || m[0][0] <= 0.0
        || m[1][1] <= 0.0
        || m[2][2] <= 0.0
    {
        return None;
    }
    let mut inv = [[0.0; 3]; 3];
    for (i, row) in inv.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            *v = c(j, i) / det;
        }
    }
    Some(inv)
}

impl Model {
    /// Build and check the model; every problem is an input error naming the parameter.
    pub fn new(data: &[BaoPoint], priors: &Priors) -> Result<Self> {
        if data.is_empty() {
            return Err(Error::input("no BAO measurements: the data list is empty"));
        }
        for (i, p) in data.iter().enumerate() {
            p.validate(&format!("BAO point {}", i + 1))?;
        }
        let b = priors.base;
        let base = Cosmology {
            t_cmb: b.t_cmb,
            n_eff: b.n_eff,
            m_nu_sum_ev: b.m_nu_sum_ev,
            ..Cosmology::planck18()
        };
        base.validate()
            .map_err(|e| Error::input(format!("prior [base]: {e}")))?;
        let ok = default_prior(&priors.omega_k, ParamPrior::flat(-0.5, 0.5)).resolve("omega_k")?;
        let h = default_prior(&priors.h, ParamPrior::flat(0.4, 1.0)).resolve("h")?;
        let om = default_prior(&priors.omega_m, ParamPrior::flat(0.05, 0.95)).resolve("omega_m")?;
        let physical = priors.omega_b_h2.is_some() || priors.omega_c_h2.is_some();
        let (parametrisation, names, pri, omega_m_bound) = match (priors.rd, physical) {
            (Some(_), true) => {
                return Err(Error::input(
                    "priors: give either [rd] or [omega_b_h2] and [omega_c_h2], not both",
                ))
            }
            (None, false) => {
                return Err(Error::input(
                    "priors: the sound horizon needs [rd] or [omega_b_h2] and [omega_c_h2]",
                ))
            }
            (Some(rd), false) => {
                let rd = rd.resolve("rd")?;
                (
                    Parametrisation::RdPrior,
                    ["omega_k", "omega_m", "h", "rd"],
                    [ok, om, h, rd],
                    None,
                )
            }
            (None, true) => {
                let ob = priors
                    .omega_b_h2
                    .ok_or_else(|| Error::input("priors: [omega_c_h2] needs [omega_b_h2] too"))?
                    .resolve("omega_b_h2")?;
                let oc = priors
                    .omega_c_h2
                    .ok_or_else(|| Error::input("priors: [omega_b_h2] needs [omega_c_h2] too"))?
                    .resolve("omega_c_h2")?;
                if matches!(om, Prior::Gauss { .. } | Prior::Fixed(_)) {
                    return Err(Error::input(
                        "prior [omega_m]: with [omega_b_h2]/[omega_c_h2] Omega_m is derived; only min/max are allowed",
                    ));
                }
                (
                    Parametrisation::Physical,
                    ["omega_k", "h", "omega_b_h2", "omega_c_h2"],
                    [ok, h, ob, oc],
                    Some(om),
                )
            }
        };
        let free: Vec<usize> = (0..4).filter(|&i| !pri[i].is_fixed()).collect();
        if free.is_empty() {
            return Err(Error::input(
                "priors: every parameter is fixed; nothing to infer",
            ));
        }
        let cmb = match priors.cmb {
            None => None,
            Some(c) => {
                if parametrisation != Parametrisation::Physical {
                    return Err(Error::input(
                        "prior [cmb]: needs [omega_b_h2] and [omega_c_h2] instead of [rd]",
                    ));
                }
                let inv = inv3(&c.cov).ok_or_else(|| {
                    Error::input("prior [cmb]: cov is not a positive-definite 3x3 matrix")
                })?;
                Some((c, inv))
            }
        };
        Ok(Model {
            parametrisation,
            names,
            priors: pri,
            free,
            omega_m_bound,
            data: data.to_vec(),
            omega_r_h2: base.omega_gamma_h2() + base.omega_nu_rad_h2(),
            omega_nu_h2: base.omega_nu_h2(),
            omega_gamma_h2: base.omega_gamma_h2(),
            omega_nu_rel1_h2: if base.m_nu_sum_ev > 0.0 {
                base.omega_gamma_h2() * 7.0 / 8.0 * (4.0f64 / 11.0).powf(4.0 / 3.0) * base.n_eff
                    / 3.0
            } else {
                0.0
            },
            base: b,
            cmb,
        })
    }

    pub fn data(&self) -> &[BaoPoint] {
        &self.data
    }
    pub fn ndim(&self) -> usize {
        self.free.len()
    }
    pub fn free_names(&self) -> Vec<&'static str> {
        self.free.iter().map(|&i| self.names[i]).collect()
    }

    /// Full parameter vector from the free ones.
    pub fn full(&self, theta: &[f64]) -> [f64; 4] {
        let mut f = [0.0; 4];
        for (i, p) in self.priors.iter().enumerate() {
            if let Prior::Fixed(v) = p {
                f[i] = *v;
            }
        }
        for (k, &i) in self.free.iter().enumerate() {
            f[i] = theta[k];
        }
        f
    }

    pub fn phys(&self, theta: &[f64]) -> Phys {
        let f = self.full(theta);
        match self.parametrisation {
            Parametrisation::RdPrior => Phys {
                omega_k: f[0],
                omega_m: f[1],
                h: f[2],
                rd: f[3],
                omega_b_h2: f64::NAN,
            },
            Parametrisation::Physical => {
                let (h, ob, oc) = (f[1], f[2], f[3]);
                let c = Cosmology {
                    h,
                    omega_b_h2: ob,
                    omega_c_h2: oc,
                    omega_k: f[0],
                    t_cmb: self.base.t_cmb,
                    n_eff: self.base.n_eff,
                    m_nu_sum_ev: self.base.m_nu_sum_ev,
                    ..Cosmology::planck18()
                };
                Phys {
                    omega_k: f[0],
                    omega_m: (ob + oc + self.omega_nu_h2) / (h * h),
                    h,
                    rd: if ob > 0.0 && oc >= 0.0 {
                        c.r_d()
                    } else {
                        f64::NAN
                    },
                    omega_b_h2: ob,
                }
            }
        }
    }

    /// Reported quantities (Omega_k, Omega_m, h, r_d) at a parameter point.
    pub fn report(&self, theta: &[f64]) -> [f64; 4] {
        let p = self.phys(theta);
        [p.omega_k, p.omega_m, p.h, p.rd]
    }

    /// A full `Cosmology` at a parameter point (for horizons and reference distances).
    /// In the r_d parametrisation the baryon density is the base value and CDM fills Omega_m.
    pub fn cosmology(&self, p: &Phys) -> Cosmology {
        let base = Cosmology::planck18();
        let ob = if p.omega_b_h2.is_finite() {
            p.omega_b_h2
        } else {
            base.omega_b_h2
        };
        Cosmology {
            h: p.h,
            omega_b_h2: ob,
            omega_c_h2: p.omega_m * p.h * p.h - ob - self.omega_nu_h2,
            omega_k: p.omega_k,
            t_cmb: self.base.t_cmb,
            n_eff: self.base.n_eff,
            m_nu_sum_ev: self.base.m_nu_sum_ev,
            ..base
        }
    }

    /// E(z) for LambdaCDM + Omega_k; NaN where E^2 <= 0 (no big bang / a bounce).
    #[inline]
    fn e_of_z(&self, p: &Phys, z: f64) -> f64 {
        let x = 1.0 + z;
        let or = self.omega_r_h2 / (p.h * p.h);
        let ol = 1.0 - p.omega_m - p.omega_k - or;
        let e2 = ((or * x + p.omega_m) * x + p.omega_k) * x * x + ol;
        if e2 > 0.0 {
            e2.sqrt()
        } else {
            f64::NAN
        }
    }

    /// E(z) with the massive neutrino blended between its relativistic and non-relativistic
    /// limits, rho_nu = sqrt(rho_NR^2 + rho_R^2) (a smooth approximation, common practice, no
    /// source). At z < 10 it equals `e_of_z` to better than 1e-5; at z ~ 1100 it keeps the
    /// neutrino in the radiation, where treating it as matter would shift r_s by ~3%.
    fn e_of_z_early(&self, p: &Phys, z: f64) -> f64 {
        let x = 1.0 + z;
        let h2 = p.h * p.h;
        let or = self.omega_r_h2 / h2;
        let onu = self.omega_nu_h2 / h2;
        let onr = self.omega_nu_rel1_h2 / h2;
        let ol = 1.0 - p.omega_m - p.omega_k - or;
        let nu = ((onu * x * x * x).powi(2) + (onr * x * x * x * x).powi(2)).sqrt();
        let e2 = or * x.powi(4) + (p.omega_m - onu) * x.powi(3) + nu + p.omega_k * x * x + ol;
        if e2 > 0.0 {
            e2.sqrt()
        } else {
            f64::NAN
        }
    }

    /// Transverse comoving distance over c/H0 for a radial one; NaN beyond the antipode of a
    /// closed universe.
    fn dm_over_dh(p: &Phys, chi: f64) -> f64 {
        let s = p.omega_k.abs().sqrt();
        if p.omega_k > 0.0 {
            (s * chi).sinh() / s
        } else if p.omega_k < 0.0 {
            if s * chi >= std::f64::consts::PI {
                f64::NAN
            } else {
                (s * chi).sin() / s
            }
        } else {
            chi
        }
    }

    /// D_V(z)/r_d, integrating 1/E with 10-point Gauss-Legendre panels of width <= 0.5.
    pub fn dv_over_rd(&self, p: &Phys, z: f64) -> f64 {
        let panels = (z / 0.5).ceil().max(1.0) as usize;
        let chi = gauss_legendre(|x| 1.0 / self.e_of_z(p, x), 0.0, z, panels);
        let dm = Self::dm_over_dh(p, chi);
        let dh0 = crate::cosmology::C_KM_S / (100.0 * p.h);
        dh0 * (z * dm * dm / self.e_of_z(p, z)).cbrt() / p.rd
    }

    /// Compressed CMB observables (R, l_A) at a parameter point.
    /// z* from the Hu & Sugiyama 1996 (ApJ 471, 542) eq. E1 fitting formula; r_s(z*) by direct
    /// integration of c_s/H with c_s = c/sqrt(3(1 + 3 rho_b/(4 rho_gamma))). The massive
    /// neutrino uses the blended density of `e_of_z_early`. For the Planck 2018 best fit this
    /// gives R within 0.1 sigma and l_A about 0.1-0.2% (several sigma of the compressed prior)
    /// above the published compressed values, so the CMB prior is approximate at that level.
    pub fn cmb_observables(&self, p: &Phys) -> (f64, f64) {
        let ob = p.omega_b_h2;
        let om = p.omega_m * p.h * p.h;
        let g1 = 0.0783 * ob.powf(-0.238) / (1.0 + 39.5 * ob.powf(0.763));
        let g2 = 0.560 / (1.0 + 21.1 * ob.powf(1.81));
        let zs = 1048.0 * (1.0 + 0.00124 * ob.powf(-0.738)) * (1.0 + g1 * om.powf(g2));
        // Radial distance in units of c/H0, integrated in ln(1+z).
        let chi = gauss_legendre(
            |u| {
                let x = u.exp();
                x / self.e_of_z_early(p, x - 1.0)
            },
            0.0,
            (1.0 + zs).ln(),
            40,
        );
        let dm = Self::dm_over_dh(p, chi);
        let rb = 0.75 * ob / self.omega_gamma_h2;
        let ln_as = -(1.0 + zs).ln();
        let rs = gauss_legendre(
            |la| {
                let a = la.exp();
                let cs = 1.0 / (3.0 * (1.0 + rb * a)).sqrt();
                cs / (a * self.e_of_z_early(p, 1.0 / a - 1.0))
            },
            ln_as - 25.0,
            ln_as,
            50,
        );
        (p.omega_m.sqrt() * dm, std::f64::consts::PI * dm / rs)
    }

    /// chi^2 of the BAO data at a parameter point.
    pub fn chi2_bao(&self, p: &Phys) -> f64 {
        self.data
            .iter()
            .map(|d| {
                let r = (self.dv_over_rd(p, d.z_eff) - d.dv_over_rd) / d.dv_over_rd_err;
                r * r
            })
            .sum()
    }

    /// Log posterior (up to a constant) of the free parameters; -inf outside the support or
    /// where the model has no big bang.
    pub fn ln_post(&self, theta: &[f64]) -> f64 {
        let mut lp = 0.0;
        for (k, &i) in self.free.iter().enumerate() {
            lp += self.priors[i].ln_pdf(theta[k]);
        }
        if !lp.is_finite() {
            return f64::NEG_INFINITY;
        }
        let p = self.phys(theta);
        if let Some(b) = self.omega_m_bound {
            lp += b.ln_pdf(p.omega_m);
        }
        if !(p.h > 0.0 && p.rd > 0.0 && p.omega_m >= 0.0 && lp.is_finite()) {
            return f64::NEG_INFINITY;
        }
        let mut chi2 = self.chi2_bao(&p);
        if let Some((c, inv)) = &self.cmb {
            let (r, la) = self.cmb_observables(&p);
            let d = [r - c.r, la - c.l_a, p.omega_b_h2 - c.omega_b_h2];
            for i in 0..3 {
                for j in 0..3 {
                    chi2 += d[i] * inv[i][j] * d[j];
                }
            }
        }
        let v = lp - 0.5 * chi2;
        if v.is_finite() {
            v
        } else {
            f64::NEG_INFINITY
        }
    }
}
