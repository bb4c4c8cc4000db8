//! Pair-count histograms with exact, order-independent accumulation.
//!
//! Weighted sums are kept as fixed-point integers (i128 with `FRAC_BITS` fractional bits), so
//! adding partial results from any number of threads or shards in any order gives bitwise the
//! same total. Values convert to f64 only at the edges.
use serde::{Deserialize, Serialize};

/// Fractional bits of the fixed-point totals (i128). The kernels round each pair's terms with at
/// most this many bits (fewer for large terms, see `kernel::Quant`), so totals hold > 1e14
/// pairs of weight product 1e4 times s = 1e3 with room to spare.
pub const FRAC_BITS: u32 = 48;
const SCALE: f64 = (1u64 << FRAC_BITS) as f64;

/// Convert an f64 term to fixed point (round to nearest). Deterministic: a pure function of x.
#[inline]
pub fn to_fixed(x: f64) -> i128 {
    (x * SCALE).round() as i128
}

/// Convert a fixed-point sum back to f64.
#[inline]
pub fn from_fixed(x: i128) -> f64 {
    x as f64 / SCALE
}

/// Separation and (optional) mu binning. Bins are indexed `is * n_mu + imu`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Binning {
    /// Strictly increasing separation edges in Mpc/h.
    pub s_edges: Vec<f64>,
    /// Number of linear mu bins on [0, 1]; 1 means isotropic counts.
    pub n_mu: usize,
}

impl Binning {
    pub fn new(s_edges: Vec<f64>, n_mu: usize) -> crate::Result<Self> {
        if s_edges.len() < 2 {
            return Err(crate::Error::input(
                "binning: need at least two separation edges",
            ));
        }
        for (i, w) in s_edges.windows(2).enumerate() {
            if !(w[0].is_finite() && w[1].is_finite() && w[1] > w[0]) {
                return Err(crate::Error::input(format!(
                    "binning: separation edges must be finite and strictly increasing (edge {i} = {}, edge {} = {})",
                    w[0],
                    i + 1,
                    w[1]
                )));
            }
        }
        if s_edges[0] < 0.0 {
            return Err(crate::Error::input(
                "binning: separation edges must be >= 0",
            ));
        }
        if n_mu == 0 {
            return Err(crate::Error::input(
                "binning: number of mu bins must be >= 1",
            ));
        }
        Ok(Binning { s_edges, n_mu })
    }
    pub fn n_s(&self) -> usize {
        self.s_edges.len() - 1
    }
    pub fn n_bins(&self) -> usize {
        self.n_s() * self.n_mu
    }
    pub fn s_min(&self) -> f64 {
        self.s_edges[0]
    }
    /// Per-bin (s_lo, s_hi, mu_lo, mu_hi), in bin order (`is * n_mu + imu`), for output tables.
    pub fn bin_edge_columns(&self) -> (Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>) {
        let (n_s, n_mu) = (self.n_s(), self.n_mu);
        let mut out = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
        for i in 0..n_s {
            for j in 0..n_mu {
                out.0.push(self.s_edges[i]);
                out.1.push(self.s_edges[i + 1]);
                out.2.push(j as f64 / n_mu as f64);
                out.3.push((j + 1) as f64 / n_mu as f64);
            }
        }
        out
    }
    pub fn s_max(&self) -> f64 {
        *self.s_edges.last().unwrap()
    }
}

/// Pair counts for one catalogue pairing (DD, DR or RR) in one binning.
///
/// `region_both[k * n_bins + b]` holds the weighted sum of pairs in bin b with both ends in
/// region k, `region_one[...]` those with exactly one end in k; the delete-one count for region
/// k is `total - both - one`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PairCounts {
    pub binning: Binning,
    /// Raw number of pairs per bin.
    pub npairs: Vec<u64>,
    /// Sum of w1 w2 per bin (fixed point).
    pub wpairs: Vec<i128>,
    /// Sum of w1 w2 s per bin (fixed point), for the mean separation.
    pub ws: Vec<i128>,
    /// Sum of w1 w2 (z1 + z2)/2 per bin (fixed point), for the effective redshift.
    pub wz: Vec<i128>,
    pub n_regions: usize,
    pub region_both: Vec<i128>,
    pub region_one: Vec<i128>,
}

impl PairCounts {
    pub fn zeros(binning: Binning, n_regions: usize) -> Self {
        let nb = binning.n_bins();
        PairCounts {
            binning,
            npairs: vec![0; nb],
            wpairs: vec![0; nb],
            ws: vec![0; nb],
            wz: vec![0; nb],
            n_regions,
            region_both: vec![0; nb * n_regions],
            region_one: vec![0; nb * n_regions],
        }
    }

    /// Add another partial result (thread or shard). Exact and order-independent.
    pub fn merge(&mut self, other: &PairCounts) -> crate::Result<()> {
        if self.binning != other.binning || self.n_regions != other.n_regions {
            return Err(crate::Error::input(format!(
                "cannot merge pair counts with different binning or region count \
                 ({} s edges x {} mu bins, {} regions vs {} s edges x {} mu bins, {} regions)",
                self.binning.s_edges.len(),
                self.binning.n_mu,
                self.n_regions,
                other.binning.s_edges.len(),
                other.binning.n_mu,
                other.n_regions
            )));
        }
        for (a, b) in self.npairs.iter_mut().zip(&other.npairs) {
            *a += b;
        }
        for (dst, src) in [
            (&mut self.wpairs, &other.wpairs),
            (&mut self.ws, &other.ws),
            (&mut self.wz, &other.wz),
            (&mut self.region_both, &other.region_both),
            (&mut self.region_one, &other.region_one),
        ] {
            for (a, b) in dst.iter_mut().zip(src) {
                *a += b;
            }
        }
        Ok(())
    }

    pub fn wpairs_f64(&self) -> Vec<f64> {
        self.wpairs.iter().map(|&v| from_fixed(v)).collect()
    }
    /// Weighted mean separation per bin (NaN for empty bins).
    pub fn s_mean(&self) -> Vec<f64> {
        self.ws
            .iter()
            .zip(&self.wpairs)
            .map(|(&a, &w)| {
                if w == 0 {
                    f64::NAN
                } else {
                    from_fixed(a) / from_fixed(w)
                }
            })
            .collect()
    }
    /// Weighted mean pair redshift per bin (NaN for empty bins).
    pub fn z_mean(&self) -> Vec<f64> {
        self.wz
            .iter()
            .zip(&self.wpairs)
            .map(|(&a, &w)| {
                if w == 0 {
                    f64::NAN
                } else {
                    from_fixed(a) / from_fixed(w)
                }
            })
            .collect()
    }
    /// Weighted pair sums with region k deleted.
    pub fn wpairs_without_region(&self, k: usize) -> Vec<f64> {
        let nb = self.binning.n_bins();
        (0..nb)
            .map(|b| {
                from_fixed(
                    self.wpairs[b] - self.region_both[k * nb + b] - self.region_one[k * nb + b],
                )
            })
            .collect()
    }
}
