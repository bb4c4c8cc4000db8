//! Correlation-function estimators built from pair counts.
//!
//! Pair counts arrive as exact fixed-point histograms (`crate::pairs::PairCounts`); this module
//! normalises them, forms xi(s) or xi(s, mu) (Landy & Szalay 1993, or the natural estimator
//! with analytic randoms in a periodic box), projects onto Legendre multipoles, rebins from
//! counts, estimates covariances (delete-one jackknife, or mocks with the Hartlap factor) and
//! computes the effective redshift.
//!
//! Matrices are `ndarray::Array2<f64>` (row-major, standard layout).
pub mod covariance;
pub mod multipoles;
pub mod norm;
pub mod rebin;
pub mod xi;
pub mod zeff;

#[cfg(test)]
mod tests;

pub use covariance::{
    cholesky, hartlap_factor, inverse_spd, jackknife_covariance, mock_precision, sample_covariance,
};
pub use multipoles::{legendre, legendre_bin_integral, multipoles};
pub use norm::{auto_norm, cross_norm, split_auto_norm, PairNorm, WeightSums};
pub use rebin::{collapse_mu, rebin_mu_groups, rebin_s_edges, rebin_s_groups};
pub use xi::{
    analytic_pair_fraction, landy_szalay, landy_szalay_jackknife, landy_szalay_values, natural_box,
    LsNorms, XiResult,
};
pub use zeff::effective_redshift;
