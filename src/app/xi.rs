//! `ringscale xi`: counts folder -> xi(s) (Landy-Szalay, or the natural estimator with analytic
//! RR in a periodic box), xi(s, mu) and multipoles with mu bins, and a covariance (delete-one
//! jackknife from the per-region sums, or the sample covariance of mock xi files).
use super::count::{read_folder, CountMeta, CountState};
use crate::estimator::{
    collapse_mu, jackknife_covariance, landy_szalay, landy_szalay_jackknife, multipoles,
    natural_box, rebin_s_groups, sample_covariance, LsNorms,
};
use crate::pairs::PairCounts;
use crate::report::{ecsv, json, npy};
use crate::{Error, Result};
use serde::Serialize;
use std::path::{Path, PathBuf};

#[derive(Debug, Clone)]
pub struct XiOptions {
    pub counts: PathBuf,
    pub out: PathBuf,
    /// Merge groups of this many adjacent s bins (from counts) before estimating.
    pub rebin: usize,
    /// xi.ecsv files of mocks for a sample covariance instead of the jackknife.
    pub mock_xi: Vec<PathBuf>,
}

/// What `xi` produced, for the caller's summary.
#[derive(Debug, Serialize)]
pub struct XiSummary {
    pub estimator: String,
    pub n_s: usize,
    pub n_mu: usize,
    pub covariance: String,
    pub n_samples: usize,
    pub empty_bins: Vec<usize>,
}

fn find<'a>(states: &'a [CountState], p: &str) -> Option<&'a CountState> {
    states.iter().find(|s| s.pairing == p)
}

fn check_same_run<'a>(states: &'a [CountState], dir: &Path) -> Result<&'a CountMeta> {
    let m = &states[0].meta;
    if let Some((k, n)) = m.shard {
        return Err(Error::input(format!(
            "{}: holds shard {k}/{n} only; merge all shards first (ringscale merge)",
            dir.display()
        )));
    }
    for s in &states[1..] {
        if s.meta.binning != m.binning
            || s.meta.fiducial != m.fiducial
            || s.meta.n_regions != m.n_regions
        {
            return Err(Error::input(format!(
                "{}: {} and {} counts come from different binning, fiducial or regions",
                dir.display(),
                states[0].pairing,
                s.pairing
            )));
        }
        if s.meta != *m {
            return Err(Error::input(format!(
                "{}: {} and {} counts come from different runs (inputs differ)",
                dir.display(),
                states[0].pairing,
                s.pairing
            )));
        }
    }
    Ok(m)
}

/// xi for one set of (possibly rebinned) counts; also the jackknife samples when regions exist.
fn estimate(
    dd: &PairCounts,
    dr: Option<&PairCounts>,
    rr: Option<&PairCounts>,
    norms: Option<&LsNorms>,
    dd_norm: &crate::estimator::PairNorm,
    box_size: Option<f64>,
) -> Result<(Vec<f64>, Vec<Vec<f64>>, String)> {
    match (dr, rr, norms) {
        (Some(dr), Some(rr), Some(n)) => {
            let xi = landy_szalay(dd, dr, rr, n)?.xi;
            let jk = if dd.n_regions >= 2 {
                landy_szalay_jackknife(dd, dr, rr, n)?
            } else {
                vec![]
            };
            Ok((xi, jk, "landy-szalay".into()))
        }
        _ => {
            let l = box_size.ok_or_else(|| {
                Error::input(
                    "counts have no randoms (dr/rr) and are not a periodic box: cannot estimate xi",
                )
            })?;
            Ok((
                natural_box(dd, dd_norm, l)?.xi,
                vec![],
                "natural, analytic RR".into(),
            ))
        }
    }
}

