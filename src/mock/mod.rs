//! mock (to be filled in).
