//! Numerical kernels shared by the solves, with no knowledge of tubes or circuits: the band
//! LU of the DC and time-domain solves ([`band`]) and the dense LU of small systems
//! ([`dense`]), and the one bracketed root search of the crossings ([`root`]).

pub mod band;
pub mod dense;
pub mod root;