pub fn run(opt: &XiOptions) -> Result<XiSummary> {
    let states = read_folder(&opt.counts)?;
    let meta = check_same_run(&states, &opt.counts)?.clone();
    let g = opt.rebin.max(1);
    let prep = |c: &PairCounts| {
        if g > 1 {
            rebin_s_groups(c, g)
        } else {
            Ok(c.clone())
        }
    };
    let dd_st = find(&states, "dd")
        .ok_or_else(|| Error::input(format!("{}: no dd counts", opt.counts.display())))?;
    let dd = prep(&dd_st.counts)?;
    let dr = find(&states, "dr").map(|s| prep(&s.counts)).transpose()?;
    let rr = find(&states, "rr").map(|s| prep(&s.counts)).transpose()?;
    let norms = match (find(&states, "dr"), find(&states, "rr")) {
        (Some(a), Some(b)) => Some(LsNorms {
            dd: dd_st.norm.clone(),
            dr: a.norm.clone(),
            rr: b.norm.clone(),
        }),
        _ => None,
    };
    let n_mu = dd.binning.n_mu;
    let (dd_s, dr_s, rr_s) = if n_mu > 1 {
        (
            collapse_mu(&dd)?,
            dr.as_ref().map(collapse_mu).transpose()?,
            rr.as_ref().map(collapse_mu).transpose()?,
        )
    } else {
        (dd.clone(), dr.clone(), rr.clone())
    };
    let (xi, jk, estimator) = estimate(
        &dd_s,
        dr_s.as_ref(),
        rr_s.as_ref(),
        norms.as_ref(),
        &dd_st.norm,
        meta.box_size,
    )?;

    // Covariance.
    let (cov, cov_source, n_samples) = if !opt.mock_xi.is_empty() {
        let mut samples = Vec::new();
        for p in &opt.mock_xi {
            let t = ecsv::read_ecsv(p)?;
            let v = t
                .f64_column("xi")
                .map_err(|e| Error::input(format!("{}: {e}", p.display())))?
                .to_vec();
            if v.len() != xi.len() {
                return Err(Error::input(format!(
                    "{}: mock xi has {} bins but the data have {}",
                    p.display(),
                    v.len(),
                    xi.len()
                )));
            }
            samples.push(v);
        }
        (
            Some(sample_covariance(&samples)?),
            "mocks".to_string(),
            samples.len(),
        )
    } else if jk.len() >= 2 {
        // Bins without pairs in some delete-one sample cannot enter a covariance.
        if jk.iter().any(|s| s.iter().any(|v| !v.is_finite())) {
            return Err(Error::input(
                "jackknife: some bins are empty in a delete-one sample; use coarser bins (--rebin) or fewer regions",
            ));
        }
        (
            Some(jackknife_covariance(&jk)?),
            "jackknife".to_string(),
            jk.len(),
        )
    } else {
        (None, "none".to_string(), 0)
    };

    super::count::ensure_writable(&opt.out)?;
    let b = &dd_s.binning;
    let n_s = b.n_s();
    let err: Vec<f64> = match &cov {
        Some(c) => (0..n_s).map(|i| c[[i, i]].sqrt()).collect(),
        None => vec![f64::NAN; n_s],
    };
    let meta_json = serde_json::json!({
        "estimator": estimator,
        "covariance": cov_source,
        "n_covariance_samples": n_samples,
        "rebin": g,
        "provenance": meta,
    });
    let cols = vec![
        ecsv::Column::f64("s_lo", b.s_edges[..n_s].to_vec()),
        ecsv::Column::f64("s_hi", b.s_edges[1..].to_vec()),
        ecsv::Column::f64("s_mean", dd_s.s_mean()),
        ecsv::Column::f64("xi", xi.clone()),
        ecsv::Column::f64("xi_err", err),
        ecsv::Column::f64("dd_wpairs", dd_s.wpairs_f64()),
        ecsv::Column::f64("z_mean", dd_s.z_mean()),
    ];
    ecsv::write_ecsv(
        &opt.out.join("xi.ecsv"),
        &ecsv::Table {
            columns: cols,
            meta: meta_json.clone(),
        },
    )?;
    if let Some(c) = &cov {
        let flat: Vec<f64> = c.iter().copied().collect();
        npy::write_npy_f64(&opt.out.join("covariance.npy"), &flat, &[n_s, n_s])?;
    }
    if !jk.is_empty() {
        let flat: Vec<f64> = jk.iter().flatten().copied().collect();
        npy::write_npy_f64(&opt.out.join("xi_jackknife.npy"), &flat, &[jk.len(), n_s])?;
    }
    if n_mu > 1 {
        let (xi_smu, _, _) = estimate(
            &dd,
            dr.as_ref(),
            rr.as_ref(),
            norms.as_ref(),
            &dd_st.norm,
            meta.box_size,
        )?;
        let bb = &dd.binning;
        let (s_lo, s_hi, mu_lo, mu_hi) = bb.bin_edge_columns();
        let t = ecsv::Table {
            columns: vec![
                ecsv::Column::f64("s_lo", s_lo),
                ecsv::Column::f64("s_hi", s_hi),
                ecsv::Column::f64("mu_lo", mu_lo),
                ecsv::Column::f64("mu_hi", mu_hi),
                ecsv::Column::f64("xi", xi_smu.clone()),
            ],
            meta: meta_json.clone(),
        };
        ecsv::write_ecsv(&opt.out.join("xi_smu.ecsv"), &t)?;
        let poles = multipoles(&xi_smu, bb, &[0, 2, 4])?;
        let t = ecsv::Table {
            columns: vec![
                ecsv::Column::f64("s_lo", bb.s_edges[..n_s].to_vec()),
                ecsv::Column::f64("s_hi", bb.s_edges[1..].to_vec()),
                ecsv::Column::f64("xi0", poles[0].clone()),
                ecsv::Column::f64("xi2", poles[1].clone()),
                ecsv::Column::f64("xi4", poles[2].clone()),
            ],
            meta: meta_json,
        };
        ecsv::write_ecsv(&opt.out.join("multipoles.ecsv"), &t)?;
    }
    let summary = XiSummary {
        estimator,
        n_s,
        n_mu,
        covariance: cov_source,
        n_samples,
        empty_bins: xi
            .iter()
            .enumerate()
            .filter(|(_, v)| !v.is_finite())
            .map(|(i, _)| i)
            .collect(),
    };
    json::write_json(&opt.out.join("xi_summary.json"), &summary)?;
    Ok(summary)
}
