//! Jackknife regions: deterministic k-means on the unit sphere.
use kiddo::{ImmutableKdTree, SquaredEuclidean};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// Unit vector of (ra, dec) in degrees.
fn unit(ra_deg: f64, dec_deg: f64) -> [f64; 3] {
    let (ra, dec) = (ra_deg.to_radians(), dec_deg.to_radians());
    [dec.cos() * ra.cos(), dec.cos() * ra.sin(), dec.sin()]
}

fn d2(a: &[f64; 3], b: &[f64; 3]) -> f64 {
    (a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2)
}

/// Split sky positions into `k` compact regions (labels 0..k) by k-means on unit vectors
/// (chord distance is monotone in angle, so nearest-centre in 3-D is nearest on the sphere).
/// Seeding is k-means++ from a ChaCha8 stream of `seed`; Lloyd iterations run until no label
/// changes (at most 100). The result depends only on the inputs, not on the thread count.
pub fn kmeans_sky_regions(
    ra_deg: &[f64],
    dec_deg: &[f64],
    k: usize,
    seed: u64,
) -> crate::Result<Vec<u32>> {
    let n = ra_deg.len();
    if dec_deg.len() != n {
        return Err(crate::Error::input(format!(
            "regions: {} RA values but {} Dec values",
            n,
            dec_deg.len()
        )));
    }
    if k == 0 || k > n || k > u32::MAX as usize {
        return Err(crate::Error::input(format!(
            "regions: need 1 <= number of regions <= number of objects ({n}), got {k}"
        )));
    }
    let mut pts = Vec::with_capacity(n);
    for i in 0..n {
        let (ra, dec) = (ra_deg[i], dec_deg[i]);
        if !(ra.is_finite() && dec.is_finite() && (-90.0..=90.0).contains(&dec)) {
            return Err(crate::Error::input(format!(
                "regions: row {i}: invalid sky position RA = {ra}, Dec = {dec}"
            )));
        }
        pts.push(unit(ra, dec));
    }
    // k-means++ seeding
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut centres = vec![pts[rng.gen_range(0..n)]];
    let mut best: Vec<f64> = pts.iter().map(|p| d2(p, &centres[0])).collect();
    while centres.len() < k {
        let total: f64 = best.iter().sum();
        if total <= 0.0 {
            return Err(crate::Error::input(format!(
                "regions: fewer than {k} distinct sky positions"
            )));
        }
        let mut r = rng.gen::<f64>() * total;
        let mut pick = n - 1;
        for (i, &b) in best.iter().enumerate() {
            if r < b {
                pick = i;
                break;
            }
            r -= b;
        }
        if best[pick] <= 0.0 {
            // rounding landed on an existing centre: take the farthest point instead
            pick = (0..n)
                .max_by(|&x, &y| best[x].total_cmp(&best[y]))
                .unwrap_or(0);
        }
        let c = pts[pick];
        for (b, p) in best.iter_mut().zip(&pts) {
            *b = b.min(d2(p, &c));
        }
        centres.push(c);
    }
    let mut labels = vec![u32::MAX; n];
    for _ in 0..100 {
        let tree: ImmutableKdTree<f64, 3> = ImmutableKdTree::new_from_slice(&centres);
        let new: Vec<u32> = pts
            .par_iter()
            .map(|p| tree.nearest_one::<SquaredEuclidean>(p).item as u32)
            .collect();
        let changed = new != labels;
        labels = new;
        if !changed {
            break;
        }
        let mut sums = vec![[0.0f64; 3]; k];
        for (p, &l) in pts.iter().zip(&labels) {
            for d in 0..3 {
                sums[l as usize][d] += p[d];
            }
        }
        for (c, s) in centres.iter_mut().zip(&sums) {
            let norm = (s[0] * s[0] + s[1] * s[1] + s[2] * s[2]).sqrt();
            if norm > 0.0 {
                *c = [s[0] / norm, s[1] / norm, s[2] / norm];
            }
        }
    }
    Ok(labels)
}
