//! Affine-invariant ensemble sampler (Goodman & Weare 2010, CAMCoS 5, 65, stretch move) and its
//! convergence diagnostics: integrated autocorrelation time with Sokal's automatic window and
//! the Gelman-Rubin statistic.
//!
//! Determinism: the ensemble is split into two fixed halves; for each half all random numbers
//! are drawn serially first, the log posteriors of the proposals are evaluated in parallel and
//! collected in walker order, and acceptance is applied serially. The chain therefore depends
//! only on the seed, never on the thread count.
use rand::Rng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use rustfft::{num_complex::Complex, FftPlanner};

/// One ensemble run: positions stored as [step][walker][dim] in one flat vector.
#[derive(Debug, Clone, PartialEq)]
pub struct EnsembleChain {
    pub n_steps: usize,
    pub n_walkers: usize,
    pub ndim: usize,
    pub positions: Vec<f64>,
    pub accepted: usize,
}

impl EnsembleChain {
    pub fn at(&self, step: usize, walker: usize) -> &[f64] {
        let o = (step * self.n_walkers + walker) * self.ndim;
        &self.positions[o..o + self.ndim]
    }
    /// Series of parameter `d` for one walker over steps [from, n_steps).
    pub fn walker_series(&self, walker: usize, d: usize, from: usize) -> Vec<f64> {
        (from..self.n_steps)
            .map(|s| self.at(s, walker)[d])
            .collect()
    }
    pub fn acceptance(&self) -> f64 {
        self.accepted as f64 / (self.n_steps * self.n_walkers).max(1) as f64
    }
}

/// Run the stretch-move sampler for `n_steps` from `init` (one position per walker, every one
/// with finite log posterior). `a` is the stretch scale (2 is the usual choice).
pub fn stretch_sample<F>(
    ln_post: &F,
    init: &[Vec<f64>],
    n_steps: usize,
    a: f64,
    rng: &mut ChaCha8Rng,
) -> EnsembleChain
where
    F: Fn(&[f64]) -> f64 + Sync,
{
    let nw = init.len();
    let ndim = init[0].len();
    let half = nw / 2;
    let mut pos: Vec<Vec<f64>> = init.to_vec();
    let mut lp: Vec<f64> = pos.par_iter().map(|x| ln_post(x)).collect();
    let mut out = Vec::with_capacity(n_steps * nw * ndim);
    let mut accepted = 0;
    for _ in 0..n_steps {
        for (lo, hi, olo, ohi) in [(0, half, half, nw), (half, nw, 0, half)] {
            // Serial draws: partner, stretch factor, acceptance uniform.
            let draws: Vec<(usize, f64, f64)> = (lo..hi)
                .map(|_| {
                    let j = rng.gen_range(olo..ohi);
                    let u: f64 = rng.gen();
                    let z = ((a - 1.0) * u + 1.0).powi(2) / a;
                    let r: f64 = rng.gen();
                    (j, z, r)
                })
                .collect();
            let props: Vec<Vec<f64>> = (lo..hi)
                .zip(&draws)
                .map(|(k, &(j, z, _))| {
                    (0..ndim)
                        .map(|d| pos[j][d] + z * (pos[k][d] - pos[j][d]))
                        .collect()
                })
                .collect();
            let plp: Vec<f64> = props.par_iter().map(|x| ln_post(x)).collect();
            for (i, (prop, &(_, z, r))) in props.into_iter().zip(&draws).enumerate() {
                let k = lo + i;
                let q = (ndim as f64 - 1.0) * z.ln() + plp[i] - lp[k];
                if plp[i].is_finite() && r.ln() < q {
                    pos[k] = prop;
                    lp[k] = plp[i];
                    accepted += 1;
                }
            }
        }
        for p in &pos {
            out.extend_from_slice(p);
        }
    }
    EnsembleChain {
        n_steps,
        n_walkers: nw,
        ndim,
        positions: out,
        accepted,
    }
}

