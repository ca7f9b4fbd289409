//! Pulse trains: the time-domain solve against ngspice on the same netlist, the definition of
//! capacitance with Kirchhoff's current law, first-order RC recovery, and the linear limit.

use crate::common::{meas, ngspice_available, ngspice_batch, rel, temp_dir};
use dynode::budget::pulsetrain::cathode_charge;
use dynode::design::{Design, parse_str};
use dynode::model::tube::TubeModel;
use dynode::report::netlist;
use dynode::solve::transient::{Base, Run, RunOptions};

/// A 10-stage chain with capacitors across the last three gaps (a test scenario of our own,
/// invented numbers). `{DECOUPLING}`, `{SIZE}`, `{PATTERN}` are filled in per test.
const CHAIN: &str = r#"(
    name: "test chain",
    tube: (
        stages: 10,
        gain: Reference(volts: "1000 V", gain: 1.0e6, exponent: Some(0.75)),
        reference_ratio: Some([2, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1]),
        collection: Some("90 %"),
        limits: (max_supply: "1500 V", max_gap: Some("300 V"), max_anode_current: "100 uA"),
        pulse_linearity: Some((peak_current: "30 mA", deviation: Some("2 %"), last_gap: "90 V")),
    ),
    supply: (volts: "-1100 V", polarity: CathodeNegative),
    divider: (
        gaps: [R("1M"), R("470k"), R("470k"), R("470k"), R("470k"), R("470k"),
               R("470k"), R("470k"), R("470k"), R("470k"), R("470k")],
        decoupling: [{DECOUPLING}],
    ),
    load: (resistance: "50 ohm", capacitance: Some("100 pF")),
    train: Some((
        size: {SIZE},
        shape: Trapezoid(rise: "5 ns", width: "20 ns", fall: "5 ns"),
        pattern: {PATTERN},
    )),
)"#;

const THREE_CAPS: &str = r#"Across(gap: 9, value: "2.2 nF", rating: Some("500 V")),
    Across(gap: 10, value: "4.7 nF", rating: Some("500 V")),
    Across(gap: 11, value: "10 nF", rating: Some("500 V"))"#;

fn chain(decoupling: &str, size: &str, pattern: &str) -> (Design, Base, f64) {
    let text = CHAIN
        .replace("{DECOUPLING}", decoupling)
        .replace("{SIZE}", size)
        .replace("{PATTERN}", pattern);
    solved(&text, "test-chain.ron")
}

/// The design read, its base, and the cathode charge of one pulse of its train at the
/// small-signal gain before the train.
fn solved(text: &str, name: &str) -> (Design, Base, f64) {
    let d = parse_str(text, name).expect("test design reads");
    let tube = TubeModel::from_spec(&d.tube).expect("tube calibrates");
    let base = Base::from_design(&d, tube);
    let (nv, _) = base.quiescent_state().expect("DC state");
    let gaps: Vec<f64> = (1..=d.tube.stages + 1).map(|j| nv[j] - nv[j - 1]).collect();
    let g0 = base.tube.gain_for_gaps(&gaps);
    let spec = d.train.clone().expect("train block");
    let qk = cathode_charge(spec.size, &spec.shape, g0);
    (d, base, qk)
}

fn run(d: &Design, base: &Base, qk: f64, opts: &RunOptions) -> Run {
    let spec = d.train.as_ref().unwrap();
    base.run(&spec.pattern.arrivals(), &spec.shape, qk, opts)
        .expect("the train solves")
}

#[test]
fn ngspice_agrees_on_twenty_pulses_at_one_microsecond() {
    if !ngspice_available("ngspice_agrees_on_twenty_pulses_at_one_microsecond") {
        return;
    }
    // Reference: ngspice transient (Gear, reltol 1e-6) on the netlist dynode writes for the
    // same base: behavioural dynode sources with the piecewise-linear cathode current, stray
    // and decoupling capacitors, load R‖C. Issue 4 asks 0.5 % on each pulse's peak anode
    // voltage and on the last gap's voltage at the end of the train.
    let (d, base, qk) = chain(
        THREE_CAPS,
        r#"Charge("1 nC")"#,
        r#"Periodic(count: 20, rate: "1 MHz")"#,
    );
    let r = run(
        &d,
        &base,
        qk,
        &RunOptions {
            recovery_band: None,
            ..RunOptions::default()
        },
    );
    let spec = d.train.as_ref().unwrap();
    let cir = netlist::write_transient(
        &d,
        &base.tube,
        &spec.pattern.arrivals(),
        &spec.shape,
        qk,
        true,
    );
    let stdout = ngspice_batch(&cir, &temp_dir("train-ngspice"), "train");
    assert_eq!(r.pulses.len(), 20);
    for (i, p) in r.pulses.iter().enumerate() {
        let spice = meas(&stdout, &format!("pk{}", i + 1));
        assert!(
            rel(p.peak_signal_volts, spice) < 0.005,
            "pulse {}: dynode {} V, ngspice {} V",
            i + 1,
            p.peak_signal_volts,
            spice
        );
    }
    let last = *r.elements_at_train_end.last().unwrap();
    let spice_last = meas(&stdout, "vlast");
    assert!(
        rel(last, spice_last) < 0.005,
        "last gap: dynode {last} V, ngspice {spice_last} V"
    );
    // The train must have moved the last gap measurably, or the comparison proves little.
    assert!(
        r.elements_initial[10] - last > 0.5,
        "the last gap barely moved"
    );
}

