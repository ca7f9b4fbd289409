//! One circuit: every section of a report reads the same base, and the signal path is wired as
//! the design says (a resistor at the base, the cable, the far end).
//!
//! Sources: transmission-line theory (a current source into R_base ∥ a matched line sees
//! R_base ∥ Z0, and a matched line returns no echo), ngspice on the same elements, and the
//! consistency of one model with itself across sections (the same quantity must not have two
//! values).

use crate::common::{crate_path, demo_designs, ngspice_available, rel};
use dynode::budget::signal;
use dynode::solve::waveform::{self, CurrentPulse, Line, LoadCircuit};
use dynode::{analysis, design};

fn analyse(rel_path: &str) -> analysis::Analysis {
    let d = design::load(&crate_path(rel_path)).expect("design reads");
    analysis::analyse(&d).expect("design analyses")
}

#[test]
fn dc_and_train_sections_give_the_same_small_signal_gain() {
    // The same base must give the same small-signal gain in the DC and the train sections;
    // the burst demo has a supply output resistance, which both must include.
    let mut with_train = 0;
    for path in demo_designs() {
        let d = design::load(&path).unwrap();
        let a = analysis::analyse(&d).unwrap();
        if let Some(t) = &a.train {
            with_train += 1;
            assert!(
                rel(t.initial_gain, a.small_signal_gain) < 1e-4,
                "{}: DC {} train {}",
                path.display(),
                a.small_signal_gain,
                t.initial_gain
            );
        }
    }
    assert!(with_train > 0, "a demo with a train block");
}

#[test]
fn supply_output_resistance_lowers_the_base_voltage_by_its_drop() {
    // Ohm's law: with R_s in series, the base holds V_s − R_s·I_s, I_s being the supply current.
    let a = analyse("designs/laser-burst-counter.ron");
    let rs = a
        .design
        .supply_resistance
        .unwrap()
        .get::<uom::si::electrical_resistance::ohm>();
    let vs = a.design.supply_magnitude();
    let drop = vs - a.op.rail_volts;
    assert!(
        rel(drop, rs * a.op.supply_amps()) < 1e-9,
        "drop {drop} vs R_s I_s {}",
        rs * a.op.supply_amps()
    );
    let sum: f64 = a.op.element_volts.iter().sum();
    assert!(
        rel(sum, a.op.rail_volts) < 1e-12,
        "gap voltages sum to the base voltage"
    );
}

#[test]
fn light_train_and_operating_point_give_one_average_current() {
    // The burst demo states its pulses once (the train's pattern; the light gives the size):
    // the operating point is made at the pulses' average and the signal budget's average
    // anode current is that same figure.
    let a = analyse("designs/laser-burst-counter.ron");
    let s = a.signal.as_ref().expect("signal budget");
    let avg = s.average_anode_amps.expect("a rate");
    assert!(
        rel(avg, a.op.anode_amps()) < 1e-9,
        "{avg} vs {}",
        a.op.anode_amps()
    );
    let t = a.design.train.as_ref().unwrap();
    let light = a.design.signal.light.as_ref().unwrap();
    assert!(rel(light.rate.unwrap(), t.pattern.average_rate().unwrap()) < 1e-12);
}

#[test]
fn a_contradicting_light_rate_is_refused_where_it_is_written() {
    let text = std::fs::read_to_string(crate_path("designs/laser-burst-counter.ron")).unwrap();
    let bad = text.replace(
        "coupling: Some(\"2 %\"),",
        "rate: Some(\"2 MHz\"),\n        coupling: Some(\"2 %\"),",
    );
    assert_ne!(bad, text);
    let e = design::parse_str(&bad, "burst.ron")
        .unwrap_err()
        .to_string();
    assert!(e.starts_with("burst.ron: light.rate"), "{e}");
    assert!(e.contains("571 kHz"), "{e}");
}

#[test]
fn a_contradicting_train_size_is_refused_where_it_is_written() {
    let text = std::fs::read_to_string(crate_path("designs/laser-burst-counter.ron")).unwrap();
    let bad = text.replace("size: FromLight,", "size: Charge(\"500 pC\"),");
    assert_ne!(bad, text);
    let d = design::parse_str(&bad, "burst.ron").unwrap();
    let e = analysis::analyse(&d).unwrap_err().to_string();
    assert!(e.starts_with("burst.ron: train.size"), "{e}");
}