/// Normalised autocorrelation function of `x` by FFT (zero-padded to avoid wrap-around).
pub fn autocorr_fft(x: &[f64]) -> Vec<f64> {
    let n = x.len();
    if n == 0 {
        return Vec::new();
    }
    let mean = x.iter().sum::<f64>() / n as f64;
    let m = (2 * n).next_power_of_two();
    let mut buf: Vec<Complex<f64>> = x
        .iter()
        .map(|v| Complex::new(v - mean, 0.0))
        .chain(std::iter::repeat(Complex::new(0.0, 0.0)))
        .take(m)
        .collect();
    let mut planner = FftPlanner::new();
    planner.plan_fft_forward(m).process(&mut buf);
    for c in buf.iter_mut() {
        *c = Complex::new(c.norm_sqr(), 0.0);
    }
    planner.plan_fft_inverse(m).process(&mut buf);
    let c0 = buf[0].re;
    if c0 <= 0.0 {
        let mut v = vec![0.0; n];
        v[0] = 1.0;
        return v;
    }
    buf[..n].iter().map(|c| c.re / c0).collect()
}

/// Reference O(n * max_lag) autocorrelation (for tests of the FFT version).
pub fn autocorr_direct(x: &[f64], max_lag: usize) -> Vec<f64> {
    let n = x.len();
    let mean = x.iter().sum::<f64>() / n as f64;
    let c = |t: usize| -> f64 { (0..n - t).map(|i| (x[i] - mean) * (x[i + t] - mean)).sum() };
    let c0 = c(0);
    (0..=max_lag.min(n - 1)).map(|t| c(t) / c0).collect()
}

/// Integrated autocorrelation time tau = 1 + 2 sum_{t=1}^{M} rho(t) with Sokal's automatic
/// window: the smallest M with M >= c tau(M) (c = 5).
pub fn integrated_time(rho: &[f64], c: f64) -> f64 {
    let mut tau = 1.0;
    for (m, r) in rho.iter().enumerate().skip(1) {
        tau += 2.0 * r;
        if m as f64 >= c * tau {
            return tau;
        }
    }
    tau
}

/// Autocorrelation time of one parameter of an ensemble: the walker-averaged autocorrelation
/// function (a lower-variance estimate than per-walker times) with the automatic window.
pub fn ensemble_tau(chain: &EnsembleChain, d: usize, from: usize) -> f64 {
    let n = chain.n_steps - from;
    let mut acc = vec![0.0; n];
    for w in 0..chain.n_walkers {
        let r = autocorr_fft(&chain.walker_series(w, d, from));
        for (a, v) in acc.iter_mut().zip(r) {
            *a += v;
        }
    }
    for a in acc.iter_mut() {
        *a /= chain.n_walkers as f64;
    }
    integrated_time(&acc, 5.0)
}

/// Gelman-Rubin potential scale reduction for several chains of equal length
/// (Gelman & Rubin 1992, Stat. Sci. 7, 457).
pub fn gelman_rubin(chains: &[Vec<f64>]) -> f64 {
    let m = chains.len() as f64;
    let n = chains.iter().map(|c| c.len()).min().unwrap_or(0) as f64;
    if m < 2.0 || n < 2.0 {
        return f64::NAN;
    }
    let means: Vec<f64> = chains.iter().map(|c| c.iter().sum::<f64>() / n).collect();
    let grand = means.iter().sum::<f64>() / m;
    let b = n / (m - 1.0) * means.iter().map(|x| (x - grand).powi(2)).sum::<f64>();
    let w = chains
        .iter()
        .zip(&means)
        .map(|(c, mu)| c.iter().map(|x| (x - mu).powi(2)).sum::<f64>() / (n - 1.0))
        .sum::<f64>()
        / m;
    if w <= 0.0 {
        return if b <= 0.0 { 1.0 } else { f64::INFINITY };
    }
    (((n - 1.0) / n * w + b / n) / w).sqrt()
}
