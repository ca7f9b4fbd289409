//! The physical model, no circuit and no solve: the tube's gain law and space charge
//! ([`tube`]), cathodes, windows and emission spectra ([`cathode`]), light sources ([`light`]),
//! the CODATA constants ([`constants`]) and the preferred numbers parts come in ([`eseries`]).
//! Pure functions and tables; no IO.

pub mod cathode;
pub mod constants;
pub mod eseries;
pub mod light;
pub mod tube;
