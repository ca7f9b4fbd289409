//! Stored charge and bleed-down of the parts beyond the divider: the voltage multiplier's
//! capacitors (docs/physics.md §15) and the followers' tap string (§14). The same RC network is
//! written out here as its own SPICE netlist, from the design's values, and ngspice (a
//! general-purpose circuit simulator) integrates it from the operating point; its time to
//! 60 V is compared with the tool's within 1 %. Stored energy per capacitor against ½ C V²
//! (definition of capacitance) with the voltages of the textbook multiplier.

use std::fmt::Write as _;

use dynode::analysis;
use dynode::design::{self, CapStyle, Design, Element, Polarity};
use uom::si::capacitance::farad;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;

use crate::common::{crate_path, ngspice_available, ngspice_batch, rel, temp_dir};

/// The switched-off base, still connected to the supply, as a SPICE netlist with initial
/// conditions from the operating point (cathode-negative designs only: the return is node 0).
/// Nodes: `n0` the cathode, `n1`… the dynodes, `na` the anode, `nm` the multiplier's
/// capacitors behind the filter resistor, `s<j>` the tap of a held dynode. `string` adds the
/// followers' tap string as one resistor, `followers` the string with its taps and the
/// followers conducting. Returns the text and, per capacitor that starts above 60 V, the two
/// nodes across it.
fn switched_off(
    d: &Design,
    a: &analysis::Analysis,
    string: bool,
    followers: bool,
) -> (String, Vec<(String, String)>) {
    assert_eq!(d.polarity, Polarity::CathodeNegative);
    let n = d.tube.stages;
    let vs = d.supply_magnitude();
    let node = |j: usize| {
        if j == n + 1 {
            "0".to_string()
        } else {
            format!("n{j}")
        }
    };
    let mut s = String::from("* switched-off base\n");
    let mut ic = vec![(node(0), -vs)];
    for j in 1..=n {
        ic.push((node(j), a.op.potentials[j - 1] - vs));
    }
    ic.push(("na".to_string(), a.op.potentials[n] - vs));
    for (j, e) in d.elements.iter().enumerate() {
        let Element::Resistor(r) = e else {
            panic!("resistor dividers only")
        };
        let _ = writeln!(s, "R{j} {} {} {}", node(j), node(j + 1), r.get::<ohm>());
    }
    let stray = d.stray.get::<farad>();
    for j in 0..n {
        let _ = writeln!(s, "CS{j} {} {} {stray}", node(j), node(j + 1));
    }
    let _ = writeln!(s, "CSA {} na {stray}", node(n));
    let _ = writeln!(s, "RA na 0 {}", d.anode_dc_resistance().get::<ohm>());
    let mut watch = Vec::new();
    for (k, c) in d.decoupling.iter().enumerate() {
        let (p, q) = match c.style {
            CapStyle::Across(g) => (node(g - 1), node(g)),
            CapStyle::ToReturn(j) => (node(j), "0".to_string()),
        };
        let _ = writeln!(s, "CD{k} {p} {q} {}", c.value.get::<farad>());
        watch.push((p, q));
    }
    if let Some(c) = d.supply_capacitance {
        let _ = writeln!(s, "CO n0 0 {}", c.get::<farad>());
        watch.push(("n0".into(), "0".into()));
    }
    if let Some(m) = &d.multiplier {
        // Every multiplier capacitor together, charged to the no-load output 2 n V_p (the
        // conservative reading the tool states), behind the filter resistor.
        let k = m.stages as f64;
        let lump = 2.0 * k * m.capacitance.get::<farad>();
        let v0 = (2.0 * k * m.amplitude.get::<volt>()).max(vs);
        let (rf, cf) = m.filter.expect("the demo has a filter");
        let _ = writeln!(s, "CM nm 0 {lump}");
        let _ = writeln!(s, "RF nm n0 {}", rf.get::<ohm>());
        let _ = writeln!(s, "CF n0 0 {}", cf.get::<farad>());
        ic.push(("nm".into(), -v0));
        watch.push(("nm".into(), "0".into()));
        watch.push(("n0".into(), "0".into()));
    }
    if string {
        let f = d.followers.as_ref().unwrap();
        let _ = writeln!(s, "RSTR n0 0 {}", f.string.get::<ohm>());
    }
    if let Some(f) = d.followers.as_ref().filter(|_| followers) {
        // The string with its taps, each one drop below the potential the divider alone gives
        // its dynode with no light (Ohm's law on the divider); each follower as two behavioural
        // current sources with the DC law, sinking to the cathode end or sourcing from the
        // return rail.
        let r: Vec<f64> = d
            .elements
            .iter()
            .map(|e| match e {
                Element::Resistor(r) => r.get::<ohm>(),
                Element::Zener(..) => panic!("resistor dividers only"),
            })
            .collect();
        let total: f64 = r.iter().sum();
        let drop = f.drop.get::<volt>();
        let string = f.string.get::<ohm>();
        let limit = f.current_limit.get::<uom::si::electric_current::ampere>();
        let lr = limit * f.output_resistance.get::<ohm>();
        let (mut below, mut at) = ("n0".to_string(), 0.0);
        for &j in &f.hold {
            let tap = r[..j].iter().sum::<f64>() / total - drop / vs;
            let _ = writeln!(s, "RT{j} {below} s{j} {}", string * (tap - at));
            ic.push((format!("s{j}"), -vs + tap * vs));
            below = format!("s{j}");
            at = tap;
        }
        let _ = writeln!(s, "RTTOP {below} 0 {}", string * (1.0 - at));
        for &j in &f.hold {
            let law = format!("{limit}*tanh((v(n{j})-v(s{j})-{drop})/{lr})");
            let _ = writeln!(s, "BFS{j} n{j} n0 I = max({law}, 0)");
            let _ = writeln!(s, "BFO{j} 0 n{j} I = max(-({law}), 0)");
        }
    }
    let at = |name: &str| ic.iter().find(|x| x.0 == name).map_or(0.0, |x| x.1);
    let watch: Vec<(String, String)> = watch
        .into_iter()
        .filter(|(p, q)| (at(p) - at(q)).abs() > 60.0)
        .collect();
    for (k, (p, q)) in watch.iter().enumerate() {
        let _ = writeln!(s, "BH{k} h{k} 0 V = abs(v({p}) - v({q}))");
        let _ = writeln!(s, ".meas tran t{k} when v(h{k}) = 60 fall = last");
    }
    let ics: Vec<String> = ic.iter().map(|(p, v)| format!("v({p})={v}")).collect();
    let _ = writeln!(s, ".ic {}", ics.join(" "));
    let _ = writeln!(s, ".options reltol=1e-6 abstol=1e-15 vntol=1e-9");
    (s, watch)
}

