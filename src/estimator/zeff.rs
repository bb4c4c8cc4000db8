//! Effective redshift of a measurement.
use super::xi::check_shape;
use crate::pairs::{from_fixed, PairCounts};
use crate::{Error, Result};

/// Pair-weighted mean redshift of DD pairs, sum wz / sum wpairs over all bins (all mu) whose
/// separation centres lie in [s_lo, s_hi]. The sums are exact (fixed point) before division.
pub fn effective_redshift(dd: &PairCounts, s_lo: f64, s_hi: f64) -> Result<f64> {
    check_shape(dd, "DD")?;
    if !(s_lo.is_finite() && s_hi.is_finite() && s_hi >= s_lo) {
        return Err(Error::input(format!(
            "effective redshift: invalid separation range [{s_lo}, {s_hi}]"
        )));
    }
    let n_mu = dd.binning.n_mu;
    let (mut wz, mut w) = (0i128, 0i128);
    for (is, e) in dd.binning.s_edges.windows(2).enumerate() {
        let c = 0.5 * (e[0] + e[1]);
        if c >= s_lo && c <= s_hi {
            for b in is * n_mu..(is + 1) * n_mu {
                wz += dd.wz[b];
                w += dd.wpairs[b];
            }
        }
    }
    if w <= 0 {
        return Err(Error::input(format!(
            "effective redshift: no weighted DD pairs in bins with centres in [{s_lo}, {s_hi}]"
        )));
    }
    Ok(from_fixed(wz) / from_fixed(w))
}
