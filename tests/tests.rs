//! One integration-test binary; each module checks one concern against an outside source.
// Node-indexed checks read several arrays by the same index.
#![allow(clippy::needless_range_loop)]

/// Bad and hostile input, the corpus in tests/bad_designs/, and "nothing lost" for outputs.
mod bad_input;
mod common;
/// The core model against textbook laws and worked examples.
mod core;
/// The DC operating point against ngspice on the same netlist.
mod ngspice_dc;
/// Figures, HTML, Markdown, JSON schema, netlist and output hygiene.
mod outputs;
/// Invariants over random valid designs.
mod properties;
