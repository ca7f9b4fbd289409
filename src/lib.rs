//! `dynode`: design and check photomultiplier-tube bases from one design file.
//!
//! The flow is one way, and the folders show it: [`design`] reads and checks a RON design file
//! into uom quantities; [`model`] holds the tube's laws, cathodes and light; [`numerics`] the
//! shared kernels; [`solve`] the solves of the one circuit (DC, linearity, time domain, the
//! pulse at the instrument); [`budget`] what the solved circuit means (signal, trains, safety,
//! parts); [`analysis`] runs one pass and gathers everything; [`study`] runs many solves (size,
//! spread, sweep, compare); [`report`] renders text, JSON, HTML, Markdown, figures and netlists;
//! [`cli`] parses arguments, writes files and maps errors to exit codes.
//! The model's public API speaks in uom quantities at its edges and plain f64 inside hot loops.
#![forbid(unsafe_code)]
#![warn(missing_docs)]
// Numerical code indexes several parallel arrays by node number; iterator chains would hide that.
#![allow(clippy::needless_range_loop)]

pub mod analysis;
pub mod budget;
pub mod cli;
pub mod design;
pub mod model;
pub mod numerics;
pub mod report;
pub mod solve;
pub mod study;
pub mod units;
pub mod warning;
