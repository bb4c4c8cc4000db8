//! Weight sums and pair-count normalisations, with their delete-one jackknife versions.
use crate::{Error, Result};
use serde::{Deserialize, Serialize};

/// Sums of the weights of one catalogue, in total and per jackknife region.
///
/// Sums run in catalogue order with Neumaier compensation, so they are deterministic and
/// accurate for any catalogue size.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WeightSums {
    pub n: u64,
    pub sum_w: f64,
    pub sum_w2: f64,
    pub region_sum_w: Vec<f64>,
    pub region_sum_w2: Vec<f64>,
}

/// Compensated (Neumaier) running sum: deterministic for a fixed order, error O(eps).
#[derive(Default, Clone, Copy)]
struct Neumaier {
    sum: f64,
    c: f64,
}

impl Neumaier {
    fn add(&mut self, x: f64) {
        let t = self.sum + x;
        if self.sum.abs() >= x.abs() {
            self.c += (self.sum - t) + x;
        } else {
            self.c += (x - t) + self.sum;
        }
        self.sum = t;
    }
    fn value(&self) -> f64 {
        self.sum + self.c
    }
}

impl WeightSums {
    /// Sum weights `w` with region labels `region` (each < `n_regions`). With `n_regions == 0`
    /// (no jackknife) `region` must be empty.
    pub fn from_weights(w: &[f64], region: &[u32], n_regions: usize) -> Result<Self> {
        if n_regions == 0 && !region.is_empty() {
            return Err(Error::input(
                "weight sums: region labels given but the number of regions is 0",
            ));
        }
        if n_regions > 0 && region.len() != w.len() {
            return Err(Error::input(format!(
                "weight sums: {} weights but {} region labels",
                w.len(),
                region.len()
            )));
        }
        let mut s = Neumaier::default();
        let mut s2 = Neumaier::default();
        let mut rs = vec![Neumaier::default(); n_regions];
        let mut rs2 = vec![Neumaier::default(); n_regions];
        for (i, &wi) in w.iter().enumerate() {
            if !wi.is_finite() {
                return Err(Error::input(format!(
                    "weight sums: weight of object {i} is not finite ({wi})"
                )));
            }
            s.add(wi);
            s2.add(wi * wi);
            if n_regions > 0 {
                let k = region[i] as usize;
                if k >= n_regions {
                    return Err(Error::input(format!(
                        "weight sums: object {i} has region {k}, but there are only {n_regions} regions"
                    )));
                }
                rs[k].add(wi);
                rs2[k].add(wi * wi);
            }
        }
        Ok(WeightSums {
            n: w.len() as u64,
            sum_w: s.value(),
            sum_w2: s2.value(),
            region_sum_w: rs.iter().map(Neumaier::value).collect(),
            region_sum_w2: rs2.iter().map(Neumaier::value).collect(),
        })
    }

    pub fn n_regions(&self) -> usize {
        self.region_sum_w.len()
    }

    fn check(&self, what: &str) -> Result<()> {
        if self.region_sum_w.len() != self.region_sum_w2.len() {
            return Err(Error::input(format!(
                "{what}: region weight sums have different lengths ({} and {})",
                self.region_sum_w.len(),
                self.region_sum_w2.len()
            )));
        }
        let all = [self.sum_w, self.sum_w2]
            .into_iter()
            .chain(self.region_sum_w.iter().copied())
            .chain(self.region_sum_w2.iter().copied());
        for v in all {
            if !v.is_finite() {
                return Err(Error::input(format!(
                    "{what}: weight sum is not finite ({v})"
                )));
            }
        }
        Ok(())
    }
}

/// A pair-count normalisation (the weighted number of possible pairs) in total and with each
/// jackknife region deleted.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PairNorm {
    pub total: f64,
    pub without_region: Vec<f64>,
}

impl PairNorm {
    pub fn n_regions(&self) -> usize {
        self.without_region.len()
    }
}

fn auto(s: f64, s2: f64) -> f64 {
    // Distinct unordered pairs: sum_{i<j} w_i w_j.
    0.5 * (s * s - s2)
}

/// Auto-pair normalisation ((sum w)^2 - sum w^2) / 2, the weighted number of distinct pairs
/// (Landy & Szalay 1993), and the same with each region removed.
pub fn auto_norm(a: &WeightSums) -> Result<PairNorm> {
    a.check("auto normalisation")?;
    Ok(PairNorm {
        total: auto(a.sum_w, a.sum_w2),
        without_region: (0..a.n_regions())
            .map(|k| auto(a.sum_w - a.region_sum_w[k], a.sum_w2 - a.region_sum_w2[k]))
            .collect(),
    })
}

/// Cross-pair normalisation sum_a w * sum_b w, and the same with region k removed from both.
pub fn cross_norm(a: &WeightSums, b: &WeightSums) -> Result<PairNorm> {
    a.check("cross normalisation")?;
    b.check("cross normalisation")?;
    if a.n_regions() != b.n_regions() {
        return Err(Error::input(format!(
            "cross normalisation: catalogues have {} and {} jackknife regions",
            a.n_regions(),
            b.n_regions()
        )));
    }
    Ok(PairNorm {
        total: a.sum_w * b.sum_w,
        without_region: (0..a.n_regions())
            .map(|k| (a.sum_w - a.region_sum_w[k]) * (b.sum_w - b.region_sum_w[k]))
            .collect(),
    })
}

/// Normalisation of RR counted with split randoms (Keihanen et al. 2019, A&A 631, A73).
///
/// The random catalogue is cut into M disjoint subsets and only pairs inside each subset are
/// counted; the RR counts handed to the estimator are the sum of those M histograms
/// (`PairCounts::merge`). Each subset's RR_m is normalised by its own auto norm, and the
/// combined normalised RR is sum_m RR_m / sum_m norm_m, so this returns sum_m auto_norm(m)
/// (also per deleted region). With M = 1 it equals `auto_norm`. DR still uses all randoms.
pub fn split_auto_norm(subsets: &[WeightSums]) -> Result<PairNorm> {
    let first = subsets
        .first()
        .ok_or_else(|| Error::input("split random normalisation: no random subsets given"))?;
    let nreg = first.n_regions();
    let mut total = 0.0;
    let mut without = vec![0.0; nreg];
    for (m, s) in subsets.iter().enumerate() {
        if s.n_regions() != nreg {
            return Err(Error::input(format!(
                "split random normalisation: subset {m} has {} regions, subset 0 has {nreg}",
                s.n_regions()
            )));
        }
        let n = auto_norm(s)?;
        total += n.total;
        for (a, b) in without.iter_mut().zip(&n.without_region) {
            *a += b;
        }
    }
    Ok(PairNorm {
        total,
        without_region: without,
    })
}
