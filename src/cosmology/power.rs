//! Linear matter power spectrum (to be filled in).
