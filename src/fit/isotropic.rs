//! Isotropic BAO fit: xi_m(s) = B^2 xi_t(alpha s) + a0 + a1/s + a2/s^2.
//!
//! For every alpha on a grid the four linear parameters are solved exactly by generalised least
//! squares with the inverse covariance; B^2 >= 0 is enforced by refitting with B^2 = 0 when the
//! unconstrained solution is negative. The minimum of chi2(alpha) is refined by the parabola
//! through the three grid points around it; the 1-sigma interval is where chi2 = chi2_min + 1,
//! linearly interpolated between grid points. The detection significance is
//! sqrt(min chi2_nw - min chi2) with the same fit using the no-wiggle template.
//!
//! Covariance convention: `inv_cov` is the inverse of the covariance of ALL data bins (n x n,
//! in the order of `s`), with any Hartlap factor already applied by the caller. When the fit
//! range drops bins, the inverse covariance of the kept bins is the Schur complement
//! Psi_aa - Psi_ab Psi_bb^-1 Psi_ba, which equals (C_aa)^-1 exactly; taking the sub-block of
//! the inverse would be wrong.
use super::template::BaoTemplate;
use crate::cosmology::Cosmology;
use crate::{Error, Result};
use ndarray::Array2;
use serde::Serialize;

/// Options of the isotropic fit.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct IsotropicOptions {
    /// Fit range in s [Mpc/h], inclusive.
    pub s_min: f64,
    pub s_max: f64,
    /// alpha grid: alpha_min + i * alpha_step up to alpha_max.
    pub alpha_min: f64,
    pub alpha_max: f64,
    pub alpha_step: f64,
}

impl Default for IsotropicOptions {
    fn default() -> Self {
        IsotropicOptions {
            s_min: 50.0,
            s_max: 150.0,
            alpha_min: 0.8,
            alpha_max: 1.2,
            alpha_step: 0.001,
        }
    }
}

/// Result of [`fit_isotropic`].
#[derive(Debug, Clone, Serialize)]
pub struct IsotropicFit {
    /// Best-fit alpha (parabola-refined grid minimum).
    pub alpha: f64,
    /// Symmetrised 1-sigma error (alpha_hi - alpha_lo) / 2.
    pub sigma: f64,
    /// Asymmetric errors alpha - alpha_lo and alpha_hi - alpha.
    pub sigma_lo: f64,
    pub sigma_hi: f64,
    /// Ends of the Delta chi2 = 1 interval.
    pub alpha_lo: f64,
    pub alpha_hi: f64,
    /// The interval reached the grid edge on that side (the end is the grid end, a lower bound).
    pub lower_open: bool,
    pub upper_open: bool,
    /// The chi2 minimum is at the first or last grid point (no parabola refinement).
    pub alpha_at_grid_edge: bool,
    pub chi2_min: f64,
    /// n_bins - 5 (alpha plus four linear parameters).
    pub dof: i64,
    pub n_bins: usize,
    /// Linear parameters at the best alpha.
    pub b2: f64,
    pub a0: f64,
    pub a1: f64,
    pub a2: f64,
    /// B^2 was clamped to zero at the best alpha.
    pub b2_clamped: bool,
    /// Same fit with the no-wiggle template.
    pub alpha_nowiggle: f64,
    pub chi2_nowiggle_min: f64,
    /// sqrt(max(0, chi2_nowiggle_min - chi2_min)).
    pub detection_sigma: f64,
    pub alpha_grid: Vec<f64>,
    pub chi2_grid: Vec<f64>,
    pub chi2_nowiggle_grid: Vec<f64>,
    /// All data separations, whether each is inside the fit range, and the best-fit models there.
    pub s: Vec<f64>,
    pub in_fit: Vec<bool>,
    pub model: Vec<f64>,
    pub model_nowiggle: Vec<f64>,
    pub options: IsotropicOptions,
}

/// Lower Cholesky factor of a symmetric matrix (row-major n x n), or None if a pivot is not
/// above `min_pivot` or the smallest pivot^2 falls below `min_ratio` of the largest.
fn cholesky_with(a: &[f64], n: usize, min_pivot: f64, min_ratio: f64) -> Option<Vec<f64>> {
    let mut l = vec![0.0; n * n];
    let mut dmax: f64 = 0.0;
    let mut dmin = f64::INFINITY;
    for j in 0..n {
        let mut d = a[j * n + j];
        for k in 0..j {
            d -= l[j * n + k] * l[j * n + k];
        }
        if !(d.is_finite() && d > min_pivot) {
            return None;
        }
        dmax = dmax.max(d);
        dmin = dmin.min(d);
        let dj = d.sqrt();
        l[j * n + j] = dj;
        for i in j + 1..n {
            let mut v = a[i * n + j];
            for k in 0..j {
                v -= l[i * n + k] * l[j * n + k];
            }
            l[i * n + j] = v / dj;
        }
    }
    if dmin < min_ratio * dmax {
        return None;
    }
    Some(l)
}

