//! The core model against textbook laws and worked examples.

use dynode::design::{self, Design};
use dynode::model::tube::TubeModel;
use dynode::solve::network::{Network, Workspace};

use crate::common::{crate_path, rel};

/// A design with `stages` dynodes, equal resistors and the given supply, as RON text.
pub fn equal_design(stages: usize, supply: f64, r: &str, k: f64) -> String {
    let gaps = vec![format!("R(\"{r}\")"); stages + 1].join(", ");
    format!(
        r#"(
    name: "test chain",
    tube: (
        stages: {stages},
        gain: Reference(volts: "{supply} V", gain: 1.0e6, exponent: Some({k})),
        collection: Some(1.0),
        limits: (max_supply: "5000 V", max_anode_current: "1 mA"),
        pulse_linearity: Some((peak_current: "30 mA", last_gap: "100 V")),
    ),
    supply: (volts: "-{supply} V", polarity: CathodeNegative),
    divider: (gaps: [{gaps}]),
    load: (resistance: "50 ohm"),
)"#
    )
}

fn network(text: &str) -> (Design, Network) {
    let d = design::parse_str(text, "test.ron").expect("valid design");
    let t = TubeModel::from_spec(&d.tube).expect("calibrates");
    let net = Network::from_design(&d, t);
    (d, net)
}

#[test]
fn ohm_and_kirchhoff_with_no_tube_current() {
    // Ohm's and Kirchhoff's laws: with no tube current, gap voltages are V·R_i/ΣR exactly.
    let text = std::fs::read_to_string(crate_path("designs/rooftop-paddle.ron")).unwrap();
    let (d, net) = network(&text);
    let mut ws = Workspace::default();
    let op = net.solve_raw(0.0, None, &mut ws).expect("solves");
    let rs: Vec<f64> = d
        .elements
        .iter()
        .map(|e| match e {
            design::Element::Resistor(r) => r.get::<uom::si::electrical_resistance::ohm>(),
            design::Element::Zener(..) => unreachable!("all resistors"),
        })
        .collect();
    let total: f64 = rs.iter().sum();
    for (v, r) in op.element_volts.iter().zip(&rs) {
        let expect = 1100.0 * r / total;
        assert!(rel(*v, expect) < 1e-9, "{v} vs {expect}");
    }
}

#[test]
fn zener_gap_holds_its_voltage() {
    // A Zener above its knee: V = Vz + I·r_z (piecewise-linear Zener, circuit theory).
    let text = std::fs::read_to_string(crate_path("designs/liquid-cell-tapered.ron")).unwrap();
    let (_, net) = network(&text);
    let mut ws = Workspace::default();
    let op = net.solve_raw(0.0, None, &mut ws).expect("solves");
    let i = op.element_amps[0];
    let expect = 300.0 + i * 50.0;
    assert!(rel(op.element_volts[0], expect) < 1e-9);
    // And it still holds at a real anode current (the point of a Zener in the first gap).
    let op = net.solve_anode_raw(20e-6, &mut ws).expect("solves");
    let expect = 300.0 + op.element_amps[0] * 50.0;
    assert!(rel(op.element_volts[0], expect) < 1e-9);
}

#[test]
fn tsoulfanidis_1100_volts_over_ten_stages() {
    // Tsoulfanidis, Measurement and Detection of Radiation, ch. 6: 1100 V across a 10-dynode
    // tube gives about 100 V per stage. With 11 equal gaps (K–D1 … D10–anode) it is exactly 100 V.
    let (_, net) = network(&equal_design(10, 1100.0, "1M", 0.75));
    let (_, volts) = net.quiescent();
    assert_eq!(volts.len(), 11);
    for v in volts {
        assert!((v - 100.0).abs() < 1e-9, "{v}");
    }
    // Same source: delta = 4 over 10 dynodes gives M ≈ 1.05e6.
    let mut t = net.tube.clone();
    t.collection = 1.0;
    t.k = 1.0;
    t.a = 0.04; // delta = 0.04 · 100 V = 4
    let m = t.gain_for_gaps(&[100.0; 11]);
    assert!(
        rel(m, 1.048576e6) < 1e-6 && (m / 1e6 - 1.05).abs() < 0.01,
        "{m}"
    );
}

