//! Three-dimensional real FFT on an n^3 grid built from one-dimensional passes.
//!
//! Layout: the real grid is row-major `[i][j][l]` (x, y, z; z fastest). The half-complex
//! spectrum keeps `l` in `0..=n/2` (`nh = n/2 + 1`) and is stored `[i][j][l]` as well, so the
//! mode (i, j, l) has wavenumber indices (fold(i), fold(j), l). Passes: real-to-complex along
//! z on contiguous rows, then complex FFTs along y (per x-plane, after a local transpose) and
//! along x (through a transposed work buffer). Every 1-D transform is independent, so the result
//! does not depend on how rayon schedules the work.
//!
//! Forward is `F(k) = sum_x f(x) exp(-i k.x)`; inverse is unnormalised,
//! `f(x) = sum_k F(k) exp(+i k.x)` (divide by n^3 yourself).
use crate::{Error, Result};
use rayon::prelude::*;
use realfft::num_complex::Complex;
use realfft::{ComplexToReal, RealFftPlanner, RealToComplex};
use rustfft::{Fft, FftPlanner};
use std::sync::Arc;

pub type C64 = Complex<f64>;

/// Plans for an n^3 grid (n even).
pub struct Fft3 {
    n: usize,
    r2c: Arc<dyn RealToComplex<f64>>,
    c2r: Arc<dyn ComplexToReal<f64>>,
    fwd: Arc<dyn Fft<f64>>,
    inv: Arc<dyn Fft<f64>>,
}

impl Fft3 {
    pub fn new(n: usize) -> Result<Self> {
        if n < 2 || !n.is_multiple_of(2) {
            return Err(Error::input(format!(
                "FFT grid size n_grid = {n} must be even and at least 2"
            )));
        }
        let mut rp = RealFftPlanner::<f64>::new();
        let mut cp = FftPlanner::<f64>::new();
        Ok(Fft3 {
            n,
            r2c: rp.plan_fft_forward(n),
            c2r: rp.plan_fft_inverse(n),
            fwd: cp.plan_fft_forward(n),
            inv: cp.plan_fft_inverse(n),
        })
    }

    /// Length of the last (half) axis of the spectrum.
    pub fn nh(&self) -> usize {
        self.n / 2 + 1
    }

    /// Forward transform of a real grid (length n^3) into the half spectrum (n*n*nh).
    pub fn forward(&self, real: &[f64]) -> Result<Vec<C64>> {
        let (n, nh) = (self.n, self.nh());
        assert_eq!(real.len(), n * n * n, "real grid has the wrong length");
        let mut spec = vec![C64::new(0.0, 0.0); n * n * nh];
        let r2c = &self.r2c;
        spec.par_chunks_mut(nh)
            .zip(real.par_chunks(n))
            .try_for_each_init(
                || (r2c.make_input_vec(), r2c.make_scratch_vec()),
                |(buf, scratch), (out, row)| {
                    buf.copy_from_slice(row);
                    r2c.process_with_scratch(buf, out, scratch)
                        .map_err(|e| Error::other(format!("real FFT failed: {e}")))
                },
            )?;
        self.complex_axes(&mut spec, &self.fwd, true);
        Ok(spec)
    }

    /// Unnormalised inverse transform of a Hermitian half spectrum into a real grid.
    /// The spectrum is consumed (used as work space).
    pub fn inverse(&self, mut spec: Vec<C64>) -> Result<Vec<f64>> {
        let (n, nh) = (self.n, self.nh());
        assert_eq!(spec.len(), n * n * nh, "spectrum has the wrong length");
        self.complex_axes(&mut spec, &self.inv, false);
        let mut real = vec![0.0; n * n * n];
        let c2r = &self.c2r;
        real.par_chunks_mut(n)
            .zip(spec.par_chunks_mut(nh))
            .try_for_each_init(
                || c2r.make_scratch_vec(),
                |scratch, (out, row)| {
                    // After the y and x passes of a real field the l = 0 and l = n/2 lines are
                    // real up to rounding; drop the rounding residue the c2r pass rejects.
                    row[0].im = 0.0;
                    row[nh - 1].im = 0.0;
                    c2r.process_with_scratch(row, out, scratch)
                        .map_err(|e| Error::other(format!("inverse real FFT failed: {e}")))
                },
            )?;
        Ok(real)
    }

    /// Complex passes along y and x. Forward order: y then x; inverse: x then y (either order
    /// is mathematically the same; the fixed order keeps results reproducible).
    fn complex_axes(&self, spec: &mut [C64], plan: &Arc<dyn Fft<f64>>, forward: bool) {
        if forward {
            self.pass_y(spec, plan);
            self.pass_x(spec, plan);
        } else {
            self.pass_x(spec, plan);
            self.pass_y(spec, plan);
        }
    }