#[test]
fn charge_drawn_from_each_capacitor_is_its_voltage_step_times_c() {
    // Definition of capacitance, Q = C ΔV, with Kirchhoff's current law (charge conservation)
    // on the electrodes of the decoupled chain below each capacitor (docs/physics.md §5). During
    // a pulse far shorter than every R·C the resistors carry nothing worth counting, so the
    // charge capacitor g gives equals the net electron charge leaving those electrodes,
    // ∫(t_g − t_8) dt (gap 8's current enters the chain at D8), less what the strays at the
    // chain's ends take: 3 pF × the change of tube gap 8 (below D8, whose lower dynode D7 is
    // held by strays only and jumps) and, for the last, 3 pF × the change of gap 11 (D10–P).
    // The last capacitor gives about the anode charge Q (short of it by the charge entering at
    // D8, Q/δ³). Tolerance 1 %: the resistors carry about 1e-5 of the charge in 30 ns.
    let (d, base, qk) = chain(THREE_CAPS, r#"Charge("100 pC")"#, "Single");
    let r = run(
        &d,
        &base,
        qk,
        &RunOptions {
            recovery_band: None,
            ..RunOptions::default()
        },
    );
    let stray = 3e-12;
    let (u0, u1) = &r.tube_gaps;
    let du = |gap: usize| u1[gap - 1] - u0[gap - 1];
    // Capacitor across gap g ≤ 10 has the gap's own stray in parallel.
    let farads = [2.2e-9 + stray, 4.7e-9 + stray, 10e-9];
    let gaps = [9usize, 10, 11];
    for (k, (c, g)) in farads.iter().zip(gaps).enumerate() {
        let dv = r.caps[k].initial - r.caps[k].at_train_end;
        let mut q_cap = c * dv;
        // Charge on the strays crossing the cut: the bottom one (gap 8) and, for the last
        // capacitor, the Dn–P stray.
        q_cap += stray * du(8);
        if g == 11 {
            q_cap -= stray * du(11);
        }
        let q_tube = r.gap_charges[g - 1] - r.gap_charges[7];
        assert!(
            rel(q_cap, q_tube) < 0.01,
            "gap {g}: C·ΔV = {q_cap:e} C, tube {q_tube:e} C"
        );
    }
    let q_anode = r.gap_charges[10];
    let q_last = 10e-9 * (r.caps[2].initial - r.caps[2].at_train_end);
    assert!(
        rel(q_last, q_anode) < 0.05,
        "last capacitor {q_last:e} C vs anode charge {q_anode:e} C"
    );
}

#[test]
fn single_capacitor_recovers_with_the_thevenin_time_constant() {
    // First-order circuit theory: after a short pulse the voltage on a lone capacitor across
    // the last gap relaxes as exp(−t/RC), R the Thevenin resistance at its terminals with the
    // supply shorted: 470 kΩ in parallel with the other ten resistors in series (5.23 MΩ).
    // The strays (3 pF per gap) add fast modes that die within microseconds and shift the time
    // constant by under 1e-3. Check the deviation ratio between τ and 3τ: e^−2 within 0.5 %.
    let (d, base, qk) = chain(
        r#"Across(gap: 11, value: "10 nF", rating: Some("500 V"))"#,
        r#"Charge("200 pC")"#,
        "Single",
    );
    let r_th = 1.0 / (1.0 / 470e3 + 1.0 / (1e6 + 9.0 * 470e3));
    let tau = 10e-9 * r_th;
    let end = d.train.as_ref().unwrap().shape.support();
    let at = |t: f64| {
        let r = run(
            &d,
            &base,
            qk,
            &RunOptions {
                record: true,
                stop_at: Some(end + t),
                ..RunOptions::default()
            },
        );
        let s = r.samples.last().unwrap();
        assert!((s.t - end - t).abs() < 1e-9 * t);
        r.caps[0].initial - s.cap_volts[0]
    };
    let (d1, d3) = (at(tau), at(3.0 * tau));
    let ratio = d3 / d1;
    assert!(d1 > 1e-3, "the pulse must droop the capacitor ({d1} V)");
    assert!(
        rel(ratio, (-2.0f64).exp()) < 0.005,
        "ratio {ratio} vs e^-2 = {}",
        (-2.0f64).exp()
    );
}

#[test]
fn vanishing_pulses_keep_every_gain_ratio_at_one() {
    // Linear limit (the small-signal gain law, docs/physics.md §2): pulses of a millionth of a
    // photoelectron cannot move the gap voltages, so every pulse's gain equals the first's
    // to within 1e-9.
    let (d, base, qk) = chain(
        THREE_CAPS,
        "Photoelectrons(1e-6)",
        r#"Periodic(count: 20, rate: "1 MHz")"#,
    );
    let r = run(
        &d,
        &base,
        qk,
        &RunOptions {
            recovery_band: None,
            ..RunOptions::default()
        },
    );
    let g1 = r.pulses[0].gain();
    for (i, p) in r.pulses.iter().enumerate() {
        assert!(
            (p.gain() / g1 - 1.0).abs() < 1e-9,
            "pulse {}: ratio {}",
            i + 1,
            p.gain() / g1
        );
    }
    // And the first pulse has the small-signal gain of the DC model.
    assert!(
        rel(g1, r.initial_gain) < 1e-9,
        "first pulse gain {g1} vs small-signal {}",
        r.initial_gain
    );
}

/// The benchmark chain (bench/train-chain.ron) with another pattern.
fn bench_chain(pattern: &str) -> (Design, Base, f64) {
    let text = std::fs::read_to_string("bench/train-chain.ron").expect("benchmark design");
    let text = text.replace(r#"Periodic(count: 20, rate: "1 MHz")"#, pattern);
    solved(&text, "train-chain.ron")
}

#[test]
fn exact_quiet_intervals_match_the_step_by_step_solve() {
    // Reference: the step-by-step BDF2 solve through every quiet interval (the solver as it
    // was before quiet intervals were crossed exactly, kept as `exact_quiet: false`), an
    // independent integration of the same equations. Issue 11 asks every pulse's gain and the
    // capacitor voltages within 1e-4 relative, at 20 and 1000 pulses, 1 MHz and 5 kHz.
    // Both run at rtol_dev 3e-7: this chain is overdriven (1 mA average at 1 MHz against a
    // divider current of 0.19 mA, the last gap sags by 18 V), and at the default 3e-5 each
    // integrator's own error reaches 1e-4 on the later pulses' gains (measured: at 3e-8 the
    // two agree within 2e-6 on 200 pulses, at 3e-5 they differ by 1e-4).
    for pattern in [
        r#"Periodic(count: 20, rate: "1 MHz")"#,
        r#"Periodic(count: 1000, rate: "1 MHz")"#,
        r#"Periodic(count: 20, rate: "5 kHz")"#,
        r#"Periodic(count: 1000, rate: "5 kHz")"#,
    ] {
        let (d, base, qk) = bench_chain(pattern);
        let opts = RunOptions {
            recovery_band: None,
            rtol_dev: 3e-7,
            ..RunOptions::default()
        };
        let fast = run(&d, &base, qk, &opts);
        let slow = run(
            &d,
            &base,
            qk,
            &RunOptions {
                exact_quiet: false,
                ..opts
            },
        );
        assert!(fast.quiet_jumps > 0, "{pattern}: no quiet interval crossed");
        let (g1f, g1s) = (fast.pulses[0].gain(), slow.pulses[0].gain());
        for (i, (f, s)) in fast.pulses.iter().zip(&slow.pulses).enumerate() {
            assert!(
                rel(f.gain() / g1f, s.gain() / g1s) < 1e-4 && rel(f.gain(), s.gain()) < 1e-4,
                "{pattern}, pulse {}: {} against {}",
                i + 1,
                f.gain(),
                s.gain()
            );
        }
        for (k, (f, s)) in fast.caps.iter().zip(&slow.caps).enumerate() {
            assert!(
                rel(f.at_train_end, s.at_train_end) < 1e-4,
                "{pattern}, capacitor {k} at the end: {} V against {} V",
                f.at_train_end,
                s.at_train_end
            );
            let (lf, ls) = (f.initial - f.droop, s.initial - s.droop);
            assert!(
                rel(lf, ls) < 1e-4,
                "{pattern}, capacitor {k} lowest: {lf} V against {ls} V"
            );
        }
        for (f, s) in fast.window_cap_min.iter().zip(&slow.window_cap_min) {
            assert!(
                rel(*f, *s) < 1e-4,
                "{pattern}: window minimum {f} V against {s} V"
            );
        }
        for (f, s) in fast
            .elements_at_train_end
            .iter()
            .zip(&slow.elements_at_train_end)
        {
            assert!(
                rel(*f, *s) < 1e-4,
                "{pattern}: gap at the end {f} V against {s} V"
            );
        }
        eprintln!(
            "{pattern}: {} steps ({} quiet, {:?} mapped) against {}; worst gain ratio {:.6}",
            fast.steps.0,
            fast.quiet_jumps,
            fast.mapped_pulses,
            slow.steps.0,
            fast.pulses.last().unwrap().gain() / g1f
        );
    }
}

#[test]
fn periodic_steady_state_matches_a_train_run_to_ten_time_constants() {
    // Reference: brute force, the train itself run for ten of the base's slowest time
    // constants (what is left of the start is e^-10 = 4.5e-5 of it, and less once the pulses'
    // own spacing adds); its last pulse then sees the periodic steady state. Issue 11 asks
    // the shooting solution within 1e-4: the last pulse's gain over the first's, every
    // capacitor's voltage at the end of the pulse, every divider element before it.
    for rate in [5e3, 50e3] {
        let (d, base, qk) = bench_chain(r#"Periodic(count: 20, rate: "1 MHz")"#);
        let tau = base.slowest_time_constant().expect("modal form");
        let count = (10.0 * tau * rate).ceil() as usize + 1;
        let shape = d.train.as_ref().unwrap().shape;
        let arrivals: Vec<f64> = (0..count).map(|i| i as f64 / rate).collect();
        let brute = base
            .run(
                &arrivals,
                &shape,
                qk,
                &RunOptions {
                    recovery_band: None,
                    pulse_map: false,
                    ..RunOptions::default()
                },
            )
            .expect("train solves");
        let ss = base
            .periodic_steady_state(&[0.0], 1.0 / rate, &shape, qk)
            .expect("steady state");
        let g1 = brute.pulses[0].gain();
        let last = brute.pulses.last().unwrap().gain() / g1;
        let steady = ss.run.pulses[0].gain() / g1;
        assert!(
            rel(steady, last) < 1e-4,
            "{rate} Hz: steady gain ratio {steady}, brute force {last} after {count} pulses"
        );
        for (k, (a, b)) in ss.run.caps.iter().zip(&brute.caps).enumerate() {
            assert!(
                rel(a.at_train_end, b.at_train_end) < 1e-4,
                "{rate} Hz, capacitor {k}: {} V against {} V",
                a.at_train_end,
                b.at_train_end
            );
        }
        // Before the last pulse of the brute force: its window's start, found again by
        // running one pulse less.
        let before = base
            .run(
                &arrivals[..count - 1],
                &shape,
                qk,
                &RunOptions {
                    recovery_band: None,
                    stop_at: Some(arrivals[count - 1]),
                    pulse_map: false,
                    ..RunOptions::default()
                },
            )
            .expect("train solves");
        let gaps_ss = base.element_volts(&ss.start);
        let gaps_bf = base.element_volts(&before.final_state.1);
        for (a, b) in gaps_ss.iter().zip(&gaps_bf) {
            assert!(rel(*a, *b) < 1e-4, "{rate} Hz: gap {a} V against {b} V");
        }
        // The train must have moved the state, or the comparison proves little.
        assert!(
            rel(
                gaps_ss[10],
                base.element_volts(&base.quiescent_state().unwrap().0)[10]
            ) > 1e-3,
            "{rate} Hz: the last gap barely moved"
        );
        eprintln!(
            "{rate} Hz: {} periods solved, residual {:.1e} V, {count} pulses brute force, gain ratio {steady}",
            ss.iterations, ss.residual
        );
    }
}

#[test]
fn a_long_train_through_the_pulse_map_stays_on_the_periodic_steady_state() {
    // Reference: the periodic steady state solved by shooting (Newton on the one-period map,
    // each period a full single-pulse solve), an independent route to the same state. A train
    // of 100 000 pulses at 200 kHz (the gain settles near 58 % of the first pulse's), taken
    // almost entirely through the pulse map, must sit on it pulse after pulse once ten
    // slowest time constants have passed: every pulse's gain
    // within 1e-4, the capacitors at the end within 1e-4. A map that drifted or oscillated
    // between its checks (every 16th to 1024th pulse) would break this long before the end.
    let rate = 2e5;
    let (d, base, qk) = bench_chain(r#"Periodic(count: 100000, rate: "200 kHz")"#);
    let spec = d.train.as_ref().unwrap();
    let train = run(
        &d,
        &base,
        qk,
        &RunOptions {
            recovery_band: None,
            ..RunOptions::default()
        },
    );
    assert!(
        train.mapped_pulses.0 > 90_000,
        "the map took {} pulses",
        train.mapped_pulses.0
    );
    let ss = base
        .periodic_steady_state(&[0.0], 1.0 / rate, &spec.shape, qk)
        .expect("steady state");
    let g1 = train.pulses[0].gain();
    let steady = ss.run.pulses[0].gain() / g1;
    let tau = base.slowest_time_constant().expect("modal form");
    let settled = (10.0 * tau * rate).ceil() as usize;
    assert!(settled < 50_000, "ten time constants take {settled} pulses");
    for (i, p) in train.pulses.iter().enumerate().skip(settled) {
        assert!(
            rel(p.gain() / g1, steady) < 1e-4,
            "pulse {}: gain ratio {} against the steady state's {steady}",
            i + 1,
            p.gain() / g1
        );
    }
    for (k, (a, b)) in ss.run.caps.iter().zip(&train.caps).enumerate() {
        assert!(
            rel(a.at_train_end, b.at_train_end) < 1e-4,
            "capacitor {k}: {} V against {} V",
            a.at_train_end,
            b.at_train_end
        );
    }
    eprintln!(
        "100 000 pulses: {:?} mapped, steady gain ratio {steady}, settled after {settled}",
        train.mapped_pulses
    );
}

#[test]
fn poisson_droop_quantile_matches_a_seeded_brute_force() {
    // Reference: brute force, 10 000 Poisson pulses (SplitMix64, seed 7) through the full
    // time-domain solve; each pulse's droop is the drop of each capacitor's lowest voltage in
    // the pulse's window below its value before the train, counted after the first ten slowest
    // time constants. Issue 11 asks the 99th percentile within 5 % of the statistical model
    // (kicks on the pulse-free base at exponential intervals, its own seed and 200 000 pulses).
    let rate = 5e3;
    let (d, base, qk) = bench_chain(r#"Poisson(rate: "5 kHz", count: 10000, seed: 7)"#);
    let spec = d.train.as_ref().unwrap();
    let arrivals = spec.pattern.arrivals();
    let brute = base
        .run(
            &arrivals,
            &spec.shape,
            qk,
            &RunOptions {
                recovery_band: None,
                pulse_map: false,
                ..RunOptions::default()
            },
        )
        .expect("train solves");
    let ss = base
        .periodic_steady_state(&[0.0], 1.0 / rate, &spec.shape, qk)
        .expect("steady state");
    let (q99, _) = base
        .poisson_droop(&ss, &spec.shape, qk, rate, 0.99, 7, 200_000)
        .expect("statistics");
    let tau = base.slowest_time_constant().unwrap();
    let ncaps = brute.caps.len();
    for (k, cap) in brute.caps.iter().enumerate() {
        let mut drops: Vec<f64> = (0..arrivals.len())
            .filter(|i| arrivals[*i] > 10.0 * tau)
            .map(|i| cap.initial - brute.window_cap_min[i * ncaps + k])
            .collect();
        drops.sort_by(f64::total_cmp);
        let at = |p: f64| drops[(p * drops.len() as f64).ceil() as usize - 1];
        let (bf, spread) = (at(0.99), at(0.99) - at(0.01));
        // The two lower capacitors droop (their quantile is above half its spread):
        // within 5 % of the quantile. The top one (across gap 9) rises on average, the tube
        // current lifting the upper gaps, and its quantile sits near zero: within 5 % of the
        // spread between its 1st and 99th percentiles instead.
        let scale = if bf > 0.5 * spread { bf } else { spread };
        assert!(
            (q99[k] - bf).abs() < 0.05 * scale,
            "capacitor {k}: model {} V, brute force {bf} V (spread {spread} V)",
            q99[k]
        );
    }
}

#[test]
fn recommended_capacitors_do_not_depend_on_the_train_length_and_hold_the_rate() {
    // Issue 11: capacitor advice must not depend on how long a train was simulated (a 1 s
    // train once recommended less than a 0.1 s one). The recommendation is for the pattern
    // continuing for ever, so 20 pulses and a long train at 100 kHz give the same values.
    // Reference for "holds": brute force, the long train from rest through the full
    // time-domain solve with the
    // recommended values fitted; over the last 20 pulses (after ten of the slowest time
    // constants have passed, the base in its periodic state), each capacitor's drop within a
    // pulse's window below its value just before that pulse must stay within the allowed
    // droop of its gap, with 2 % for the fixed point's tolerance.
    // The benchmark chain's 1 nC pulses at 1 MHz (1 mA on average) saturate it: no steady
    // state exists and the sizing says so; 100 pC at 100 kHz (10 µA) it sustains.
    let sizing_for = |count: usize| {
        let text = std::fs::read_to_string("bench/train-chain.ron")
            .expect("benchmark design")
            .replace(
                r#"Periodic(count: 20, rate: "1 MHz")"#,
                &format!(r#"Periodic(count: {count}, rate: "100 kHz")"#),
            )
            .replace(r#"Charge("1 nC")"#, r#"Charge("100 pC")"#);
        assert!(text.contains("100 pC") && text.contains(&format!("count: {count}")));
        let d = parse_str(&text, "train-chain.ron").expect("reads");
        let tube = TubeModel::from_spec(&d.tube).unwrap();
        let t = dynode::budget::pulsetrain::analyse(&d, &tube, &Default::default())
            .unwrap()
            .unwrap();
        let s = t.sizing.expect("sizing");
        assert!(s.for_ever, "sized for the rate continuing");
        (d, s)
    };
    let (d20, short) = sizing_for(20);
    let tube = TubeModel::from_spec(&d20.tube).unwrap();
    let tau = Base::from_design(&d20, tube)
        .slowest_time_constant()
        .unwrap();
    // Enough pulses at 100 kHz to pass ten of the slowest time constants, and 20 more.
    let count = (10.0 * tau * 1e5).ceil() as usize + 20;
    assert!(count < 20_000, "{count} pulses");
    let (d, long) = sizing_for(count);
    for (a, b) in short.caps.iter().zip(&long.caps) {
        assert_eq!(a.preferred_farads, b.preferred_farads, "{}", a.label);
        assert!((a.needed_farads / b.needed_farads - 1.0).abs() < 1e-9);
    }
    let mut fitted = d.clone();
    for (c, s) in fitted.decoupling.iter_mut().zip(&long.caps) {
        c.value = uom::si::f64::Capacitance::new::<uom::si::capacitance::farad>(s.preferred_farads);
    }
    let tube = TubeModel::from_spec(&fitted.tube).unwrap();
    let base = Base::from_design(&fitted, tube);
    let (nv, _) = base.quiescent_state().unwrap();
    let gaps: Vec<f64> = (1..=11).map(|j| nv[j] - nv[j - 1]).collect();
    let g0 = base.tube.gain_for_gaps(&gaps);
    let spec = fitted.train.clone().unwrap();
    let qk = cathode_charge(spec.size, &spec.shape, g0);
    let arrivals = spec.pattern.arrivals();
    let tau = tau.max(base.slowest_time_constant().unwrap());
    assert!(
        arrivals[arrivals.len() - 20] > 10.0 * tau,
        "the base reaches its periodic state"
    );
    let run = base
        .run(
            &arrivals,
            &spec.shape,
            qk,
            &RunOptions {
                recovery_band: None,
                record: true,
                ..RunOptions::default()
            },
        )
        .unwrap();
    let ncaps = run.caps.len();
    for (k, s) in long.caps.iter().enumerate() {
        let gap = s.holds_volts;
        for i in arrivals.len() - 20..arrivals.len() {
            // The last recorded state before the pulse's arrival.
            let before = run
                .samples
                .iter()
                .rev()
                .find(|x| x.t <= arrivals[i])
                .expect("a sample before the pulse")
                .cap_volts[k];
            let drop = before - run.window_cap_min[i * ncaps + k];
            assert!(
                drop <= long.allowed * gap * 1.02,
                "{}: pulse {i} drops {drop} V of {gap} V",
                s.label
            );
        }
    }
}