/// Cholesky of a covariance: positive definite and not numerically singular (1e-13).
fn cholesky(a: &[f64], n: usize) -> Option<Vec<f64>> {
    cholesky_with(a, n, 0.0, 1e-13)
}

/// Cholesky for the small normal-equation matrices (only positive definiteness required).
fn cholesky_loose(a: &[f64], n: usize) -> Option<Vec<f64>> {
    cholesky_with(a, n, 1e-300, 0.0)
}

/// Solve L L^T x = b in place.
fn chol_solve(l: &[f64], n: usize, b: &mut [f64]) {
    for i in 0..n {
        let mut v = b[i];
        for k in 0..i {
            v -= l[i * n + k] * b[k];
        }
        b[i] = v / l[i * n + i];
    }
    for i in (0..n).rev() {
        let mut v = b[i];
        for k in i + 1..n {
            v -= l[k * n + i] * b[k];
        }
        b[i] = v / l[i * n + i];
    }
}

/// Data prepared for repeated GLS solves.
struct Gls<'a> {
    s: Vec<f64>,
    xi: Vec<f64>,
    /// inverse covariance of the fit bins, row-major
    w: Vec<f64>,
    template: &'a BaoTemplate,
}

impl Gls<'_> {
    fn n(&self) -> usize {
        self.s.len()
    }

    /// Best linear parameters and chi2 at `alpha`, with B^2 >= 0.
    /// Returns (params [B^2, a0, a1, a2], chi2, clamped).
    fn solve(&self, alpha: f64, nowiggle: bool) -> ([f64; 4], f64, bool) {
        let n = self.n();
        let cols: Vec<[f64; 4]> = self
            .s
            .iter()
            .map(|&s| {
                let t = if nowiggle {
                    self.template.xi_nowiggle(alpha * s)
                } else {
                    self.template.xi(alpha * s)
                };
                [t, 1.0, 1.0 / s, 1.0 / (s * s)]
            })
            .collect();
        // W A (n x 4) and W xi
        let mut wa = vec![[0.0; 4]; n];
        let mut wx = vec![0.0; n];
        for i in 0..n {
            for (j, (cj, xj)) in cols.iter().zip(&self.xi).enumerate() {
                let wij = self.w[i * n + j];
                for p in 0..4 {
                    wa[i][p] += wij * cj[p];
                }
                wx[i] += wij * xj;
            }
        }
        let x_w_x: f64 = (0..n).map(|i| self.xi[i] * wx[i]).sum();
        let fit = |first: usize| -> Option<([f64; 4], f64)> {
            let m = 4 - first;
            let mut f = vec![0.0; m * m];
            let mut g = vec![0.0; m];
            for a in 0..m {
                for b in 0..m {
                    f[a * m + b] = (0..n).map(|i| cols[i][a + first] * wa[i][b + first]).sum();
                }
                g[a] = (0..n).map(|i| cols[i][a + first] * wx[i]).sum();
            }
            let l = cholesky_loose(&f, m)?;
            let mut th = g.clone();
            chol_solve(&l, m, &mut th);
            // chi2 = x'Wx - g' theta at the GLS solution
            let chi2 = x_w_x - th.iter().zip(&g).map(|(a, b)| a * b).sum::<f64>();
            let mut p = [0.0; 4];
            p[first..].copy_from_slice(&th);
            Some((p, chi2.max(0.0)))
        };
        match fit(0) {
            Some((p, c)) if p[0] >= 0.0 => (p, c, false),
            _ => match fit(1) {
                Some((p, c)) => (p, c, true),
                None => ([0.0; 4], f64::INFINITY, true),
            },
        }
    }
}

/// Minimum of a chi2 curve on a uniform grid: (alpha, chi2, at_edge).
fn refine_minimum(alpha: &[f64], chi2: &[f64]) -> (usize, f64, f64, bool) {
    let mut i0 = 0;
    for (i, &c) in chi2.iter().enumerate() {
        if c < chi2[i0] {
            i0 = i;
        }
    }
    if i0 == 0 || i0 + 1 == chi2.len() {
        return (i0, alpha[i0], chi2[i0], true);
    }
    let (y0, y1, y2) = (chi2[i0 - 1], chi2[i0], chi2[i0 + 1]);
    let h = alpha[i0 + 1] - alpha[i0];
    let curv = y0 - 2.0 * y1 + y2;
    if curv.is_nan() || curv <= 0.0 {
        return (i0, alpha[i0], y1, false);
    }
    let off = 0.5 * h * (y0 - y2) / curv;
    let vmin = y1 - (y0 - y2) * (y0 - y2) / (8.0 * curv);
    (i0, alpha[i0] + off, vmin, false)
}

