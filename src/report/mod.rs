//! Report outputs.
pub mod plots;
