//! Covariance matrices (delete-one jackknife, mocks) and the inverse of a positive definite
//! matrix. Matrices are `ndarray::Array2<f64>` in standard (row-major) layout.
use crate::{Error, Result};
use ndarray::Array2;

fn check_samples(samples: &[Vec<f64>], what: &str, min: usize) -> Result<usize> {
    if samples.len() < min {
        return Err(Error::input(format!(
            "{what}: need at least {min} samples, got {}",
            samples.len()
        )));
    }
    let p = samples[0].len();
    if p == 0 {
        return Err(Error::input(format!("{what}: samples are empty vectors")));
    }
    for (k, s) in samples.iter().enumerate() {
        if s.len() != p {
            return Err(Error::input(format!(
                "{what}: sample {k} has {} values, sample 0 has {p}",
                s.len()
            )));
        }
        if let Some(j) = s.iter().position(|v| !v.is_finite()) {
            return Err(Error::input(format!(
                "{what}: sample {k} has a non-finite value at index {j} ({}); \
                 drop empty bins before estimating a covariance",
                s[j]
            )));
        }
    }
    Ok(p)
}

/// sum_k (x_k - mean)(x_k - mean)^T, summed in sample order (deterministic).
fn scatter(samples: &[Vec<f64>], p: usize) -> Array2<f64> {
    let n = samples.len() as f64;
    let mut mean = vec![0.0; p];
    for s in samples {
        for (m, v) in mean.iter_mut().zip(s) {
            *m += v;
        }
    }
    mean.iter_mut().for_each(|m| *m /= n);
    let mut c = Array2::<f64>::zeros((p, p));
    for s in samples {
        let d: Vec<f64> = s.iter().zip(&mean).map(|(v, m)| v - m).collect();
        for i in 0..p {
            for j in 0..p {
                c[[i, j]] += d[i] * d[j];
            }
        }
    }
    c
}

/// Delete-one jackknife covariance C = (N-1)/N sum_k (x_k - mean)(x_k - mean)^T from the N
/// delete-one estimates x_k (for example from `landy_szalay_jackknife`).
pub fn jackknife_covariance(samples: &[Vec<f64>]) -> Result<Array2<f64>> {
    let p = check_samples(samples, "jackknife covariance", 2)?;
    let n = samples.len() as f64;
    Ok(scatter(samples, p) * ((n - 1.0) / n))
}

/// Unbiased sample covariance 1/(N-1) sum_k (x_k - mean)(x_k - mean)^T of mock vectors.
pub fn sample_covariance(samples: &[Vec<f64>]) -> Result<Array2<f64>> {
    let p = check_samples(samples, "mock covariance", 2)?;
    let n = samples.len() as f64;
    Ok(scatter(samples, p) / (n - 1.0))
}

/// Hartlap et al. 2007 (A&A 464, 399, eq. 17) factor (N - p - 2)/(N - 1) that debiases the
/// inverse of a covariance estimated from N mocks with p data points; needs N > p + 2.
pub fn hartlap_factor(n_mocks: usize, p: usize) -> Result<f64> {
    if n_mocks <= p + 2 {
        return Err(Error::input(format!(
            "Hartlap correction needs more mocks than data points + 2 ({n_mocks} mocks, {p} points)"
        )));
    }
    Ok((n_mocks - p - 2) as f64 / (n_mocks - 1) as f64)
}

/// Precision matrix from mocks: Hartlap factor times the inverse sample covariance.
pub fn mock_precision(samples: &[Vec<f64>]) -> Result<Array2<f64>> {
    let c = sample_covariance(samples)?;
    let h = hartlap_factor(samples.len(), c.nrows())?;
    Ok(inverse_spd(&c)? * h)
}

/// Lower-triangular Cholesky factor L with A = L L^T. Errors when A is not square, not
/// symmetric (relative 1e-10) or not positive definite.
pub fn cholesky(a: &Array2<f64>) -> Result<Array2<f64>> {
    let n = a.nrows();
    if a.ncols() != n || n == 0 {
        return Err(Error::input(format!(
            "matrix must be square and non-empty, got {}x{}",
            a.nrows(),
            a.ncols()
        )));
    }
    for i in 0..n {
        for j in 0..i {
            let (x, y) = (a[[i, j]], a[[j, i]]);
            if !(x.is_finite() && y.is_finite())
                || (x - y).abs() > 1e-10 * (a[[i, i]].abs() * a[[j, j]].abs()).sqrt()
            {
                return Err(Error::input(format!(
                    "matrix is not symmetric or not finite at ({i}, {j}): {x} vs {y}"
                )));
            }
        }
    }
    let mut l = Array2::<f64>::zeros((n, n));
    for j in 0..n {
        let mut d = a[[j, j]];
        for k in 0..j {
            d -= l[[j, k]] * l[[j, k]];
        }
        if !(d > 0.0 && d.is_finite()) {
            return Err(Error::input(format!(
                "covariance matrix is not positive definite (pivot {j} = {d:e}); use fewer bins \
                 or more jackknife regions / mocks, and drop empty bins"
            )));
        }
        let djj = d.sqrt();
        l[[j, j]] = djj;
        for i in (j + 1)..n {
            let mut s = a[[i, j]];
            for k in 0..j {
                s -= l[[i, k]] * l[[j, k]];
            }
            l[[i, j]] = s / djj;
        }
    }
    Ok(l)
}

/// Inverse of a symmetric positive definite matrix through its Cholesky factor; the result is
/// symmetrised exactly.
pub fn inverse_spd(a: &Array2<f64>) -> Result<Array2<f64>> {
    let l = cholesky(a)?;
    let n = l.nrows();
    // Solve L Y = I column by column, then L^T X = Y.
    let mut inv = Array2::<f64>::zeros((n, n));
    for c in 0..n {
        let mut y = vec![0.0; n];
        for i in 0..n {
            let mut s = if i == c { 1.0 } else { 0.0 };
            for k in 0..i {
                s -= l[[i, k]] * y[k];
            }
            y[i] = s / l[[i, i]];
        }
        let mut x = vec![0.0; n];
        for i in (0..n).rev() {
            let mut s = y[i];
            for k in (i + 1)..n {
                s -= l[[k, i]] * x[k];
            }
            x[i] = s / l[[i, i]];
        }
        for i in 0..n {
            inv[[i, c]] = x[i];
        }
    }
    for i in 0..n {
        for j in 0..i {
            let m = 0.5 * (inv[[i, j]] + inv[[j, i]]);
            inv[[i, j]] = m;
            inv[[j, i]] = m;
        }
    }
    Ok(inv)
}
