//! catalog (to be filled in).