#[test]
fn ahmed_worked_example_per_stage_product() {
    // Ahmed, Physics and Engineering of Radiation Detection (2007) §6.5: four dynodes at
    // delta = 3 and six at delta = 4 give 3^4 · 4^6 = 331 776.
    let (_, net) = network(&equal_design(10, 1000.0, "1M", 0.75));
    let mut t = net.tube.clone();
    t.collection = 1.0;
    // The textbook's law puts the whole exponent on the accelerating gap (share 0).
    t.share = 0.0;
    let v_for = |delta: f64| (delta / t.a).powf(1.0 / t.k);
    let mut gaps: Vec<f64> = (0..4).map(|_| v_for(3.0)).collect();
    gaps.extend((0..6).map(|_| v_for(4.0)));
    gaps.push(100.0); // the collecting gap does not multiply
    let g = t.gain_for_gaps(&gaps);
    assert!(rel(g, 331_776.0) < 1e-9, "{g}");
}

#[test]
fn ahmed_gain_sensitivity_alpha_n() {
    // Ahmed §6.5: G ∝ V^(α n), dG/G = α n dV/V; for α n ≈ 7 a 2 % voltage change gives about
    // 14 % gain change (first order). The model's own numerical derivative must give α n.
    let (_, net) = network(&equal_design(10, 1000.0, "1M", 0.7));
    let s = net.gain_sensitivity();
    assert!((s - 7.0).abs() < 1e-6, "d ln G / d ln V = {s}");
    let first_order = s * 0.02;
    assert!((first_order - 0.14).abs() < 1e-6);
    // The exact power law gives 1.02^7 - 1 = 14.87 %.
    let mut up = net.clone();
    up.supply *= 1.02;
    let change = up.small_signal_gain() / net.small_signal_gain() - 1.0;
    assert!(rel(change, 1.02f64.powi(7) - 1.0) < 1e-9, "{change}");
}

#[test]
fn reference_point_is_reproduced_under_the_reference_ratio() {
    // Calibration: under the reference ratio at the reference voltage, the model gives the
    // reference gain (definition of the calibration; IUPAC G = eta · prod delta).
    let (_, net) = network(&equal_design(12, 1500.0, "1M", 0.72));
    assert!(rel(net.small_signal_gain(), 1.0e6) < 1e-12);
}

#[test]
fn table_fit_recovers_a_power_law() {
    // Least squares on ln G vs ln V recovers an exact power law G = C V^(k n) (k n = 7.5).
    let pts: Vec<String> = [900.0f64, 1000.0, 1100.0, 1200.0]
        .iter()
        .map(|v| format!("(\"{v} V\", {:e})", 1.0e6 * (v / 1000.0).powf(7.5)))
        .collect();
    let text = equal_design(10, 1000.0, "1M", 0.75).replace(
        "Reference(volts: \"1000 V\", gain: 1.0e6, exponent: Some(0.75))",
        &format!("Table(points: [{}])", pts.join(", ")),
    );
    let (_, net) = network(&text);
    assert!((net.tube.k - 0.75).abs() < 1e-9, "k = {}", net.tube.k);
    assert!(rel(net.small_signal_gain(), 1.0e6) < 1e-9);
    assert!(net.tube.fit_rms.unwrap() < 1e-9);
}

#[test]
fn resistive_divider_is_over_linear_and_zener_flattens() {
    // Physics brief §3: dynode currents take voltage from the last gaps and give it to the
    // earlier ones, so a resistive divider's gain first rises; a Zener-held last gap does not
    // lose its voltage, so the deviation at the same anode current is much smaller.
    let resistive = equal_design(10, 1100.0, "1M", 0.75);
    let zener = resistive.replacen(
        "R(\"1M\")]",
        "Zener(volts: \"100 V\", dynamic: \"20 ohm\")]",
        1,
    );
    let mut ws = Workspace::default();
    let (_, r_net) = network(&resistive);
    let (_, z_net) = network(&zener);
    let ia = 10e-6; // 10 % of the 100 µA divider current
    let r_dev =
        r_net.solve_anode_raw(ia, &mut ws).unwrap().gain() / r_net.small_signal_gain() - 1.0;
    let z_dev =
        z_net.solve_anode_raw(ia, &mut ws).unwrap().gain() / z_net.small_signal_gain() - 1.0;
    assert!(r_dev > 0.01, "resistive over-linearity {r_dev}");
    assert!(
        z_dev.abs() < 0.5 * r_dev,
        "zener {z_dev} vs resistive {r_dev}"
    );
}

