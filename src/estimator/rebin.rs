//! Rebinning pair counts into coarser bins. Always sum counts, never average xi: the estimator
//! of a wide bin is the estimator of its summed counts.
use super::xi::check_shape;
use crate::pairs::{Binning, PairCounts};
use crate::{Error, Result};

/// Sum fine bins into coarse ones: fine s bin `is` goes to `s_map[is]` (or is dropped when
/// None), fine mu bin `imu` goes to `imu / mu_group`.
fn regroup(
    c: &PairCounts,
    coarse: Binning,
    s_map: &[Option<usize>],
    mu_group: usize,
) -> PairCounts {
    let fine_mu = c.binning.n_mu;
    let nbf = c.binning.n_bins();
    let nbc = coarse.n_bins();
    let cmu = coarse.n_mu;
    let mut out = PairCounts::zeros(coarse, c.n_regions);
    for (is, target) in s_map.iter().enumerate() {
        let Some(js) = *target else { continue };
        for imu in 0..fine_mu {
            let bf = is * fine_mu + imu;
            let bc = js * cmu + imu / mu_group;
            out.npairs[bc] += c.npairs[bf];
            out.wpairs[bc] += c.wpairs[bf];
            out.ws[bc] += c.ws[bf];
            out.wz[bc] += c.wz[bf];
            for k in 0..c.n_regions {
                out.region_both[k * nbc + bc] += c.region_both[k * nbf + bf];
                out.region_one[k * nbc + bc] += c.region_one[k * nbf + bf];
            }
        }
    }
    out
}

/// Merge groups of `g` adjacent s bins; the number of s bins must be a multiple of g.
pub fn rebin_s_groups(c: &PairCounts, g: usize) -> Result<PairCounts> {
    check_shape(c, "rebin")?;
    let n_s = c.binning.n_s();
    if g == 0 || !n_s.is_multiple_of(g) {
        return Err(Error::input(format!(
            "rebin: group size {g} must be >= 1 and divide the {n_s} separation bins"
        )));
    }
    let edges: Vec<f64> = c.binning.s_edges.iter().step_by(g).copied().collect();
    let coarse = Binning::new(edges, c.binning.n_mu)?;
    let map: Vec<Option<usize>> = (0..n_s).map(|i| Some(i / g)).collect();
    Ok(regroup(c, coarse, &map, 1))
}

/// Rebin to separation edges that must be a subset of the fine edges (exactly equal values);
/// fine bins outside [first, last] coarse edge are dropped.
pub fn rebin_s_edges(c: &PairCounts, edges: &[f64]) -> Result<PairCounts> {
    check_shape(c, "rebin")?;
    let coarse = Binning::new(edges.to_vec(), c.binning.n_mu)?;
    let fine = &c.binning.s_edges;
    let mut pos = Vec::with_capacity(edges.len());
    for (i, &e) in edges.iter().enumerate() {
        match fine.iter().position(|&f| f == e) {
            Some(p) => pos.push(p),
            None => {
                return Err(Error::input(format!(
                    "rebin: edge {i} ({e}) is not one of the fine separation edges"
                )))
            }
        }
    }
    let mut map = vec![None; c.binning.n_s()];
    for (j, w) in pos.windows(2).enumerate() {
        for slot in &mut map[w[0]..w[1]] {
            *slot = Some(j);
        }
    }
    Ok(regroup(c, coarse, &map, 1))
}

/// Merge groups of `g` adjacent mu bins; n_mu must be a multiple of g.
pub fn rebin_mu_groups(c: &PairCounts, g: usize) -> Result<PairCounts> {
    check_shape(c, "rebin")?;
    let n_mu = c.binning.n_mu;
    if g == 0 || !n_mu.is_multiple_of(g) {
        return Err(Error::input(format!(
            "rebin: mu group size {g} must be >= 1 and divide the {n_mu} mu bins"
        )));
    }
    let coarse = Binning::new(c.binning.s_edges.clone(), n_mu / g)?;
    let map: Vec<Option<usize>> = (0..c.binning.n_s()).map(Some).collect();
    Ok(regroup(c, coarse, &map, g))
}

/// Sum all mu bins: counts for the isotropic xi(s).
pub fn collapse_mu(c: &PairCounts) -> Result<PairCounts> {
    rebin_mu_groups(c, c.binning.n_mu)
}
