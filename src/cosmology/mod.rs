//! Background cosmology: parameters, E(z), distances, horizons, sound horizon.
//!
//! Definitions follow Hogg 1999 (astro-ph/9905116). Everything derives from one E(z).
//! Distances are in Mpc unless a name says `_mpc_h`.

mod background;
mod params;
pub mod power;
mod table;

pub use background::{gauss_legendre, SoundHorizonMethod};
pub use params::{Cosmology, CosmologySource};
pub use table::DistanceTable;

/// Speed of light in km/s (exact, SI definition).
pub const C_KM_S: f64 = 299_792.458;

#[cfg(test)]
mod tests;
