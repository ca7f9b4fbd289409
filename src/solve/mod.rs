//! The solves of the one circuit: the DC operating point with the tube's currents
//! ([`network`]), output against light ([`linearity`]), the whole base in time under a pulse
//! train ([`transient`]), the pulse at the instrument on the signal path as wired
//! ([`waveform`]), and the supply's voltage multiplier in its periodic steady state
//! ([`multiplier`]). Failure is a typed error, never a NaN.

pub mod linearity;
pub mod multiplier;
pub mod network;
pub mod transient;
pub mod waveform;