/// Fit the isotropic BAO model to xi(s). `s` are the bins' mean separations [Mpc/h], `xi` the
/// measured correlation function, `inv_cov` the inverse covariance of all bins (see module docs).
pub fn fit_isotropic(
    s: &[f64],
    xi: &[f64],
    inv_cov: &Array2<f64>,
    template: &BaoTemplate,
    opts: &IsotropicOptions,
) -> Result<IsotropicFit> {
    let n_all = s.len();
    if xi.len() != n_all {
        return Err(Error::input(format!(
            "isotropic fit: {} separations but {} xi values",
            n_all,
            xi.len()
        )));
    }
    if inv_cov.dim() != (n_all, n_all) {
        return Err(Error::input(format!(
            "isotropic fit: inverse covariance is {}x{}, expected {n_all}x{n_all}",
            inv_cov.nrows(),
            inv_cov.ncols()
        )));
    }
    for (i, (&si, &xii)) in s.iter().zip(xi).enumerate() {
        if !(si.is_finite() && si > 0.0) {
            return Err(Error::input(format!(
                "isotropic fit: bin {i}: separation s = {si} must be positive and finite"
            )));
        }
        if !xii.is_finite() {
            return Err(Error::input(format!(
                "isotropic fit: bin {i} (s = {si}): xi = {xii} is not finite"
            )));
        }
    }
    if let Some(((i, j), v)) = inv_cov.indexed_iter().find(|(_, v)| !v.is_finite()) {
        return Err(Error::input(format!(
            "isotropic fit: inverse covariance element ({i}, {j}) = {v} is not finite"
        )));
    }
    let o = *opts;
    if !(o.s_min.is_finite() && o.s_max.is_finite() && o.s_min < o.s_max && o.s_min > 0.0) {
        return Err(Error::input(format!(
            "isotropic fit: fit range [{}, {}] Mpc/h is invalid",
            o.s_min, o.s_max
        )));
    }
    if !(o.alpha_min > 0.0
        && o.alpha_max > o.alpha_min
        && o.alpha_step > 0.0
        && o.alpha_max.is_finite())
    {
        return Err(Error::input(format!(
            "isotropic fit: alpha grid [{}, {}] step {} is invalid",
            o.alpha_min, o.alpha_max, o.alpha_step
        )));
    }
    let n_alpha = ((o.alpha_max - o.alpha_min) / o.alpha_step + 1e-9).floor() as usize + 1;
    if !(3..=10_000_000).contains(&n_alpha) {
        return Err(Error::input(format!(
            "isotropic fit: alpha grid has {n_alpha} points; need between 3 and 1e7"
        )));
    }
    let in_fit: Vec<bool> = s.iter().map(|&v| v >= o.s_min && v <= o.s_max).collect();
    let idx: Vec<usize> = (0..n_all).filter(|&i| in_fit[i]).collect();
    if idx.is_empty() {
        let (lo, hi) = s.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |a, &v| {
            (a.0.min(v), a.1.max(v))
        });
        return Err(Error::input(format!(
            "isotropic fit: fit range [{}, {}] Mpc/h contains no data bins (bins span [{lo}, {hi}])",
            o.s_min, o.s_max
        )));
    }
    if idx.len() < 6 {
        return Err(Error::input(format!(
            "isotropic fit: only {} bins in the fit range [{}, {}] Mpc/h; need at least 6 \
             (5 parameters + 1 degree of freedom)",
            idx.len(),
            o.s_min,
            o.s_max
        )));
    }
    // template coverage for alpha * s
    let s_fit_min = idx.iter().map(|&i| s[i]).fold(f64::INFINITY, f64::min);
    let s_fit_max = idx.iter().map(|&i| s[i]).fold(0.0, f64::max);
    let alpha_top = o.alpha_min + o.alpha_step * (n_alpha - 1) as f64;
    let (t_lo, t_hi) = template.s_range();
    if o.alpha_min * s_fit_min < t_lo || alpha_top * s_fit_max > t_hi {
        return Err(Error::input(format!(
            "isotropic fit: alpha * s spans [{:.2}, {:.2}] Mpc/h but the template covers [{t_lo}, {t_hi}]",
            o.alpha_min * s_fit_min,
            alpha_top * s_fit_max
        )));
    }
    // symmetry and positive definiteness of the full inverse covariance
    let psi: Vec<f64> = inv_cov.iter().copied().collect(); // row-major (standard layout iter)
    let scale = psi.iter().fold(0.0f64, |a, v| a.max(v.abs()));
    for i in 0..n_all {
        for j in 0..i {
            if (psi[i * n_all + j] - psi[j * n_all + i]).abs() > 1e-8 * scale {
                return Err(Error::input(format!(
                    "isotropic fit: inverse covariance is not symmetric at ({i}, {j})"
                )));
            }
        }
    }
    if cholesky(&psi, n_all).is_none() {
        return Err(Error::input(
            "isotropic fit: inverse covariance is singular or not positive definite \
             (Cholesky failed or condition number above 1e13)",
        ));
    }
    // inverse covariance of the fit bins: Schur complement of the dropped block
    let out: Vec<usize> = (0..n_all).filter(|&i| !in_fit[i]).collect();
    let na = idx.len();
    let mut w = vec![0.0; na * na];
    for (a, &i) in idx.iter().enumerate() {
        for (b, &j) in idx.iter().enumerate() {
            w[a * na + b] = psi[i * n_all + j];
        }
    }
    if !out.is_empty() {
        let nb = out.len();
        let mut bb = vec![0.0; nb * nb];
        for (a, &i) in out.iter().enumerate() {
            for (b, &j) in out.iter().enumerate() {
                bb[a * nb + b] = psi[i * n_all + j];
            }
        }
        let l = cholesky_loose(&bb, nb).ok_or_else(|| {
            Error::input("isotropic fit: inverse covariance block of excluded bins is singular")
        })?;
        // columns of Psi_ba, solved against Psi_bb
        let mut sol = vec![vec![0.0; nb]; na];
        for (a, &i) in idx.iter().enumerate() {
            let mut col: Vec<f64> = out.iter().map(|&j| psi[j * n_all + i]).collect();
            chol_solve(&l, nb, &mut col);
            sol[a] = col;
        }
        for (a, &i) in idx.iter().enumerate() {
            for b in 0..na {
                let corr: f64 = out
                    .iter()
                    .enumerate()
                    .map(|(c, &j)| psi[i * n_all + j] * sol[b][c])
                    .sum();
                w[a * na + b] -= corr;
            }
        }
    }
    let gls = Gls {
        s: idx.iter().map(|&i| s[i]).collect(),
        xi: idx.iter().map(|&i| xi[i]).collect(),
        w,
        template,
    };
    let alpha_grid: Vec<f64> = (0..n_alpha)
        .map(|i| o.alpha_min + o.alpha_step * i as f64)
        .collect();
    let chi2_grid: Vec<f64> = alpha_grid.iter().map(|&a| gls.solve(a, false).1).collect();
    let chi2_nw_grid: Vec<f64> = alpha_grid.iter().map(|&a| gls.solve(a, true).1).collect();

    let (i0, alpha_ref, _, at_edge) = refine_minimum(&alpha_grid, &chi2_grid);
    // exact chi2 at the refined alpha; keep the grid point if it is lower
    let r_ref = gls.solve(alpha_ref, false);
    let (alpha, (par, chi2_min, clamped)) = if r_ref.1 <= chi2_grid[i0] {
        (alpha_ref, r_ref)
    } else {
        (alpha_grid[i0], gls.solve(alpha_grid[i0], false))
    };
    let thr = chi2_min + 1.0;
    let cross = |j_in: usize, j_out: usize| -> f64 {
        let (c0, c1) = (chi2_grid[j_in], chi2_grid[j_out]);
        let t = if c1 > c0 { (thr - c0) / (c1 - c0) } else { 0.0 };
        alpha_grid[j_in] + t.clamp(0.0, 1.0) * (alpha_grid[j_out] - alpha_grid[j_in])
    };
    let mut lower_open = true;
    let mut alpha_lo = alpha_grid[0];
    for j in (0..i0).rev() {
        if chi2_grid[j] >= thr {
            alpha_lo = cross(j + 1, j);
            lower_open = false;
            break;
        }
    }
    let mut upper_open = true;
    let mut alpha_hi = alpha_grid[n_alpha - 1];
    for (j, &c) in chi2_grid.iter().enumerate().skip(i0 + 1) {
        if c >= thr {
            alpha_hi = cross(j - 1, j);
            upper_open = false;
            break;
        }
    }
    alpha_lo = alpha_lo.min(alpha);
    alpha_hi = alpha_hi.max(alpha);

    // no-wiggle minimum: exact chi2 at the refined alpha, or at the grid point if lower
    let (inw, alpha_nw, _, _) = refine_minimum(&alpha_grid, &chi2_nw_grid);
    let (par_nw, c_nw_ref, _) = gls.solve(alpha_nw, true);
    let (chi2_nw_min, alpha_nw, par_nw) = if c_nw_ref <= chi2_nw_grid[inw] {
        (c_nw_ref, alpha_nw, par_nw)
    } else {
        let r = gls.solve(alpha_grid[inw], true);
        (r.1, alpha_grid[inw], r.0)
    };
    let eval = |p: &[f64; 4], a: f64, nw: bool, sv: f64| {
        let t = if nw {
            template.xi_nowiggle(a * sv)
        } else {
            template.xi(a * sv)
        };
        let t = if p[0] == 0.0 { 0.0 } else { p[0] * t };
        t + p[1] + p[2] / sv + p[3] / (sv * sv)
    };
    let model: Vec<f64> = s.iter().map(|&v| eval(&par, alpha, false, v)).collect();
    let model_nw: Vec<f64> = s
        .iter()
        .map(|&v| eval(&par_nw, alpha_nw, true, v))
        .collect();
    Ok(IsotropicFit {
        alpha,
        sigma: 0.5 * (alpha_hi - alpha_lo),
        sigma_lo: alpha - alpha_lo,
        sigma_hi: alpha_hi - alpha,
        alpha_lo,
        alpha_hi,
        lower_open,
        upper_open,
        alpha_at_grid_edge: at_edge,
        chi2_min,
        dof: na as i64 - 5,
        n_bins: na,
        b2: par[0],
        a0: par[1],
        a1: par[2],
        a2: par[3],
        b2_clamped: clamped,
        alpha_nowiggle: alpha_nw,
        chi2_nowiggle_min: chi2_nw_min,
        detection_sigma: (chi2_nw_min - chi2_min).max(0.0).sqrt(),
        alpha_grid,
        chi2_grid,
        chi2_nowiggle_grid: chi2_nw_grid,
        s: s.to_vec(),
        in_fit,
        model,
        model_nowiggle: model_nw,
        options: o,
    })
}

