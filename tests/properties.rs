//! Invariants of the DC solve over random valid designs (proptest).

use dynode::design;
use dynode::model::tube::TubeModel;
use dynode::solve::network::{Network, Workspace};
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

/// One random base for the parts-list property: what the generator put in, written out.
#[derive(Debug, Clone)]
struct Bench {
    stages: usize,
    supply: f64,
    /// Per gap: one part's resistance and the number of equal parts in series.
    gaps: Vec<(f64, usize)>,
    zener_last: Option<f64>,
    /// (gap, farads, rating volts)
    caps: Vec<(usize, f64, Option<f64>)>,
    /// Anode resistor and coupling capacitor.
    coupled: Option<(f64, f64)>,
    shield: Option<f64>,
}

impl Bench {
    fn text(&self) -> String {
        let mut gaps: Vec<String> = self
            .gaps
            .iter()
            .map(|&(r, m)| {
                if m == 1 {
                    format!("R({r})")
                } else {
                    format!("Series({m}, {r})")
                }
            })
            .collect();
        if let Some(v) = self.zener_last {
            let last = gaps.len() - 1;
            gaps[last] = format!("Zener(volts: {v}, dynamic: \"30 ohm\")");
        }
        let caps: Vec<String> = self
            .caps
            .iter()
            .map(|(g, c, r)| {
                format!(
                    "Across(gap: {g}, value: \"{c:e} F\", rating: {})",
                    r.map_or("None".to_string(), |v| format!("Some(\"{v} V\")"))
                )
            })
            .collect();
        let load = match self.coupled {
            Some((ra, c)) => {
                format!("(resistance: 50, anode_resistor: Some({ra}), coupling: Some(\"{c:e} F\"))")
            }
            None => "(resistance: 50)".to_string(),
        };
        format!(
            r#"(name: "random base", tube: (stages: {},
                gain: Reference(volts: {}, gain: 1e6, exponent: Some(0.75)),
                limits: (max_supply: 1e5, max_anode_current: "1 mA")),
              supply: (volts: -{}, polarity: CathodeNegative),
              divider: (gaps: [{}], decoupling: [{}], shield_resistor: {}),
              load: {load},
              resistors: Some((power: "0.25 W", working_voltage: "250 V", tolerance: Some("1 %"))))"#,
            self.stages,
            self.supply,
            self.supply,
            gaps.join(", "),
            caps.join(", "),
            self.shield
                .map_or("None".to_string(), |r| format!("Some({r})")),
        )
    }
}