/// Run ngspice on the netlist with a transient to `stop` seconds in steps of at most `step`,
/// and return the time the last watched capacitor falls to 60 V.
fn ngspice_time(text: &str, watch: usize, stop: f64, step: f64, name: &str) -> f64 {
    let text = format!("{text}.tran {step} {stop} 0 {step} uic\n.end\n");
    let stdout = ngspice_batch(&text, &temp_dir(name), "bleed");
    let times: Vec<f64> = stdout
        .lines()
        .filter_map(|l| {
            let (k, v) = l.split_once('=')?;
            let k = k.trim();
            (k.starts_with('t') && k[1..].parse::<usize>().is_ok())
                .then(|| v.split_whitespace().next()?.parse().ok())
                .flatten()
        })
        .collect();
    assert_eq!(
        times.len(),
        watch,
        "every watched capacitor crosses 60 V:\n{stdout}"
    );
    times.into_iter().fold(0.0, f64::max)
}

/// The multiplier-fed demo switched off with its supply still connected: the multiplier's
/// capacitors, taken together behind the filter resistor, and the filter capacitor discharge
/// through the divider. ngspice's transient of the same RC network reaches 60 V within 1 % of
/// the tool's time (the tool steps by 0.3 % of the elapsed time with backward Euler, an error
/// near 0.1 % in the time at three time constants).
#[test]
fn multiplier_bleed_down_matches_ngspice() {
    if !ngspice_available("multiplier_bleed_down_matches_ngspice") {
        return;
    }
    let d = design::load(&crate_path("designs/multiplier-fed.ron")).unwrap();
    let a = analysis::analyse(&d).unwrap();
    let ours = dynode::budget::safety::bleed_time(&d, &a.op, true).expect("bleeds");
    let (text, watch) = switched_off(&d, &a, false, false);
    let spice = ngspice_time(&text, watch.len(), 3.0 * ours, ours / 3000.0, "bleed-mult");
    assert!(rel(ours, spice) < 0.01, "ours {ours} s, ngspice {spice} s");
    // The whole figure is the worse of the two supply cases.
    assert!(a.safety.bleed_seconds.unwrap() >= ours * (1.0 - 1e-12));
}

