//! The physical constants the model uses, each once: CODATA 2018 values, exact in the 2019 SI
//! (h, c, e, k_B are defining constants). Every module takes them from here.

/// Planck constant, J s.
pub const PLANCK: f64 = 6.626_070_15e-34;
/// Speed of light in vacuum, m/s.
pub const LIGHT_SPEED: f64 = 299_792_458.0;
/// Elementary charge, C.
pub const ELEMENTARY_CHARGE: f64 = 1.602_176_634e-19;
/// Boltzmann constant, J/K.
pub const BOLTZMANN: f64 = 1.380_649e-23;
