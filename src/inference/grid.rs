//! Grid evaluation of the posterior over the free parameters.
//!
//! A full product grid over the prior box would waste almost every point when the data are
//! informative, and an axis-aligned grid resolves a strongly degenerate posterior badly. So:
//! 1. zoom: coarse axis-aligned grids, each shrunk to mean +- 7 sigma of the previous one,
//!    until the box stops shrinking;
//! 2. whiten: grids in u with x = mean + L u (L the Cholesky factor of the previous grid's
//!    covariance), u in [-7, 7]^d. The Jacobian is constant, so weights stay exp(ln_post).
//!
//! Points are evaluated in parallel and collected in index order (deterministic).
use rayon::prelude::*;

/// Weighted points of a grid in free-parameter space.
#[derive(Debug, Clone)]
pub struct GridPosterior {
    pub points: Vec<Vec<f64>>,
    pub weights: Vec<f64>,
}

fn eval<F: Fn(&[f64]) -> f64 + Sync>(ln_post: &F, pts: Vec<Vec<f64>>) -> Option<GridPosterior> {
    let lp: Vec<f64> = pts.par_iter().map(|x| ln_post(x)).collect();
    let max = lp.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !max.is_finite() {
        return None;
    }
    let weights = lp.iter().map(|&l| (l - max).exp()).collect();
    Some(GridPosterior {
        points: pts,
        weights,
    })
}

/// Weighted mean and covariance.
pub fn moments(g: &GridPosterior) -> (Vec<f64>, Vec<Vec<f64>>) {
    let d = g.points[0].len();
    let wsum: f64 = g.weights.iter().sum();
    let mut mean = vec![0.0; d];
    for (p, w) in g.points.iter().zip(&g.weights) {
        for k in 0..d {
            mean[k] += w * p[k];
        }
    }
    mean.iter_mut().for_each(|m| *m /= wsum);
    let mut cov = vec![vec![0.0; d]; d];
    for (p, w) in g.points.iter().zip(&g.weights) {
        for i in 0..d {
            for j in 0..d {
                cov[i][j] += w * (p[i] - mean[i]) * (p[j] - mean[j]);
            }
        }
    }
    cov.iter_mut().flatten().for_each(|c| *c /= wsum);
    (mean, cov)
}

fn product_points(n: usize, d: usize, map: impl Fn(&[f64]) -> Vec<f64>) -> Vec<Vec<f64>> {
    let total = n.pow(d as u32);
    (0..total)
        .map(|mut idx| {
            let mut t = vec![0.0; d];
            for tk in t.iter_mut() {
                // Cell centres in [0, 1].
                *tk = ((idx % n) as f64 + 0.5) / n as f64;
                idx /= n;
            }
            map(&t)
        })
        .collect()
}

/// Cholesky factor of a symmetric matrix, with a tiny floor on the pivots.
fn cholesky(a: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let d = a.len();
    let mut l = vec![vec![0.0; d]; d];
    for i in 0..d {
        for j in 0..=i {
            let s: f64 = (0..j).map(|k| l[i][k] * l[j][k]).sum();
            if i == j {
                let v = a[i][i] - s;
                l[i][j] = v.max(1e-30 * a[i][i].abs().max(1e-300)).sqrt();
            } else {
                l[i][j] = (a[i][j] - s) / l[j][j];
            }
        }
    }
    l
}

/// Run the zoom and whitened passes inside `bounds` (per free parameter), ending with a grid of
/// `n_final` points per dimension. None when no point has a finite posterior.
pub fn grid_posterior<F: Fn(&[f64]) -> f64 + Sync>(
    ln_post: &F,
    bounds: &[(f64, f64)],
    n_final: usize,
) -> Option<GridPosterior> {
    let d = bounds.len();
    let n0 = match d {
        1 => 200,
        2 => 60,
        3 => 24,
        _ => 12,
    };
    let mut bx: Vec<(f64, f64)> = bounds.to_vec();
    let mut g = None;
    for _ in 0..12 {
        let b = bx.clone();
        let pts = product_points(n0, d, |t| {
            t.iter()
                .zip(&b)
                .map(|(u, (lo, hi))| lo + u * (hi - lo))
                .collect()
        });
        let cur = eval(ln_post, pts)?;
        let (mean, cov) = moments(&cur);
        g = Some(cur);
        let mut shrunk = false;
        let mut nb = Vec::with_capacity(d);
        for k in 0..d {
            let (lo, hi) = bx[k];
            let cell = (hi - lo) / n0 as f64;
            let half = (7.0 * cov[k][k].sqrt()).max(1.5 * cell);
            let (nlo, nhi) = (
                (mean[k] - half).max(bounds[k].0),
                (mean[k] + half).min(bounds[k].1),
            );
            if nhi - nlo < 0.6 * (hi - lo) {
                shrunk = true;
            }
            nb.push((nlo, nhi));
        }
        bx = nb;
        if !shrunk {
            break;
        }
    }
    let mut g = g?;
    for pass in 0..2 {
        let n = if pass == 0 { n0.min(n_final) } else { n_final };
        let (mean, cov) = moments(&g);
        let l = cholesky(&cov);
        let pts = product_points(n, d, |t| {
            let u: Vec<f64> = t.iter().map(|x| 14.0 * x - 7.0).collect();
            (0..d)
                .map(|i| mean[i] + (0..=i).map(|j| l[i][j] * u[j]).sum::<f64>())
                .collect()
        });
        g = eval(ln_post, pts)?;
    }
    Some(g)
}
