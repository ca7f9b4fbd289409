//! Invariants of the DC solve over random valid designs (proptest).

use dynode::design;
use dynode::network::{Network, Workspace};
use dynode::tube::TubeModel;
use proptest::prelude::*;

fn design_text(stages: usize, supply: f64, rs: &[f64], zener_last: bool, k: f64) -> String {
    let mut gaps: Vec<String> = rs.iter().map(|r| format!("R({r})")).collect();
    if zener_last {
        let last = gaps.len() - 1;
        gaps[last] = format!(
            "Zener(volts: {}, dynamic: \"30 ohm\")",
            supply / (stages as f64 + 1.0)
        );
    }
    format!(
        r#"(name: "random", tube: (stages: {stages},
            gain: Reference(volts: {supply}, gain: 1e6, exponent: Some({k})),
            limits: (max_supply: 1e5, max_anode_current: "1 mA")),
          supply: (volts: -{supply}, polarity: CathodeNegative),
          divider: (gaps: [{}]), load: (resistance: 50))"#,
        gaps.join(", ")
    )
}

fn arb_design() -> impl Strategy<Value = String> {
    (1usize..=20, 300.0f64..2500.0, 0.6f64..0.85, any::<bool>()).prop_flat_map(
        |(stages, supply, k, zener)| {
            prop::collection::vec(1.0e5f64..5.0e6, stages + 1)
                .prop_map(move |rs| design_text(stages, supply, &rs, zener, k))
        },
    )
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, .. ProptestConfig::default() })]

    #[test]
    fn kirchhoff_and_supply_invariants(text in arb_design(), frac in 1e-4f64..0.3) {
        let d = design::parse_str(&text, "random.ron").unwrap();
        let net = Network::from_design(&d, TubeModel::from_spec(&d.tube).unwrap());
        let (i0, _) = net.quiescent();
        let mut ws = Workspace::default();
        match net.solve_anode_raw(frac * i0, &mut ws) {
            Ok(op) => {
                let inj = op.dynode_injections();
                let n = net.stages();
                // Kirchhoff's current law at every dynode: in from above + injected = out below.
                for j in 0..n {
                    let kcl = op.element_amps[j + 1] - op.element_amps[j] + inj[j];
                    prop_assert!(kcl.abs() <= 1e-8 * i0, "node D{}: {kcl:e}", j + 1);
                }
                // The tube's injections sum to zero (cathode + dynodes − anode).
                let total = op.tube_currents[0] + inj.iter().sum::<f64>() - op.anode_amps();
                prop_assert!(total.abs() <= 1e-12 * op.anode_amps().max(1e-30) + 1e-20);
                // Supply current seen at both ends is the same.
                let top = op.element_amps[n] + op.anode_amps();
                prop_assert!((top - op.supply_amps()).abs() <= 1e-8 * i0);
                // Gap voltages sum to the supply.
                let sum: f64 = op.element_volts.iter().sum();
                prop_assert!((sum - net.supply).abs() <= 1e-9 * net.supply);
                prop_assert!(op.gain().is_finite() && op.gain() > 0.0);
            }
            Err(e) => {
                // Converge or say why: the message must be a sentence, never a NaN figure.
                let msg = e.to_string();
                prop_assert!(!msg.is_empty());
            }
        }
    }

    #[test]
    fn gain_rises_with_supply(text in arb_design(), up in 1.001f64..1.2) {
        let d = design::parse_str(&text, "random.ron").unwrap();
        let net = Network::from_design(&d, TubeModel::from_spec(&d.tube).unwrap());
        let mut higher = net.clone();
        higher.supply *= up;
        prop_assert!(higher.small_signal_gain() > net.small_signal_gain());
        let (i0, _) = net.quiescent();
        let mut ws = Workspace::default();
        let ik = 1e-3 * i0 / net.small_signal_gain();
        let a = net.solve_raw(ik, None, &mut ws).unwrap().gain();
        let b = higher.solve_raw(ik, None, &mut ws).unwrap().gain();
        prop_assert!(b > a, "{b} <= {a}");
    }

    #[test]
    fn no_nan_or_infinity_in_the_json_report(text in arb_design()) {
        let d = design::parse_str(&text, "random.ron").unwrap();
        if let Ok(a) = dynode::analysis::analyse(&d) {
            let v = dynode::report::json::to_value(&a);
            let text = serde_json::to_string(&v).unwrap();
            prop_assert!(!text.contains("NaN") && !text.contains("inf"));
            crate::common::assert_all_numbers_finite(&v, "$");
        }
    }
}