/// D_V(z_eff)/r_d from a fitted alpha: D_V/r_d = alpha D_V^fid(z_eff) / r_d^fid.
#[derive(Debug, Clone, Serialize)]
pub struct DvOverRd {
    pub z_eff: f64,
    pub alpha: f64,
    /// Fiducial D_V(z_eff) and r_d [Mpc].
    pub dv_fid_mpc: f64,
    pub rd_fid_mpc: f64,
    pub dv_over_rd: f64,
    /// Symmetrised and asymmetric 1-sigma errors on D_V/r_d.
    pub sigma: f64,
    pub sigma_lo: f64,
    pub sigma_hi: f64,
    /// The alpha interval was open on that side (the error is a lower bound).
    pub lower_open: bool,
    pub upper_open: bool,
}

impl DvOverRd {
    /// D_V [Mpc] and its symmetrised error for a given sound horizon r_d [Mpc].
    pub fn dv_mpc(&self, rd_mpc: f64) -> (f64, f64) {
        (self.dv_over_rd * rd_mpc, self.sigma * rd_mpc)
    }
}

/// Convert a fit to D_V/r_d with the fiducial cosmology `fid` at `z_eff`, and the fiducial
/// sound horizon `rd_fid_mpc` that the template was built for (e.g. `fid.r_d()`).
pub fn dv_over_rd(
    fit: &IsotropicFit,
    fid: &Cosmology,
    z_eff: f64,
    rd_fid_mpc: f64,
) -> Result<DvOverRd> {
    if !(z_eff.is_finite() && z_eff > 0.0) {
        return Err(Error::input(format!(
            "D_V/r_d: z_eff = {z_eff} must be positive and finite"
        )));
    }
    if !(rd_fid_mpc.is_finite() && rd_fid_mpc > 0.0) {
        return Err(Error::input(format!(
            "D_V/r_d: fiducial r_d = {rd_fid_mpc} Mpc must be positive and finite"
        )));
    }
    let dv_fid = fid.dv(z_eff);
    let f = dv_fid / rd_fid_mpc;
    Ok(DvOverRd {
        z_eff,
        alpha: fit.alpha,
        dv_fid_mpc: dv_fid,
        rd_fid_mpc,
        dv_over_rd: fit.alpha * f,
        sigma: fit.sigma * f,
        sigma_lo: fit.sigma_lo * f,
        sigma_hi: fit.sigma_hi * f,
        lower_open: fit.lower_open,
        upper_open: fit.upper_open,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cosmology::power::LinearPower;
    use crate::fit::template::TemplateOptions;
    use std::sync::OnceLock;

    fn template() -> &'static BaoTemplate {
        static T: OnceLock<BaoTemplate> = OnceLock::new();
        T.get_or_init(|| {
            let lp = LinearPower::eh98(&Cosmology::planck18());
            BaoTemplate::new(&lp, &TemplateOptions::default()).unwrap()
        })
    }

    /// 40 bins of width 5 Mpc/h from 0 to 200; the fit range keeps 20 of them.
    fn bins() -> Vec<f64> {
        (0..40).map(|i| 2.5 + 5.0 * i as f64).collect()
    }

    fn truth(s: &[f64], alpha: f64, b2: f64, a: [f64; 3]) -> Vec<f64> {
        s.iter()
            .map(|&v| b2 * template().xi(alpha * v) + a[0] + a[1] / v + a[2] / (v * v))
            .collect()
    }

    fn diag_inv(sig: &[f64]) -> Array2<f64> {
        let n = sig.len();
        Array2::from_shape_fn(
            (n, n),
            |(i, j)| if i == j { 1.0 / (sig[i] * sig[i]) } else { 0.0 },
        )
    }

    /// Gauss-Jordan inverse with partial pivoting (independent of the Cholesky in the module).
    fn invert(a: &Array2<f64>) -> Array2<f64> {
        let n = a.nrows();
        let mut m = a.clone();
        let mut inv = Array2::<f64>::eye(n);
        for c in 0..n {
            let p = (c..n)
                .max_by(|&x, &y| m[[x, c]].abs().total_cmp(&m[[y, c]].abs()))
                .unwrap();
            for j in 0..n {
                m.swap([c, j], [p, j]);
                inv.swap([c, j], [p, j]);
            }
            let d = m[[c, c]];
            for j in 0..n {
                m[[c, j]] /= d;
                inv[[c, j]] /= d;
            }
            for r in 0..n {
                if r != c {
                    let f = m[[r, c]];
                    for j in 0..n {
                        m[[r, j]] -= f * m[[c, j]];
                        inv[[r, j]] -= f * inv[[c, j]];
                    }
                }
            }
        }
        inv
    }

    fn errors(s: &[f64]) -> Vec<f64> {
        // roughly shot-noise-like errors growing to small s (common practice, no source)
        s.iter().map(|&v| 2e-4 * (100.0 / v).sqrt()).collect()
    }

    #[test]
    fn recovers_known_alpha_noiseless() {
        let s = bins();
        let sig = errors(&s);
        // correlated covariance C_ij = sig_i sig_j 0.5^|i-j|, inverted independently
        let n = s.len();
        let cov = Array2::from_shape_fn((n, n), |(i, j)| {
            sig[i] * sig[j] * 0.5f64.powi((i as i32 - j as i32).abs())
        });
        let icov_corr = invert(&cov);
        for alpha in [0.95, 1.0, 1.04] {
            let xi = truth(&s, alpha, 1.7, [2e-4, -0.05, 3.0]);
            for icov in [diag_inv(&sig), icov_corr.clone()] {
                let f = fit_isotropic(&s, &xi, &icov, template(), &IsotropicOptions::default())
                    .unwrap();
                assert!(
                    (f.alpha - alpha).abs() < 1e-4,
                    "alpha {alpha}: got {}",
                    f.alpha
                );
                assert!(f.chi2_min >= 0.0 && f.chi2_min < 1e-6, "{}", f.chi2_min);
                assert!((f.b2 - 1.7).abs() < 1e-3, "{}", f.b2);
                assert_eq!(f.n_bins, 20);
                assert_eq!(f.dof, 15);
                assert!(!f.b2_clamped && !f.lower_open && !f.upper_open);
                assert!(f.detection_sigma > 1.0);
                // model reproduces the data in the fit range
                for i in 0..n {
                    if f.in_fit[i] {
                        assert!((f.model[i] - xi[i]).abs() < 1e-3 * sig[i]);
                    }
                }
            }
        }
    }

    #[test]
    fn schur_complement_equals_inverse_of_covariance_subblock() {
        // fitting all bins with the full inverse covariance (kept bins via the Schur complement)
        // must equal fitting only the kept bins with the inverse of their covariance sub-block
        let s = bins();
        let sig = errors(&s);
        let n = s.len();
        let cov = Array2::from_shape_fn((n, n), |(i, j)| {
            sig[i] * sig[j] * 0.6f64.powi((i as i32 - j as i32).abs())
        });
        let mut xi = truth(&s, 1.01, 2.0, [1e-4, 0.0, 1.0]);
        // deterministic "noise"
        for (i, x) in xi.iter_mut().enumerate() {
            *x += sig[i] * ((i as f64 * 12.9898).sin() * 43758.5453).fract();
        }
        let opts = IsotropicOptions::default();
        let full = fit_isotropic(&s, &xi, &invert(&cov), template(), &opts).unwrap();
        let keep: Vec<usize> = (0..n).filter(|&i| s[i] >= 50.0 && s[i] <= 150.0).collect();
        let sub = Array2::from_shape_fn((keep.len(), keep.len()), |(a, b)| cov[[keep[a], keep[b]]]);
        let s2: Vec<f64> = keep.iter().map(|&i| s[i]).collect();
        let x2: Vec<f64> = keep.iter().map(|&i| xi[i]).collect();
        let part = fit_isotropic(&s2, &x2, &invert(&sub), template(), &opts).unwrap();
        for (a, b) in full.chi2_grid.iter().zip(&part.chi2_grid) {
            assert!((a - b).abs() < 1e-7 * (1.0 + a.abs()), "{a} {b}");
        }
        assert!((full.alpha - part.alpha).abs() < 1e-9);
    }

    #[test]
    fn error_matches_fisher_curvature() {
        // With noiseless data the profile chi2 is quadratic near the truth with curvature
        // 2 / sigma_alpha^2, sigma_alpha^2 = (F^-1)_aa, F = J^T C^-1 J over
        // (alpha, B^2, a0, a1, a2) (common practice, no source: Fisher matrix of a
        // Gaussian likelihood). Derivatives by central differences.
        let s = bins();
        let sig: Vec<f64> = errors(&s).iter().map(|v| v * 2.0).collect();
        let (alpha, b2) = (1.0, 1.5);
        let xi = truth(&s, alpha, b2, [1e-4, -0.02, 1.0]);
        let f = fit_isotropic(
            &s,
            &xi,
            &diag_inv(&sig),
            template(),
            &IsotropicOptions::default(),
        )
        .unwrap();
        let keep: Vec<usize> = (0..s.len()).filter(|&i| f.in_fit[i]).collect();
        let h = 1e-4;
        let mut fm = Array2::<f64>::zeros((5, 5));
        for &i in &keep {
            let v = s[i];
            let dxi =
                b2 * (template().xi((alpha + h) * v) - template().xi((alpha - h) * v)) / (2.0 * h);
            let j = [dxi, template().xi(alpha * v), 1.0, 1.0 / v, 1.0 / (v * v)];
            for a in 0..5 {
                for b in 0..5 {
                    fm[[a, b]] += j[a] * j[b] / (sig[i] * sig[i]);
                }
            }
        }
        let sigma_fisher = invert(&fm)[[0, 0]].sqrt();
        assert!(
            sigma_fisher > 0.005 && sigma_fisher < 0.05,
            "{sigma_fisher}"
        );
        assert!(
            (f.sigma / sigma_fisher - 1.0).abs() < 0.03,
            "fit {} (lo {} hi {}) vs Fisher {sigma_fisher}",
            f.sigma,
            f.sigma_lo,
            f.sigma_hi
        );
    }

    #[test]
    fn negative_amplitude_is_clamped() {
        let s = bins();
        let sig = errors(&s);
        // data = -template: on a narrow alpha grid the unconstrained B^2 is about -1 everywhere
        let xi = truth(&s, 1.0, -1.0, [1e-4, 0.0, 0.0]);
        let opts = IsotropicOptions {
            alpha_min: 0.995,
            alpha_max: 1.005,
            ..Default::default()
        };
        let f = fit_isotropic(&s, &xi, &diag_inv(&sig), template(), &opts).unwrap();
        assert_eq!(f.alpha_grid.len(), 11);
        assert_eq!(f.b2, 0.0);
        assert!(f.b2_clamped);
        // chi2 equals an independent weighted polynomial fit (a0 + a1/s + a2/s^2) by
        // normal equations solved with Cramer's rule
        let keep: Vec<usize> = (0..s.len()).filter(|&i| f.in_fit[i]).collect();
        let mut m = [[0.0; 3]; 3];
        let mut g = [0.0; 3];
        for &i in &keep {
            let b = [1.0, 1.0 / s[i], 1.0 / (s[i] * s[i])];
            let w = 1.0 / (sig[i] * sig[i]);
            for a in 0..3 {
                g[a] += w * b[a] * xi[i];
                for c in 0..3 {
                    m[a][c] += w * b[a] * b[c];
                }
            }
        }
        let det = |m: &[[f64; 3]; 3]| {
            m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1])
                - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
                + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0])
        };
        let d = det(&m);
        let mut th = [0.0; 3];
        for (k, t) in th.iter_mut().enumerate() {
            let mut mk = m;
            for r in 0..3 {
                mk[r][k] = g[r];
            }
            *t = det(&mk) / d;
        }
        let chi2: f64 = keep
            .iter()
            .map(|&i| {
                let r = xi[i] - th[0] - th[1] / s[i] - th[2] / (s[i] * s[i]);
                r * r / (sig[i] * sig[i])
            })
            .sum();
        assert!(
            (f.chi2_min - chi2).abs() < 1e-6 * chi2.max(1.0),
            "{} {chi2}",
            f.chi2_min
        );
        assert!(f
            .chi2_grid
            .iter()
            .all(|&c| (c - chi2).abs() < 1e-6 * chi2.max(1.0)));
        assert!(f.lower_open && f.upper_open);
        // the model is the polynomial alone
        for &i in &keep {
            let p = th[0] + th[1] / s[i] + th[2] / (s[i] * s[i]);
            assert!((f.model[i] - p).abs() < 1e-9);
        }
    }

    #[test]
    fn bad_inputs_are_input_errors() {
        let s = bins();
        let sig = errors(&s);
        let xi = truth(&s, 1.0, 1.0, [0.0; 3]);
        let ic = diag_inv(&sig);
        let o = IsotropicOptions::default();
        let t = template();
        let check = |r: Result<IsotropicFit>, word: &str| {
            let e = r.unwrap_err();
            assert_eq!(e.exit_code(), 2);
            assert!(e.to_string().contains(word), "{e}");
        };
        let mut bad = xi.clone();
        bad[20] = f64::NAN;
        check(fit_isotropic(&s, &bad, &ic, t, &o), "bin 20");
        check(fit_isotropic(&s[..39], &xi, &ic, t, &o), "separations");
        check(
            fit_isotropic(
                &s,
                &xi,
                &ic,
                t,
                &IsotropicOptions {
                    s_min: 300.0,
                    s_max: 400.0,
                    ..o
                },
            ),
            "no data bins",
        );
        check(
            fit_isotropic(
                &s,
                &xi,
                &ic,
                t,
                &IsotropicOptions {
                    s_min: 90.0,
                    s_max: 110.0,
                    ..o
                },
            ),
            "bins in the fit range",
        );
        check(
            fit_isotropic(
                &s,
                &xi,
                &ic,
                t,
                &IsotropicOptions {
                    alpha_step: -1.0,
                    ..o
                },
            ),
            "alpha grid",
        );
        let mut sing = ic.clone();
        sing[[3, 3]] = 0.0;
        check(fit_isotropic(&s, &xi, &sing, t, &o), "singular");
        let rank1 = Array2::from_shape_fn((40, 40), |(i, j)| (i + 1) as f64 * (j + 1) as f64);
        check(fit_isotropic(&s, &xi, &rank1, t, &o), "singular");
        let mut asym = ic.clone();
        asym[[1, 2]] = 5.0;
        check(fit_isotropic(&s, &xi, &asym, t, &o), "symmetric");
        // template too short for alpha * s
        let s_far: Vec<f64> = (0..40).map(|i| 250.0 + 5.0 * i as f64).collect();
        check(
            fit_isotropic(
                &s_far,
                &xi,
                &ic,
                t,
                &IsotropicOptions {
                    s_min: 250.0,
                    s_max: 450.0,
                    ..o
                },
            ),
            "template covers",
        );
    }

    #[test]
    fn no_wiggle_data_has_no_detection_and_result_serialises() {
        let s = bins();
        let sig = errors(&s);
        let xi: Vec<f64> = s
            .iter()
            .map(|&v| 1.5 * template().xi_nowiggle(v) + 1e-4)
            .collect();
        let f = fit_isotropic(
            &s,
            &xi,
            &diag_inv(&sig),
            template(),
            &IsotropicOptions::default(),
        )
        .unwrap();
        assert!(f.chi2_nowiggle_min < 1e-6);
        assert!(f.detection_sigma < 1e-3, "{}", f.detection_sigma);
        let js = serde_json::to_string(&f).unwrap();
        assert!(js.contains("\"chi2_grid\""));
    }

    #[test]
    fn dv_over_rd_conversion() {
        let s = bins();
        let sig = errors(&s);
        let xi = truth(&s, 1.02, 1.5, [0.0; 3]);
        let f = fit_isotropic(
            &s,
            &xi,
            &diag_inv(&sig),
            template(),
            &IsotropicOptions::default(),
        )
        .unwrap();
        let c = Cosmology::planck18();
        let z = 0.55;
        let d = dv_over_rd(&f, &c, z, c.r_d()).unwrap();
        // D_V = [z D_M^2 c/H(z)]^(1/3) (Hogg 1999 eq. for the volume-averaged distance
        // as used by Eisenstein et al. 2005), assembled here from the radial distance
        let dm = c.comoving_radial(z);
        let dv = (z * dm * dm * crate::cosmology::C_KM_S / (100.0 * c.h * c.e(z))).cbrt();
        assert!((d.dv_over_rd - f.alpha * dv / c.r_d()).abs() < 1e-9 * d.dv_over_rd);
        assert!((d.sigma / d.dv_over_rd - f.sigma / f.alpha).abs() < 1e-12);
        let (dvm, sdv) = d.dv_mpc(150.0);
        assert!((dvm - d.dv_over_rd * 150.0).abs() < 1e-9 && sdv > 0.0);
        assert!(dv_over_rd(&f, &c, -1.0, 147.0).is_err());
        assert!(dv_over_rd(&f, &c, 0.5, 0.0).is_err());
    }
}
