//! BAO fitting: Hankel transforms (FFTLog), the BAO correlation-function template and the
//! isotropic alpha fit with its conversion to D_V/r_d.
pub mod fftlog;
pub mod isotropic;
pub mod template;

pub use fftlog::{xi_direct, FftLog};
pub use isotropic::{dv_over_rd, fit_isotropic, DvOverRd, IsotropicFit, IsotropicOptions};
pub use template::{template_power, BaoTemplate, TemplateOptions};