#[test]
fn back_terminated_base_gives_i_times_25_ohm_and_no_echo() {
    // Transmission-line theory: a current source into 50 Ω at the base in parallel with a
    // 50 Ω line matched at the far end sees 25 Ω; the far end absorbs the wave, so nothing
    // comes back. A 100 ns flat pulse with 10 ns edges is long against the edges and the RCs
    // (with 2 ns edges the 8 pF at each end turn the edge into a small bipolar echo, as the
    // frequency-dependent Γ of R ∥ C says, and the top carries a 2 % bump one round trip on).
    let d = design::load(&crate_path("designs/back-terminated.ron")).unwrap();
    let c = signal::circuit(&d);
    assert_eq!(c.base_resistance, Some(50.0));
    assert!(c.source_reflection().unwrap().abs() < 1e-12);
    assert!(c.load_reflection().unwrap().abs() < 1e-12);
    let amps = 4e-3;
    let dt = 0.05e-9;
    let samples: Vec<f64> = (0..=2400)
        .map(|i| {
            let t = i as f64 * dt;
            amps * (t / 10e-9).min(1.0).min(((120e-9 - t) / 10e-9).max(0.0))
        })
        .collect();
    let pulse = CurrentPulse { dt, samples };
    let w = waveform::simulate(&c, &pulse, 300e-9);
    let f = w.measure();
    assert!(
        rel(f.peak, amps * 25.0) < 0.02,
        "peak {} vs I·25 Ω {}",
        f.peak,
        amps * 25.0
    );
    // After the pulse has left the far end (120 ns + the 10 ns line + 20 RC), nothing returns.
    let late =
        w.t.iter()
            .zip(&w.v)
            .filter(|(t, _)| **t > 150e-9)
            .map(|(_, v)| v.abs())
            .fold(0.0, f64::max);
    assert!(late < 0.01 * f.peak, "an echo of {late} V after the pulse");
}

#[test]
fn base_resistor_into_an_open_cable_reflects_as_ngspice_does() {
    if !ngspice_available("base_resistor_into_an_open_cable_reflects_as_ngspice_does") {
        return;
    }
    // 1 kΩ at the base, 2 m of 50 Ω cable (10 ns), a 1 MΩ ∥ 15 pF input and no termination:
    // the wave bounces between a nearly open far end and a 1 kΩ base (Γ = +0.905 there), a
    // reflection series that ngspice's lossless line computes on the same elements.
    let c = LoadCircuit {
        anode_capacitance: 5e-12,
        anode_resistance: None,
        coupling: None,
        base_resistance: Some(1e3),
        cable: Some(Line {
            delay: 10e-9,
            impedance: 50.0,
        }),
        load_resistance: 1e6,
        load_capacitance: 15e-12,
    };
    let pulse = waveform::gaussian_pulse(1e-9, 10e-12);
    let ours = waveform::simulate(&c, &pulse, 200e-9);
    let (t, v) = crate::signal::ngspice_wave(
        "open-cable",
        &pulse,
        "Ca a 0 5p\nRb a 0 1k\nT1 a 0 b 0 Z0=50 TD=10n\nRl b 0 1meg\nCl b 0 15p\nVo b out 0",
        200e-9,
    );
    let theirs = waveform::Waveform { t, v };
    // Compare at the first arrival and at the next three round trips (the echo series).
    let at = |w: &waveform::Waveform, x: f64| {
        let i = w.t.partition_point(|t| *t < x).min(w.t.len() - 1);
        w.v[i]
    };
    let peak = ours.measure().peak;
    for k in 0..4 {
        let t0 = 10e-9 + 20e-9 * k as f64;
        // The extreme within each round trip's window.
        let ext = |w: &waveform::Waveform| {
            (0..200)
                .map(|i| at(w, t0 + i as f64 * 0.1e-9))
                .fold(0.0f64, |m, x| if x.abs() > m.abs() { x } else { m })
        };
        let (a, b) = (ext(&ours), ext(&theirs));
        assert!(
            (a - b).abs() < 0.02 * peak,
            "round trip {k}: dynode {a} V, ngspice {b} V (peak {peak})"
        );
    }
}

#[test]
fn every_demo_gives_one_gain_and_one_average_current_in_its_json() {
    // Done-means of the one-circuit redesign, on the JSON a script reads: the DC section and
    // the train section give the same small-signal gain (within 1e-4), and where a demo has
    // both, the signal budget's average anode current (the DC operating point at the pulses'
    // average) and the train's settled average (the periodic steady state solved in time,
    // an independent path through the capacitors and the nonlinear gain law) agree within 1 %.
    let mut both = 0;
    for path in demo_designs() {
        let d = design::load(&path).unwrap();
        let a = analysis::analyse(&d).unwrap();
        let j = dynode::report::json::to_value(&a);
        let name = path.display();
        let g = j["small_signal_gain"].as_f64();
        if let (Some(g), Some(tg)) = (g, j["train"]["small_signal_gain"].as_f64()) {
            assert!(rel(tg, g) < 1e-4, "{name}: gain DC {g} train {tg}");
        }
        let s = j["signal"]["average_anode_amps"].as_f64();
        if let (Some(s), Some(t)) = (s, j["train"]["average_anode_amps"].as_f64()) {
            both += 1;
            assert!(rel(t, s) < 0.01, "{name}: average signal {s} A train {t} A");
        }
    }
    assert!(both > 0, "a demo with a train and a light rate");
}
