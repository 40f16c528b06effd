//! The standard normal law under the name the closed forms use: density, distribution function
//! and its inverse, all from the one shared implementation in `crate::maths`, so the engine and
//! every closed form agree to the last bit on the same inputs.

pub use crate::maths::{normal_cdf as cdf, normal_inv_cdf as inv_cdf, normal_pdf as pdf};