#[test]
fn iec_thresholds_in_the_safety_figures() {
    // IEC 61010-1:2010 §6.3.1 (from memory): 70 V DC hazardous live, 45 µC, 350 mJ, 2 mA DC;
    // IEC 60204-1 §6.2.4 (from memory): 60 V within 5 s.
    use dynode::budget::safety::*;
    assert_eq!(HAZARDOUS_DC_VOLTS, 70.0);
    assert_eq!(CHARGE_LIMIT_COULOMBS, 45e-6);
    assert_eq!(ENERGY_LIMIT_JOULES, 0.350);
    assert_eq!(TOUCH_CURRENT_DC_AMPS, 2e-3);
    assert_eq!((SAFE_VOLTS, SAFE_SECONDS), (60.0, 5.0));
}

#[test]
fn bleed_down_of_one_capacitor_is_rc_ln_ratio() {
    // First-order discharge: t = R C ln(V0 / V_safe). One 100 nF capacitor across the last gap
    // of an unplugged base discharges through that gap's resistor alone (the cathode lead is
    // open); the strays (1 fF here) are negligible.
    let text = equal_design(10, 2200.0, "1M", 0.75)
        .replace(
            "divider: (gaps: [",
            "divider: (stray: Some(\"1 fF\"), decoupling: [Across(gap: 11, value: \"100 nF\")], gaps: [",
        );
    let d = design::parse_str(&text, "t.ron").unwrap();
    let a = dynode::analysis::analyse(&d).unwrap();
    let t = dynode::budget::safety::bleed_time(&d, &a.op, false).expect("bleeds");
    let v0 = a.op.element_volts[10];
    let expect = 1e6 * 100e-9 * (v0 / 60.0).ln();
    assert!(rel(t, expect) < 0.01, "{t} vs {expect}");
}

#[test]
fn linearity_is_output_against_light_with_its_ceiling() {
    // docs/physics.md §12: the curve is presented against the ideal current G0·I_k,
    // which rises with the light, so the axis never runs backwards; the ceiling is the most
    // anode current the divider delivers before its gain falls to half (the tool's definition
    // of saturation, network::SATURATED_GAIN). An independent scan (2000 solves over the same
    // light range, each started from the last, without the trace's prediction or refinement)
    // must find no larger current before the gain halves, and one within 0.5 % of the ceiling
    // (the scan's spacing near the top or the half-gain edge).
    for path in crate::common::demo_designs() {
        let d = dynode::design::load(&path).unwrap();
        let a = dynode::analysis::analyse(&d).unwrap();
        let l = &a.linearity;
        assert!(
            l.points
                .windows(2)
                .all(|w| w[1].ideal_amps > w[0].ideal_amps),
            "{}: the light axis runs backwards",
            path.display()
        );
        let Some(ceiling) = l.ceiling_amps else {
            continue;
        };
        let g0 = a.small_signal_gain;
        let first = l.points.first().unwrap().ideal_amps / g0;
        let last = l.points.last().unwrap().ideal_amps / g0;
        let mut ws = dynode::solve::network::Workspace::default();
        let mut best = 0.0f64;
        let mut prev: Option<dynode::solve::network::OperatingPoint> = None;
        for i in 0..2000 {
            let ik = (first.ln() + (last.ln() - first.ln()) * i as f64 / 1999.0).exp();
            if let Ok(op) = a.network.solve_raw(ik, prev.as_ref(), &mut ws) {
                if op.gain() < 0.5 * g0 {
                    break;
                }
                best = best.max(op.anode_amps());
                prev = Some(op);
            }
        }
        assert!(
            best <= ceiling * (1.0 + 1e-9) && best >= ceiling * (1.0 - 5e-3),
            "{}: scan finds {best}, the report's ceiling is {ceiling}",
            path.display()
        );
    }
}

