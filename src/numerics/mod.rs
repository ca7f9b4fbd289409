//! Numerical kernels shared by the solves, with no knowledge of tubes or circuits: the band
//! LU of the DC and time-domain solves ([`band`]) and the dense LU of small systems
//! ([`dense`]).

pub mod band;
pub mod dense;