    fn pass_y(&self, spec: &mut [C64], plan: &Arc<dyn Fft<f64>>) {
        let (n, nh) = (self.n, self.nh());
        let zero = C64::new(0.0, 0.0);
        spec.par_chunks_mut(n * nh).for_each_init(
            || {
                (
                    vec![zero; n * nh],
                    vec![zero; plan.get_inplace_scratch_len()],
                )
            },
            |(t, scratch), plane| {
                // plane is [j][l]; transpose to [l][j] so each y-line is contiguous.
                for j in 0..n {
                    for l in 0..nh {
                        t[l * n + j] = plane[j * nh + l];
                    }
                }
                plan.process_with_scratch(t, scratch);
                for j in 0..n {
                    for l in 0..nh {
                        plane[j * nh + l] = t[l * n + j];
                    }
                }
            },
        );
    }

    fn pass_x(&self, spec: &mut [C64], plan: &Arc<dyn Fft<f64>>) {
        let (n, nh) = (self.n, self.nh());
        let zero = C64::new(0.0, 0.0);
        // Work buffer laid out [j][l][i]: x-lines contiguous.
        let mut work = vec![zero; n * n * nh];
        {
            let src: &[C64] = spec;
            work.par_chunks_mut(nh * n).enumerate().for_each_init(
                || vec![zero; plan.get_inplace_scratch_len()],
                |scratch, (j, block)| {
                    for i in 0..n {
                        let row = &src[(i * n + j) * nh..(i * n + j + 1) * nh];
                        for (l, v) in row.iter().enumerate() {
                            block[l * n + i] = *v;
                        }
                    }
                    plan.process_with_scratch(block, scratch);
                },
            );
        }
        let work = &work;
        spec.par_chunks_mut(n * nh)
            .enumerate()
            .for_each(|(i, plane)| {
                for j in 0..n {
                    let block = &work[j * nh * n..(j + 1) * nh * n];
                    for l in 0..nh {
                        plane[j * nh + l] = block[l * n + i];
                    }
                }
            });
    }
}

/// Signed frequency index of FFT bin `i` on an n-point axis.
#[inline]
pub fn fold(i: usize, n: usize) -> i64 {
    if i <= n / 2 {
        i as i64
    } else {
        i as i64 - n as i64
    }
}

/// How many times the half-spectrum entry with last index `l` counts in a full-grid sum
/// (1 on the self-conjugate planes l = 0 and l = n/2, else 2).
#[inline]
pub fn half_weight(l: usize, n: usize) -> f64 {
    if l == 0 || l == n / 2 {
        1.0
    } else {
        2.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Direct O(N^2) 3-D DFT (reference implementation; definition of the DFT, no source).
    fn naive_dft(real: &[f64], n: usize) -> Vec<C64> {
        let nh = n / 2 + 1;
        let mut out = vec![C64::new(0.0, 0.0); n * n * nh];
        let tau = 2.0 * std::f64::consts::PI / n as f64;
        for a in 0..n {
            for b in 0..n {
                for c in 0..nh {
                    let mut s = C64::new(0.0, 0.0);
                    for i in 0..n {
                        for j in 0..n {
                            for l in 0..n {
                                let ph = -tau * ((a * i + b * j + c * l) % n) as f64;
                                s += real[(i * n + j) * n + l] * C64::new(ph.cos(), ph.sin());
                            }
                        }
                    }
                    out[(a * n + b) * nh + c] = s;
                }
            }
        }
        out
    }

    fn test_grid(n: usize) -> Vec<f64> {
        (0..n * n * n)
            .map(|q| ((q as f64 * 0.7548776662).fract() - 0.5) * (1.0 + (q % 5) as f64))
            .collect()
    }

    #[test]
    fn forward_matches_direct_dft() {
        for n in [4usize, 6, 8] {
            let real = test_grid(n);
            let fft = Fft3::new(n).unwrap();
            let got = fft.forward(&real).unwrap();
            let want = naive_dft(&real, n);
            for (g, w) in got.iter().zip(&want) {
                assert!(
                    (g - w).norm() < 1e-10 * (1.0 + w.norm()),
                    "n={n}: {g} vs {w}"
                );
            }
        }
    }

    #[test]
    fn round_trip_recovers_input() {
        let n = 10;
        let real = test_grid(n);
        let fft = Fft3::new(n).unwrap();
        let back = fft.inverse(fft.forward(&real).unwrap()).unwrap();
        let norm = (n * n * n) as f64;
        for (a, b) in real.iter().zip(&back) {
            assert!((a - b / norm).abs() < 1e-12);
        }
    }

    #[test]
    fn odd_grid_is_rejected() {
        assert!(matches!(Fft3::new(7), Err(Error::Input(_))));
    }
}