/// The transistor-held demo switched off with its supply connected and the followers cut off
/// (the worse case on this base: conducting followers only add paths for the charge on their
/// dynodes): the divider and the tap string alone. ngspice within 1 %.
#[test]
fn tap_string_bleed_down_matches_ngspice() {
    if !ngspice_available("tap_string_bleed_down_matches_ngspice") {
        return;
    }
    let d = design::load(&crate_path("designs/transistor-held.ron")).unwrap();
    let a = analysis::analyse(&d).unwrap();
    let ours = dynode::budget::safety::bleed_time(&d, &a.op, true).expect("bleeds");
    assert!(
        a.safety.bleed_case.contains("followers cut off"),
        "{}",
        a.safety.bleed_case
    );
    let (text, watch) = switched_off(&d, &a, true, false);
    let spice = ngspice_time(
        &text,
        watch.len(),
        3.0 * ours,
        ours / 3000.0,
        "bleed-string",
    );
    assert!(rel(ours, spice) < 0.01, "ours {ours} s, ngspice {spice} s");
}

/// The transistor-held demo switched off with its supply connected and the followers
/// conducting: the followers keep D8–D10 one drop from their taps, which follow the falling
/// voltage across the base, so the charge of the capacitors on D9 and D10 leaves through the
/// transistors (at their current limit here). ngspice on the same circuit, each follower as
/// behavioural sources with the DC law (as the netlist writes them), within 1 %; and this case
/// is faster than the followers cut off (they only add paths for the charge).
#[test]
fn conducting_followers_bleed_down_matches_ngspice() {
    if !ngspice_available("conducting_followers_bleed_down_matches_ngspice") {
        return;
    }
    let d = design::load(&crate_path("designs/transistor-held.ron")).unwrap();
    let a = analysis::analyse(&d).unwrap();
    let ours = dynode::budget::safety::bleed_time_followers(&d, &a.op, true, true).expect("bleeds");
    let off = dynode::budget::safety::bleed_time_followers(&d, &a.op, true, false).expect("bleeds");
    assert!(ours < off, "conducting {ours} s, cut off {off} s");
    let (text, watch) = switched_off(&d, &a, true, true);
    let spice = ngspice_time(&text, watch.len(), 3.0 * ours, ours / 3000.0, "bleed-held");
    assert!(rel(ours, spice) < 0.01, "ours {ours} s, ngspice {spice} s");
}

/// Stored charge and energy of each multiplier capacitor: Q = C V and E = ½ C V² (definition
/// of capacitance), with the textbook Cockcroft–Walton no-load voltages — V_p on the first
/// capacitor of the oscillating column, 2 V_p on every other, 2 n V_p on the filter capacitor
/// (textbook high-voltage engineering, from memory).
#[test]
fn multiplier_stored_energy_is_half_c_v_squared() {
    let d = design::load(&crate_path("designs/multiplier-fed.ron")).unwrap();
    let a = analysis::analyse(&d).unwrap();
    let m = d.multiplier.as_ref().unwrap();
    let (c, vp, n) = (
        m.capacitance.get::<farad>(),
        m.amplitude.get::<volt>(),
        m.stages,
    );
    let cf = m.filter.unwrap().1.get::<farad>();
    let mut want: Vec<(String, f64, f64)> = Vec::new();
    for k in 1..=n {
        let v = if k == 1 { vp } else { 2.0 * vp };
        want.push((format!("multiplier C{k} (oscillating column)"), c, v));
        want.push((format!("multiplier C{k}' (smoothing column)"), c, 2.0 * vp));
    }
    want.push(("supply filter capacitor".into(), cf, 2.0 * n as f64 * vp));
    for (label, farads, volts) in &want {
        let s = a
            .safety
            .capacitors
            .iter()
            .find(|s| &s.label == label)
            .unwrap_or_else(|| panic!("{label} is not in the stored-charge table"));
        assert!(rel(s.coulombs, farads * volts) < 1e-12, "{label}");
        assert!(
            rel(s.joules, 0.5 * farads * volts * volts) < 1e-12,
            "{label}"
        );
    }
    let total: f64 = want.iter().map(|(_, c, v)| 0.5 * c * v * v).sum();
    assert!(a.safety.total_joules >= total * (1.0 - 1e-12));
}
