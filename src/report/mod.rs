//! report (to be filled in).