#[test]
fn a_capacitor_across_a_zener_gap_never_bleeds_down_through_the_divider() {
    // A Zener below its knee conducts only its leakage; with none stated, a capacitor across
    // the Zener gap has no discharge path through the divider (Kirchhoff: its only companions
    // are the Zener and the strays) and must be reported so, never given an invented time.
    let text = equal_design(10, 1500.0, "1M", 0.75)
        .replace(
            "divider: (gaps: [R(\"1M\"),",
            "divider: (decoupling: [Across(gap: 1, value: \"10 nF\", rating: Some(\"500 V\"))], gaps: [Zener(volts: \"200 V\", dynamic: \"20 ohm\"),",
        );
    let d = design::parse_str(&text, "z.ron").unwrap();
    let a = dynode::analysis::analyse(&d).unwrap();
    assert_eq!(a.safety.bleed_seconds, None);
    assert_eq!(
        a.safety.never_bleeds,
        vec!["decoupling across gap 1 (K–D1)".to_string()]
    );
    // With a stated leakage (1 µA at 200 V: 5e-9 S) it bleeds, as R C ln(V0/60 V) with the
    // leakage's resistance (first-order discharge) once the divider side has gone.
    let leaky = text.replace(
        "dynamic: \"20 ohm\")",
        "dynamic: \"20 ohm\", leakage: Some(\"1 uA\"))",
    );
    let d = design::parse_str(&leaky, "z.ron").unwrap();
    let a = dynode::analysis::analyse(&d).unwrap();
    assert!(a.safety.never_bleeds.is_empty());
    let t = a
        .safety
        .bleed_seconds
        .expect("bleeds through the stated leakage");
    let v0 = a.op.element_volts[0];
    let expect = 2e8 * 10e-9 * (v0 / 60.0).ln();
    assert!(rel(t, expect) < 0.05, "{t} vs {expect}");
}

#[test]
fn stored_charge_and_energy_are_judged_against_the_quoted_limits() {
    // IEC 61010-1 §6.3.1 (from memory): 45 µC touchable charge at a hazardous-live voltage,
    // 350 mJ. A 1 µF supply output at 1.7 kV holds 1.7 mC and 1.445 J: over both. Q = C V and
    // E = C V²/2 (definitions).
    let text = equal_design(10, 1700.0, "1M", 0.75).replace(
        "polarity: CathodeNegative)",
        "polarity: CathodeNegative, output_capacitance: Some(\"1 uF\"))",
    );
    let d = design::parse_str(&text, "big.ron").unwrap();
    let a = dynode::analysis::analyse(&d).unwrap();
    let v = a
        .safety
        .verdicts
        .iter()
        .find(|v| v.place == "supply output")
        .expect("the supply output is judged");
    assert!(rel(v.coulombs, 1.7e-3) < 1e-12 && rel(v.joules, 1.445) < 1e-12);
    assert!(v.over, "{v:?}");
    assert!(v.clause.contains("350 mJ"));
    // A 4.7 nF decoupling capacitor at 90 V holds 0.42 µC: within.
    // (Rated for 100 µA, so that the default operating point, a tenth of it, is well inside
    // the 91 µA divider's reach.)
    let small = equal_design(10, 1000.0, "1M", 0.75)
        .replace(
            "divider: (gaps:",
            "divider: (decoupling: [Across(gap: 11, value: \"4.7 nF\", rating: Some(\"500 V\"))], gaps:",
        )
        .replace("max_anode_current: \"1 mA\"", "max_anode_current: \"100 uA\"");
    let d = design::parse_str(&small, "small.ron").unwrap();
    let a = dynode::analysis::analyse(&d).unwrap();
    assert!(a.safety.verdicts.iter().all(|v| !v.over));
}

