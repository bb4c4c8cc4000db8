//! Landy & Szalay (1993, ApJ 412, 64) estimator and the natural estimator with analytic randoms.
//!
//! Counts in (s, mu) bins give xi(s, mu); for xi(s) collapse the mu bins of the counts first
//! (`rebin::collapse_mu`), never average xi.
use super::norm::PairNorm;
use crate::pairs::{from_fixed, Binning, PairCounts};
use crate::{Error, Result};
use serde::{Deserialize, Serialize};

/// Normalisations of the three pair counts of the Landy-Szalay estimator.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LsNorms {
    pub dd: PairNorm,
    pub dr: PairNorm,
    pub rr: PairNorm,
}

/// xi per bin (index `is * n_mu + imu`), with the bins whose random (or analytic) pair count is
/// zero listed in `empty_bins`; those hold NaN.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct XiResult {
    pub binning: Binning,
    pub xi: Vec<f64>,
    pub empty_bins: Vec<usize>,
}

/// Landy-Szalay on plain normalised inputs: xi = (DD/n_DD - 2 DR/n_DR + RR/n_RR) / (RR/n_RR);
/// NaN where RR = 0. The reference formula used by all count-based paths.
pub fn landy_szalay_values(
    dd: &[f64],
    dr: &[f64],
    rr: &[f64],
    n_dd: f64,
    n_dr: f64,
    n_rr: f64,
) -> Vec<f64> {
    dd.iter()
        .zip(dr)
        .zip(rr)
        .map(|((&d, &x), &r)| {
            if r == 0.0 {
                f64::NAN
            } else {
                let rn = r / n_rr;
                (d / n_dd - 2.0 * x / n_dr + rn) / rn
            }
        })
        .collect()
}

/// Check that a histogram's arrays match its binning and region count.
pub(crate) fn check_shape(c: &PairCounts, what: &str) -> Result<()> {
    let nb = c.binning.n_bins();
    if c.binning.s_edges.len() < 2 || c.binning.n_mu == 0 {
        return Err(Error::input(format!("{what} counts: empty binning")));
    }
    for (name, len) in [
        ("npairs", c.npairs.len()),
        ("wpairs", c.wpairs.len()),
        ("ws", c.ws.len()),
        ("wz", c.wz.len()),
    ] {
        if len != nb {
            return Err(Error::input(format!(
                "{what} counts: {name} has {len} entries, the binning has {nb} bins"
            )));
        }
    }
    for (name, len) in [
        ("region_both", c.region_both.len()),
        ("region_one", c.region_one.len()),
    ] {
        if len != nb * c.n_regions {
            return Err(Error::input(format!(
                "{what} counts: {name} has {len} entries, expected {} ({} regions x {nb} bins)",
                nb * c.n_regions,
                c.n_regions
            )));
        }
    }
    Ok(())
}

fn check_norm(n: &PairNorm, n_regions: usize, what: &str) -> Result<()> {
    if !(n.total.is_finite() && n.total > 0.0) {
        return Err(Error::input(format!(
            "{what} normalisation must be finite and positive, got {}",
            n.total
        )));
    }
    if n.without_region.len() != n_regions {
        return Err(Error::input(format!(
            "{what} normalisation has {} delete-one values, the counts have {n_regions} regions",
            n.without_region.len()
        )));
    }
    for (k, &v) in n.without_region.iter().enumerate() {
        if !(v.is_finite() && v > 0.0) {
            return Err(Error::input(format!(
                "{what} normalisation with region {k} deleted must be finite and positive, got {v}"
            )));
        }
    }
    Ok(())
}

fn check_ls(dd: &PairCounts, dr: &PairCounts, rr: &PairCounts, n: &LsNorms) -> Result<()> {
    check_shape(dd, "DD")?;
    check_shape(dr, "DR")?;
    check_shape(rr, "RR")?;
    for (c, what) in [(dr, "DR"), (rr, "RR")] {
        if c.binning != dd.binning {
            return Err(Error::input(format!(
                "{what} counts use a different binning from DD counts"
            )));
        }
        if c.n_regions != dd.n_regions {
            return Err(Error::input(format!(
                "{what} counts have {} jackknife regions, DD counts have {}",
                c.n_regions, dd.n_regions
            )));
        }
    }
    check_norm(&n.dd, dd.n_regions, "DD")?;
    check_norm(&n.dr, dd.n_regions, "DR")?;
    check_norm(&n.rr, dd.n_regions, "RR")?;
    Ok(())
}

