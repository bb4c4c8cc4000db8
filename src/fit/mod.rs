//! fit (to be filled in).