#[test]
fn a_linear_chain_stays_under_three_percent_at_a_tenth_of_its_divider_current() {
    // A published measurement (a journal abstract on divider linearity, from memory) reports under 3 %
    // gain deviation while the anode current stays below 0.1 of the current in the last
    // resistor of a linear chain. The analysis behind it lets each dynode's yield depend on the
    // gap that accelerates its primaries and on the gap that collects its secondaries; the
    // tool's default even split must meet the bound. An independent solve of the same chain
    // (numpy, reported with the issue that asked for the split: 10 stages, k = 0.75) gives
    // +2.7 % with the even split and +6.8 % with the whole exponent on the accelerating gap.
    let run = |share: Option<f64>| {
        let mut text = equal_design(10, 1000.0, "1M", 0.75);
        if let Some(s) = share {
            text = text.replace(
                "collection: Some(1.0),",
                &format!("collection: Some(1.0), collecting_share: Some({s}),"),
            );
        }
        let (_, net) = network(&text);
        let (i0, _) = net.quiescent();
        let mut ws = dynode::solve::network::Workspace::default();
        let op = net.solve_anode_raw(0.1 * i0, &mut ws).expect("solves");
        op.gain() / net.small_signal_gain() - 1.0
    };
    let default = run(None);
    assert!(default > 0.0 && default < 0.03, "{default}");
    assert!((default - 0.027).abs() < 0.0006, "{default} vs +2.7 %");
    assert!((run(Some(0.5)) - default).abs() < 1e-12);
    let single = run(Some(0.0));
    assert!((single - 0.068).abs() < 0.0006, "{single} vs +6.8 %");
}

#[test]
fn the_whole_exponent_on_the_accelerating_gap_reproduces_the_single_gap_law() {
    // With share 0 the two-gap law is the single-gap law delta = a V^k that the tool used before
    // the split. Figures recorded from that law's reports of every demo (tests/golden/
    // single-gap-law.json, taken from the golden reports before the split) must come back
    // within 1e-9 relative: gain, small-signal gain, electrode potentials and the over-linearity
    // peak. The ±1 % and ±5 % onsets were recorded by a refinement that returned the last point
    // found past the target, up to about 1e-5 past it in deviation (since fixed: the nearest
    // point is returned); they agree within 2e-5 relative in current (measured: at most 6.7e-6
    // across the demos).
    let recorded: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(crate::common::crate_path(
            "tests/golden/single-gap-law.json",
        ))
        .expect("recorded figures"),
    )
    .expect("json");
    let close = |a: f64, b: f64| a == b || (a - b).abs() <= 1e-9 * a.abs().max(b.abs());
    let mut checked = 0;
    for (name, want) in recorded.as_object().expect("object") {
        let path = crate::common::crate_path(&format!("designs/{name}.ron"));
        let text = std::fs::read_to_string(&path).expect("demo").replacen(
            "tube: (",
            "tube: (collecting_share: Some(0.0), ",
            1,
        );
        let d = design::parse_str(&text, "demo.ron").expect("parses");
        let a = dynode::analysis::analyse(&d).expect("analyses");
        let l = &a.linearity;
        let got = [
            ("gain", Some(a.op.gain())),
            ("small_signal_gain", Some(a.small_signal_gain)),
            ("peak_over_deviation", l.peak_over.map(|p| p.deviation)),
        ];
        for (key, ours) in [
            ("plus_1pct_amps", l.plus_1pct),
            ("minus_1pct_amps", l.minus_1pct),
            ("plus_5pct_amps", l.plus_5pct),
            ("minus_5pct_amps", l.minus_5pct),
        ] {
            match (ours, want[key].as_f64()) {
                (Some(v), Some(w)) => {
                    assert!((v - w).abs() < 2e-5 * w, "{name}: {key} {v} vs {w}")
                }
                (None, None) => {}
                (v, w) => panic!("{name}: {key} {v:?} vs {w:?}"),
            }
        }
        for (key, value) in got {
            let w = want[key].as_f64();
            match (value, w) {
                (Some(v), Some(w)) => assert!(close(v, w), "{name}: {key} {v} vs {w}"),
                (None, None) => {}
                _ => panic!("{name}: {key} {value:?} vs {w:?}"),
            }
        }
        let volts = want["electrode_volts_from_cathode"]
            .as_array()
            .expect("array");
        assert_eq!(a.op.potentials.len(), volts.len());
        for (v, w) in a.op.potentials.iter().zip(volts) {
            assert!(close(*v, w.as_f64().expect("number")), "{name}: {v} vs {w}");
        }
        checked += 1;
    }
    assert!(checked >= 6, "every demo recorded");
}