fn arb_bench() -> impl Strategy<Value = Bench> {
    (1usize..=14, 300.0f64..2500.0).prop_flat_map(|(stages, supply)| {
        let n = stages + 1;
        (
            prop::collection::vec((1.0e5f64..5.0e6, 1usize..=3), n),
            any::<bool>(),
            prop::collection::vec(
                (
                    1usize..=n,
                    1e-9f64..1e-7,
                    prop::option::of(100.0f64..3000.0),
                ),
                0..=3,
            ),
            prop::option::of((1e4f64..1e6, 1e-9f64..1e-8)),
            prop::option::of(1e7f64..1e9),
        )
            .prop_map(move |(gaps, zener, mut caps, coupled, shield)| {
                caps.sort_by_key(|c| c.0);
                caps.dedup_by_key(|c| c.0);
                Bench {
                    stages,
                    supply,
                    gaps,
                    zener_last: zener.then(|| (supply / (stages as f64 + 1.0)).round()),
                    caps,
                    coupled,
                    shield,
                }
            })
    })
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 48, .. ProptestConfig::default() })]

    /// The parts list holds exactly the parts the design file names — counted from what the
    /// generator wrote, not from the checked design — with each value, and every voltage
    /// rating is at least the stated margin over the highest voltage the part sees, itself at
    /// least its share of the gap voltage the solve found (with and without the tube's
    /// current). With no Zener, that share is checked against Ohm's law on the divider alone:
    /// V_gap = V_s · R_gap / ΣR (no tube current), split equally over equal parts in series.
    /// (`Series(m, R)` is m parts of R each: docs/design-file.md.)
    #[test]
    fn parts_list_matches_the_design(b in arb_bench()) {
        let d = design::parse_str(&b.text(), "bench.ron").unwrap();
        let Ok(a) = dynode::analysis::analyse(&d) else { return Ok(()) };
        let lines = dynode::budget::parts::list(&a);
        // Expected parts: (kind, value) with counts.
        let mut want: Vec<(dynode::budget::parts::Kind, f64, usize)> = Vec::new();
        let mut add = |k, v: f64, c: usize| match want.iter_mut().find(|w| w.0 == k && (w.1 / v - 1.0).abs() < 1e-9) {
            Some(w) => w.2 += c,
            None => want.push((k, v, c)),
        };
        use dynode::budget::parts::Kind;
        for (j, &(r, m)) in b.gaps.iter().enumerate() {
            if j == b.gaps.len() - 1 && let Some(v) = b.zener_last {
                add(Kind::Zener, v, 1);
            } else {
                add(Kind::Resistor, r, m);
            }
        }
        for (_, c, _) in &b.caps {
            add(Kind::Capacitor, *c, 1);
        }
        if let Some((ra, c)) = b.coupled {
            add(Kind::Resistor, ra, 1);
            add(Kind::Capacitor, c, 1);
        }
        if let Some(r) = b.shield {
            add(Kind::Resistor, r, 1);
        }
        let mut got: Vec<(Kind, f64, usize)> = Vec::new();
        for l in &lines {
            prop_assert_eq!(l.count, l.designators.len());
            match got.iter_mut().find(|w| w.0 == l.kind && (w.1 / l.value - 1.0).abs() < 1e-9) {
                Some(w) => w.2 += l.count,
                None => got.push((l.kind, l.value, l.count)),
            }
        }
        let key = |v: &(Kind, f64, usize)| (v.0, (v.1.ln() * 1e6).round() as i64);
        want.sort_by_key(key);
        got.sort_by_key(key);
        prop_assert_eq!(want.len(), got.len(), "{:?} vs {:?}", want, got);
        for (w, g) in want.iter().zip(&got) {
            prop_assert!(w.0 == g.0 && (w.1 / g.1 - 1.0).abs() < 1e-9 && w.2 == g.2, "{:?} vs {:?}", w, g);
        }
        // Voltage ratings: the margin over what each part sees, and at least the gap's share.
        let total_r: f64 = b.gaps.iter().map(|g| g.0 * g.1 as f64).sum();
        let line_of = |name: &str| lines.iter().find(|l| l.designators.iter().any(|x| x == name));
        for l in &lines {
            if let Some(r) = l.voltage_rating {
                prop_assert!(r >= dynode::budget::parts::VOLTAGE_MARGIN * l.volts * (1.0 - 1e-12), "{:?}", l);
            }
            if let (Some(p), Some(w)) = (l.power_rating, l.watts) {
                prop_assert!(p >= dynode::budget::parts::POWER_MARGIN * w * (1.0 - 1e-12), "{:?}", l);
            }
        }
        for (j, g) in a.gaps.iter().enumerate() {
            let is_zener = j == b.gaps.len() - 1 && b.zener_last.is_some();
            let m = if is_zener { 1 } else { b.gaps[j].1 };
            let share = g.volts.abs().max(g.quiescent_volts.abs()) / m as f64;
            let name = if is_zener { format!("Z{}", j + 1) } else if m == 1 { format!("R{}", j + 1) } else { format!("R{}a", j + 1) };
            let l = line_of(&name).expect("every gap has its part");
            prop_assert!(l.volts >= share * (1.0 - 1e-12), "{name}: {} < {share}", l.volts);
            if b.zener_last.is_none() {
                let ohm = b.supply * b.gaps[j].0 / total_r;
                prop_assert!((g.quiescent_volts / m as f64 - ohm).abs() <= 1e-6 * ohm, "Ohm's law, gap {}", j + 1);
                prop_assert!(l.voltage_rating.unwrap() >= dynode::budget::parts::VOLTAGE_MARGIN * ohm * (1.0 - 1e-9));
            }
        }
        for (k, (g, _, _)) in b.caps.iter().enumerate() {
            let l = line_of(&format!("C{}", k + 1)).expect("every capacitor listed");
            let gv = a.gaps[g - 1].volts.abs().max(a.gaps[g - 1].quiescent_volts.abs());
            prop_assert!(l.voltage_rating.unwrap() >= dynode::budget::parts::VOLTAGE_MARGIN * gv * (1.0 - 1e-12));
        }
    }
}
