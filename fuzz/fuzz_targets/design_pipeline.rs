//! Fuzz target: arbitrary bytes through the whole pipeline a design file goes through:
//! UTF-8 check, RON parse, validation, tube calibration, divider solve, linearity, safety,
//! every report format (HTML with its figures inline as SVG), one figure as PNG and the
//! netlist. A panic anywhere, a non-finite number in a report, or user text escaping its
//! netlist comment line, is a finding.
#![no_main]

use libfuzzer_sys::fuzz_target;

#[path = "../../tests/finite.rs"]
mod finite;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let Ok(design) = dynode::design::parse_str(text, "fuzz.ron") else {
        return;
    };
    let Ok(analysis) = dynode::analysis::analyse(&design) else {
        return;
    };
    let theirs = [
        design.name.as_str(),
        design.notes.as_deref().unwrap_or(""),
        design.source.as_str(),
    ];
    for format in dynode::report::Format::ALL.iter() {
        let report = dynode::report::render(&analysis, *format).expect("no non-finite figure in any format");
        if *format == dynode::report::Format::Json {
            continue;
        }
        if let Some(bad) = finite::text_non_finite_except(&report, &theirs) {
            panic!("{format:?} report shows a non-finite figure: {bad}");
        }
    }
    // The netlist of the same network, at the design's operating point.
    let netlist = dynode::report::netlist::write(
        &design,
        &analysis.network.tube,
        &dynode::report::netlist::NetlistOptions {
            cathode_amps: analysis.op.cathode_amps,
            control_block: true,
        },
    );
    if let Some(bad) = finite::text_non_finite_except(&netlist, &theirs) {
        panic!("the netlist holds a non-finite number: {bad}");
    }
    // User text stays on its comment lines: one `.control` block, the tool's own.
    let controls = netlist
        .lines()
        .filter(|l| l.trim_start().to_ascii_lowercase().starts_with(".control"))
        .count();
    assert!(controls <= 1, "user text started a .control line in the netlist");
    // One figure through the PNG encoder too (the SVGs went into the HTML report).
    if let Some(fig) = dynode::report::figures::all(&analysis).first() {
        dynode::report::plot::png_bytes(fig).expect("a figure renders");
    }
    let json = dynode::report::json::to_value(&analysis);
    if let Some(path) = finite::json_unexpected_null(&json) {
        panic!("JSON report has null at {path}, not a key that may be absent");
    }
});
