//! geometry (to be filled in).
