//! The supply as built: the voltage multiplier's steady state against ngspice's transient of the
//! same circuit (diodes, capacitors, sine drive, run to its own steady state) and against the
//! textbook Cockcroft–Walton formulas (high-voltage engineering texts, from memory; values for
//! I = 1 mA, f = 30 kHz, C = 10 nF in the project's reference list).

use dynode::report::netlist;
use dynode::solve::multiplier::{self, IDEAL, Multiplier, RECTIFIER};
use dynode::{analysis, design};
use uom::si::capacitance::nanofarad;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::f64::{Capacitance, ElectricPotential, ElectricalResistance, Frequency};
use uom::si::frequency::kilohertz;

use crate::common::{crate_path, ngspice_available, ngspice_batch, rel, temp_dir};

fn mult(n: usize, diode: multiplier::Diode, filter: bool) -> Multiplier {
    Multiplier {
        stages: n,
        capacitance: Capacitance::new::<nanofarad>(10.0),
        frequency: Frequency::new::<kilohertz>(30.0),
        amplitude: ElectricPotential::new::<volt>(1000.0),
        filter: filter.then(|| {
            (
                ElectricalResistance::new::<ohm>(100e3),
                Capacitance::new::<nanofarad>(10.0),
            )
        }),
        diode,
    }
}

/// About 1 mA at the no-load output 2 n V_p.
fn load(n: usize) -> ElectricalResistance {
    ElectricalResistance::new::<ohm>(2000.0 * n as f64 / 1e-3)
}

#[test]
fn ripple_matches_the_textbook_formula() {
    // Textbook (from memory): δV = I n (n+1) / (2 f C); with ideal diodes and a ripple far below
    // the output the formula's assumptions hold. Tolerance 5 % (the brief's): the formula takes
    // the load current as drawn evenly while the diodes conduct in short pulses.
    for n in [1, 2, 4, 6] {
        let m = mult(n, IDEAL, false);
        let s = multiplier::steady_state(&m, load(n)).unwrap();
        let (ripple, _) = multiplier::textbook(&m, s.load_amps);
        assert!(
            rel(s.multiplier_ripple_volts, ripple) < 0.05,
            "n = {n}: ripple {} V, textbook {ripple} V",
            s.multiplier_ripple_volts
        );
    }
}

#[test]
fn a_doubler_droops_as_the_textbook_says() {
    // Textbook drop (from memory): ΔV = (I/(fC))(2n³/3 + n²/2 − n/6) = I/(fC) for n = 1
    // (3.33 V at 1 mA, 30 kHz, 10 nF). Within 5 %. For n = 2 and 4 the computed drop of the
    // same ideal circuit sits 6–7 % below the formula; ngspice agrees with the computed figure
    // (below), so the difference is the formula's approximation.
    let m = mult(1, IDEAL, false);
    let s = multiplier::steady_state(&m, load(1)).unwrap();
    let (_, drop) = multiplier::textbook(&m, s.load_amps);
    assert!(
        rel(s.droop_volts, drop) < 0.05,
        "droop {} V, textbook {drop} V",
        s.droop_volts
    );
}

/// Run a multiplier netlist in ngspice and read its `meas` results by name.
fn run(text: &str, dir: &std::path::Path, name: &str) -> std::collections::HashMap<String, f64> {
    ngspice_batch(text, dir, name)
        .lines()
        .filter_map(|l| {
            let (k, v) = l.split_once('=')?;
            let v = v.split_whitespace().next()?.parse::<f64>().ok()?;
            Some((k.trim().to_string(), v))
        })
        .collect()
}

/// Our steady state against ngspice's: droop of the peak output and ripple before and after
/// the filter, within 5 % (the brief's tolerance; measured agreement is a fraction of that).
fn compare(m: &Multiplier, load_ohms: f64, periods: usize, name: &str) {
    compare_text(
        m,
        load_ohms,
        &netlist::write_multiplier(m, load_ohms, periods),
        name,
    );
}

/// As [`compare`], with the netlist given.
fn compare_text(m: &Multiplier, load_ohms: f64, text: &str, name: &str) {
    let dir = temp_dir(&format!("multiplier-{name}"));
    let ours = multiplier::steady_state(m, ElectricalResistance::new::<ohm>(load_ohms)).unwrap();
    // The netlist runs from the textbook's loaded charges for enough periods that ngspice's
    // own slowest mode has decayed (measured: the demo's filter and 12 MΩ load settle within
    // 1 % only after some 3000 periods; 4 stages into 8 MΩ without a filter within 300).
    let spice = run(text, &dir, name);
    let top_max = spice["vtop_max"];
    let droop = ours.no_load_volts - top_max;
    let ripple = spice["vtop_pp"];
    let out_ripple = spice["vout_pp"];
    eprintln!(
        "{name}: droop {} / ngspice {droop}; ripple {} / {ripple}; at the base {} / {out_ripple}; mean {} / {}",
        ours.droop_volts,
        ours.multiplier_ripple_volts,
        ours.ripple_volts,
        ours.output_volts,
        spice["vout_avg"]
    );
    assert!(rel(ours.droop_volts, droop) < 0.05, "{name}: droop");
    assert!(
        rel(ours.multiplier_ripple_volts, ripple) < 0.05,
        "{name}: ripple"
    );
    assert!(
        rel(ours.ripple_volts, out_ripple) < 0.05,
        "{name}: ripple at the base"
    );
    assert!(
        rel(ours.output_volts, spice["vout_avg"]) < 1e-3,
        "{name}: mean output"
    );
}

#[test]
fn four_stages_match_ngspice() {
    if !ngspice_available("multiplier") {
        return;
    }
    compare(
        &mult(4, RECTIFIER, false),
        load(4).get::<ohm>(),
        800,
        "n4-rect",
    );
    compare(
        &mult(4, IDEAL, false),
        load(4).get::<ohm>(),
        800,
        "n4-ideal",
    );
}

#[test]
fn the_demo_supply_matches_ngspice() {
    if !ngspice_available("multiplier") {
        return;
    }
    let d = design::load(&crate_path("designs/multiplier-fed.ron")).unwrap();
    let a = analysis::analyse(&d).unwrap();
    let sm = a
        .supply_model
        .as_ref()
        .expect("the demo describes its supply");
    let m = d.multiplier.unwrap();
    // The netlist as a user gets it: `dynode netlist --supply` (4000 periods).
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_dynode"))
        .args(["netlist", "--supply", "-q"])
        .arg(crate_path("designs/multiplier-fed.ron"))
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).unwrap();
    compare_text(&m, sm.steady.load_ohms, &text, "demo");
}
