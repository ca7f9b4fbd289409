//! One integration-test binary; each module checks one concern against an outside source.
// Node-indexed checks read several arrays by the same index.
#![allow(clippy::needless_range_loop)]

/// Bad and hostile input, the corpus in tests/bad_designs/, and "nothing lost" for outputs.
mod bad_input;
/// From the screen to the bench: starters, schematic, parts list, compare, live page.
mod bench;
/// Stored charge and bleed-down of the multiplier and the followers' string against ngspice.
mod bleed;
/// One circuit: the same base in every section; the signal path as wired.
mod circuit;
mod common;
/// The core model against textbook laws and worked examples.
mod core;
/// A seeded corpus of hostile designs and options through every command: bounded, finite.
mod corpus;
/// Numerical edge cases; no NaN or infinity in any command's JSON.
mod edge_cases;
/// Output safety: planted links, device nodes, hostile file names, full disk, closed pipe.
mod file_safety;
/// Shared check for non-finite figures in reports (also used by the fuzz target).
mod finite;
/// Transistor-held stages against ngspice and Kirchhoff's laws.
mod followers;
/// Front ends, photon counting and timing benches: shaping theory, counting statistics and
/// the Poisson cascade by Monte Carlo.
mod frontends;
/// Golden reports of every demo, so a restructuring cannot move a figure silently.
mod golden;
/// Hostile input as properties: arbitrary bytes, byte- and value-mutated designs.
mod hostile;
/// The supply as built: the voltage multiplier against ngspice and the textbook.
mod multiplier;
/// The DC operating point against ngspice on the same netlist.
mod ngspice_dc;
/// Figures, HTML, Markdown, JSON schema, netlist and output hygiene.
mod outputs;
/// Invariants over random valid designs.
mod properties;
/// The report's formats agree: tables, not preformatted text, and the same key figures in
/// text, HTML and Markdown; Markdown links the figures.
mod report_formats;
/// Signal budget: QE, pulse charge and amplitude, the pulse at the load, noise, reflections.
mod signal;
/// Sizing from requirements, IEC 60063 tables, tolerance statistics, sweeps, supply quality.
mod sizing;
/// Pulse trains: ngspice transient, charge conservation, RC recovery, linear limit.
mod train;
/// Plausibility warnings: triggered one by one, shown in every format, never blocking.
mod warnings;
