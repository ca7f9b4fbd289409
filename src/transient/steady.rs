//! Steady state.
