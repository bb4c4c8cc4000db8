//! Writers and readers at the edges of the program: atomic files, ECSV tables, NPY arrays and
//! JSON summaries.
pub mod atomic;
pub mod ecsv;
pub mod json;
pub mod npy;
