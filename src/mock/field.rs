//! The lognormal density field on a periodic grid (Coles & Jones 1991, MNRAS 248, 1).
//!
//! Method (all on the FFT grid, exact for the discrete periodic field):
//! 1. put b^2 P(|k|) on the grid modes; an inverse FFT gives the grid correlation
//!    xi_g(x) = (1/V) sum_k b^2 P(k) exp(i k.x);
//! 2. xi_G = ln(1 + xi_g) is the correlation the Gaussian field G must have so that
//!    exp(G - sigma_G^2/2) - 1 has correlation xi_g;
//! 3. a forward FFT gives P_G(k) = V_cell sum_x xi_G(x) exp(-i k.x); negative P_G (a target
//!    that no lognormal field can reach exactly) is set to zero and counted; k = 0 is zeroed;
//! 4. white noise w ~ N(0,1) per cell, transformed, scaled by sqrt(P_G / V_cell) and
//!    transformed back, is a Gaussian field with power P_G; sigma_G^2 = (1/V) sum_k P_G(k)
//!    is its exact ensemble variance (after clipping).
//!
//! Working on the grid instead of through a continuous Hankel transform avoids aliasing and
//! ringing: the grid power of the output field equals b^2 P(k) at every mode whenever no
//! P_G mode was clipped.
use super::fft::{fold, half_weight, Fft3, C64};
use super::stream_rng;
use crate::{Error, Result};
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;

/// Stream purpose tag for the white noise.
pub(crate) const PURPOSE_NOISE: u64 = 1;

/// Summary numbers of the generated field.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct FieldStats {
    pub sigma_g: f64,
    /// Negative P_G entries on the half-complex grid (set to zero).
    pub n_negative_pg: usize,
    /// Entries on the half-complex grid (n * n * (n/2 + 1)).
    pub n_modes: usize,
    /// Smallest xi_g on the grid (must exceed -1).
    pub min_xi_g: f64,
}

/// 1 + delta_LN on an n^3 grid (row-major [i][j][l]) for a box of side `box_size` (Mpc/h).
pub(crate) fn lognormal_density(
    power: &(dyn Fn(f64) -> f64 + Sync),
    bias: f64,
    n: usize,
    box_size: f64,
    seed: u64,
) -> Result<(Vec<f64>, FieldStats)> {
    let fft = Fft3::new(n)?;
    let nh = fft.nh();
    let ncell = (n * n * n) as f64;
    let volume = box_size.powi(3);
    let vcell = volume / ncell;
    let kf = 2.0 * std::f64::consts::PI / box_size;
    let b2 = bias * bias;

    // 1. b^2 P(k) on the half grid.
    let mut spec = vec![C64::new(0.0, 0.0); n * n * nh];
    spec.par_chunks_mut(n * nh)
        .enumerate()
        .try_for_each(|(i, plane)| -> Result<()> {
            let fi = fold(i, n) as f64;
            for j in 0..n {
                let fj = fold(j, n) as f64;
                for l in 0..nh {
                    if i == 0 && j == 0 && l == 0 {
                        continue;
                    }
                    let k = kf * (fi * fi + fj * fj + (l * l) as f64).sqrt();
                    let p = power(k);
                    if !(p.is_finite() && p >= 0.0) {
                        return Err(Error::input(format!(
                            "power spectrum P(k = {k:.5e} h/Mpc) = {p}: must be finite and >= 0"
                        )));
                    }
                    plane[j * nh + l] = C64::new(b2 * p, 0.0);
                }
            }
            Ok(())
        })?;

    // 2. xi_g on the grid, then ln(1 + xi_g).
    let mut xi = fft.inverse(spec)?;
    let min_xi_g = xi
        .par_chunks(n * n)
        .map(|c| c.iter().fold(f64::INFINITY, |m, &v| m.min(v)))
        .collect::<Vec<_>>()
        .into_iter()
        .fold(f64::INFINITY, f64::min)
        / volume;
    if min_xi_g.is_nan() || min_xi_g <= -1.0 {
        return Err(Error::input(format!(
            "lognormal mock: b^2 xi(r) on the grid reaches {min_xi_g:.4} <= -1 (bias = {bias}); \
             no lognormal field has this correlation; lower the bias or use coarser cells"
        )));
    }
    xi.par_iter_mut().for_each(|v| *v = (*v / volume).ln_1p());

    // 3. P_G on the half grid; clip negatives; amplitude sqrt(P_G / V_cell).
    let pg = fft.forward(&xi)?;
    drop(xi);
    let mut amp = vec![0.0f64; n * n * nh];
    let per_plane: Vec<(f64, usize)> = amp
        .par_chunks_mut(n * nh)
        .zip(pg.par_chunks(n * nh))
        .enumerate()
        .map(|(i, (a, p))| {
            let mut sum = 0.0;
            let mut neg = 0usize;
            for j in 0..n {
                for l in 0..nh {
                    let q = j * nh + l;
                    if i == 0 && j == 0 && l == 0 {
                        a[q] = 0.0;
                        continue;
                    }
                    let mut v = p[q].re * vcell;
                    if v < 0.0 {
                        neg += 1;
                        v = 0.0;
                    }
                    sum += half_weight(l, n) * v;
                    a[q] = (v / vcell).sqrt();
                }
            }
            (sum, neg)
        })
        .collect();
    drop(pg);
    // Fixed-order reduction keeps sigma_G identical for any thread count.
    let (mut sum_pg, mut n_negative_pg) = (0.0, 0usize);
    for (s, c) in per_plane {
        sum_pg += s;
        n_negative_pg += c;
    }
    let sigma2 = sum_pg / volume;

    // 4. White noise, one independent stream per x-plane; colour it; exponentiate.
    let mut noise = vec![0.0f64; n * n * n];
    noise
        .par_chunks_mut(n * n)
        .enumerate()
        .for_each(|(i, plane)| {
            let mut rng = stream_rng(seed, PURPOSE_NOISE, i as u64);
            for v in plane.iter_mut() {
                *v = StandardNormal.sample(&mut rng);
            }
        });
    let mut w = fft.forward(&noise)?;
    drop(noise);
    w.par_iter_mut()
        .zip(amp.par_iter())
        .for_each(|(c, a)| *c *= *a);
    drop(amp);
    let mut rho = fft.inverse(w)?;
    let half_var = 0.5 * sigma2;
    rho.par_iter_mut()
        .for_each(|g| *g = (*g / ncell - half_var).exp());
    Ok((
        rho,
        FieldStats {
            sigma_g: sigma2.sqrt(),
            n_negative_pg,
            n_modes: n * n * nh,
            min_xi_g,
        },
    ))
}
