//! ringscale: measure the baryon acoustic oscillation scale in galaxy redshift surveys and
//! turn it into a statement about spatial curvature.
//!
//! Data flow (one direction): catalog -> geometry -> pairs -> estimator -> fit -> inference,
//! with cosmology feeding geometry and fit, and report writing outputs at the edges.
pub mod app;
pub mod catalog;
pub mod cosmology;
pub mod error;
pub mod estimator;
pub mod fit;
pub mod geometry;
pub mod inference;
pub mod mock;
pub mod pairs;
pub mod pipeline;
pub mod report;

pub use error::{Error, Result};

/// Tool version recorded in every output.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