fn empty_bins(v: &[f64]) -> Vec<usize> {
    v.iter()
        .enumerate()
        .filter(|(_, x)| x.is_nan())
        .map(|(i, _)| i)
        .collect()
}

/// Landy-Szalay xi from weighted DD, DR and RR counts in the same binning.
pub fn landy_szalay(
    dd: &PairCounts,
    dr: &PairCounts,
    rr: &PairCounts,
    norms: &LsNorms,
) -> Result<XiResult> {
    check_ls(dd, dr, rr, norms)?;
    let xi = landy_szalay_values(
        &dd.wpairs_f64(),
        &dr.wpairs_f64(),
        &rr.wpairs_f64(),
        norms.dd.total,
        norms.dr.total,
        norms.rr.total,
    );
    Ok(XiResult {
        binning: dd.binning.clone(),
        empty_bins: empty_bins(&xi),
        xi,
    })
}

/// Delete-one jackknife estimates: entry k is xi computed from the counts with every pair
/// touching region k removed (total - both_k - one_k) and the delete-one normalisations.
pub fn landy_szalay_jackknife(
    dd: &PairCounts,
    dr: &PairCounts,
    rr: &PairCounts,
    norms: &LsNorms,
) -> Result<Vec<Vec<f64>>> {
    check_ls(dd, dr, rr, norms)?;
    Ok((0..dd.n_regions)
        .map(|k| {
            landy_szalay_values(
                &dd.wpairs_without_region(k),
                &dr.wpairs_without_region(k),
                &rr.wpairs_without_region(k),
                norms.dd.without_region[k],
                norms.dr.without_region[k],
                norms.rr.without_region[k],
            )
        })
        .collect())
}

/// Normalised pair count expected for uniform points in a periodic cube of side `box_size`
/// (minimum-image separations): the shell volume fraction (4 pi / 3)(hi^3 - lo^3) / L^3,
/// shared equally among the mu bins (isotropy). Serves as analytic RR, and as analytic DR (D1R
/// or D2R) for a cross-correlation, where Landy-Szalay reduces to the natural estimator.
pub fn analytic_pair_fraction(binning: &Binning, box_size: f64) -> Result<Vec<f64>> {
    if !(box_size.is_finite() && box_size > 0.0) {
        return Err(Error::input(format!(
            "box size must be finite and positive, got {box_size}"
        )));
    }
    if binning.s_max() > 0.5 * box_size {
        return Err(Error::input(format!(
            "analytic randoms need s_max <= box size / 2 (s_max = {}, box size = {box_size})",
            binning.s_max()
        )));
    }
    let v = box_size.powi(3);
    let n_mu = binning.n_mu;
    let mut out = Vec::with_capacity(binning.n_bins());
    for w in binning.s_edges.windows(2) {
        let f = 4.0 / 3.0 * std::f64::consts::PI * (w[1].powi(3) - w[0].powi(3)) / v / n_mu as f64;
        out.extend(std::iter::repeat_n(f, n_mu));
    }
    Ok(out)
}

/// Natural estimator in a periodic box with analytic randoms: xi = (DD / n_DD) / RR_analytic - 1.
/// Pass `auto_norm` of the catalogue for an auto-correlation, or `cross_norm` of the two
/// catalogues (and their cross counts) for a cross-correlation.
pub fn natural_box(dd: &PairCounts, n_dd: &PairNorm, box_size: f64) -> Result<XiResult> {
    check_shape(dd, "DD")?;
    check_norm(n_dd, n_dd.without_region.len(), "DD")?;
    let rr = analytic_pair_fraction(&dd.binning, box_size)?;
    let xi: Vec<f64> = dd
        .wpairs
        .iter()
        .zip(&rr)
        .map(|(&d, &r)| {
            if r == 0.0 {
                f64::NAN
            } else {
                from_fixed(d) / n_dd.total / r - 1.0
            }
        })
        .collect();
    Ok(XiResult {
        binning: dd.binning.clone(),
        empty_bins: empty_bins(&xi),
        xi,
    })
}
