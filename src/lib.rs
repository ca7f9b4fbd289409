//! `dynode`: design and check photomultiplier-tube bases from one design file.
//!
//! The flow is one way: [`design`] reads and checks a RON design file into uom quantities;
//! [`tube`] calibrates the gain law and the space-charge limit; [`network`] solves the divider
//! with the tube's own currents; [`linearity`] traces the gain against anode current; [`safety`]
//! computes stored charge and bleed-down; [`analysis`] gathers everything; [`report`] renders it;
//! [`netlist`] writes the same network for a circuit simulator; [`output`] writes files safely.
//! The model's public API speaks in uom quantities at its edges and plain f64 inside hot loops.
#![forbid(unsafe_code)]
#![warn(missing_docs)]
// Numerical code indexes several parallel arrays by node number; iterator chains would hide that.
#![allow(clippy::needless_range_loop)]

pub mod active;
pub mod analysis;
pub mod cathode;
pub mod cli;
pub mod commands;
pub mod compare;
pub mod constants;
pub mod counting;
pub mod design;
pub mod eseries;
pub mod frontend;
pub mod light;
pub mod limits;
pub mod linearity;
pub mod multiplier;
pub mod netlist;
pub mod network;
pub mod output;
pub mod parts;
pub mod plot;
pub mod pulsetrain;
pub mod report;
pub mod safety;
pub mod schematic;
pub mod serve;
pub mod signal;
pub mod sizing;
pub mod spread;
pub mod stability;
pub mod starter;
pub mod sweep;
pub mod timing;
pub mod train;
pub mod transient;
pub mod tube;
pub mod units;
pub mod warning;
pub mod waveform;
