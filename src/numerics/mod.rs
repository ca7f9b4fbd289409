//! Numerical kernels shared by the solves, with no knowledge of tubes or circuits.

pub mod band;
