//! Pair counting (to be filled in).
mod counts;
pub use counts::{from_fixed, to_fixed, Binning, PairCounts, FRAC_BITS};
