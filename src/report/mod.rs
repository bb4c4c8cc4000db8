//! Writers and readers at the edges of the program: atomic files, ECSV tables, NPY arrays,
//! JSON summaries, and plots (PNG and SVG).
pub mod atomic;
pub mod ecsv;
pub mod json;
pub mod npy;
pub mod plots;
pub mod space;
