//! Legendre multipoles of xi(s, mu) from mu-binned estimates.
use crate::pairs::Binning;
use crate::{Error, Result};

/// Legendre polynomial L_l(x) by the Bonnet recurrence.
pub fn legendre(l: usize, x: f64) -> f64 {
    let (mut p0, mut p1) = (1.0, x);
    if l == 0 {
        return p0;
    }
    for n in 1..l {
        let n = n as f64;
        let p2 = ((2.0 * n + 1.0) * x * p1 - n * p0) / (n + 1.0);
        p0 = p1;
        p1 = p2;
    }
    p1
}

/// Exact integral of L_l over [a, b], from (2l+1) L_l = d/dx (L_{l+1} - L_{l-1}).
pub fn legendre_bin_integral(l: usize, a: f64, b: f64) -> f64 {
    if l == 0 {
        return b - a;
    }
    let f = |x: f64| (legendre(l + 1, x) - legendre(l - 1, x)) / (2 * l + 1) as f64;
    f(b) - f(a)
}

/// Multipoles xi_l(s) = (2l+1) sum_j xi(s, mu_j) int_{mu bin j} L_l(mu) dmu for each l in
/// `ells`, with linear mu bins on [0, 1] (xi is even in mu). Returns `out[il][is]`.
///
/// Treats xi as constant inside each mu bin: for bin-averaged input the monopole of
/// a + b L2 is exactly a, while the quadrupole is b (1 - 5/(4 n_mu^2) + 1/(4 n_mu^4)).
/// NaN bins propagate into the multipoles of their s bin.
pub fn multipoles(xi: &[f64], binning: &Binning, ells: &[usize]) -> Result<Vec<Vec<f64>>> {
    let n_mu = binning.n_mu;
    if xi.len() != binning.n_bins() {
        return Err(Error::input(format!(
            "multipoles: xi has {} values, the binning has {} bins",
            xi.len(),
            binning.n_bins()
        )));
    }
    Ok(ells
        .iter()
        .map(|&l| {
            let weights: Vec<f64> = (0..n_mu)
                .map(|j| {
                    let a = j as f64 / n_mu as f64;
                    let b = (j + 1) as f64 / n_mu as f64;
                    (2 * l + 1) as f64 * legendre_bin_integral(l, a, b)
                })
                .collect();
            xi.chunks(n_mu)
                .map(|row| row.iter().zip(&weights).map(|(x, w)| x * w).sum())
                .collect()
        })
        .collect())
}
