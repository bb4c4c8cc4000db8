//! estimator (to be filled in).
