//! A SPICE netlist of the very network the tool solves, for a general-purpose circuit simulator.
//!
//! Node names: `k` photocathode, `d1`…`dN` dynodes, `p` anode, `rtn` the return rail (ground for a
//! cathode-negative supply; `hv` for an anode-positive one, where the cathode is ground `0`).
//! The tube is a chain of behavioural sources (B-sources, as ngspice reads them): auxiliary nodes
//! `t1`…`tN+1` carry the electron current crossing each tube gap as a voltage (1 V = 1 A), with the
//! same secondary-emission law, smooth positive part and space-charge fold as [`crate::model::tube`];
//! current sources inject `t(j+1) - t(j)` into each dynode, `t1` into the cathode, and draw
//! `t(N+1)` from the anode. Zeners are behavioural too, with the solver's piecewise law.
//! Followers of transistor-held dynodes are behavioural current sources on a resistor tap string.

use std::fmt::Write;

use crate::design::train::Shape;
use crate::design::{CapStyle, Design, Element, Polarity};
use crate::model::tube::{SMOOTH_VOLTS, TubeModel};
use crate::solve::network::ZENER_LEAK_SIEMENS;
use uom::si::capacitance::farad;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;

/// What to put in the netlist's analysis section.
#[derive(Debug, Clone, PartialEq)]
pub struct NetlistOptions {
    /// Cathode (photo)current for the DC operating point, amperes.
    pub cathode_amps: f64,
    /// Add a `.control` block that runs `.op` and prints every electrode potential (for tests
    /// and for users who want numbers straight away).
    pub control_block: bool,
}

fn node(design: &Design, electrode: usize) -> String {
    // electrode 0 = K, 1..=n = dynodes, n+1 = anode, n+2 = return rail
    let n = design.tube.stages;
    let neg = design.polarity == Polarity::CathodeNegative;
    match electrode {
        0 if !neg => "0".to_string(),
        0 => "k".to_string(),
        e if e <= n => format!("d{e}"),
        e if e == n + 1 => "p".to_string(),
        _ if neg => "0".to_string(),
        _ => "hv".to_string(),
    }
}

fn num(x: f64) -> String {
    format!("{x:.12e}")
}

/// The potential of `electrode` relative to the cathode, as an ngspice expression.
pub fn relative_expr(design: &Design, electrode: usize) -> String {
    let k = node(design, 0);
    let e = node(design, electrode);
    if k == "0" {
        format!("v({e})")
    } else {
        format!("v({e},{k})")
    }
}

/// Write the netlist text.
pub fn write(design: &Design, tube: &TubeModel, opts: &NetlistOptions) -> String {
    let mut s = circuit(design, tube, Source::Dc(opts.cathode_amps));
    let n = design.tube.stages;
    let _ = writeln!(s, ".options reltol=1e-10 vntol=1e-12 abstol=1e-18");
    let _ = writeln!(s, ".op");
    if opts.control_block {
        let _ = writeln!(s, ".control");
        let _ = writeln!(s, "set numdgt=15");
        let _ = writeln!(s, "op");
        for e in 1..=n + 1 {
            let _ = writeln!(s, "print {}", relative_expr(design, e));
        }
        if let Some(f) = &design.followers {
            for d in &f.hold {
                let _ = writeln!(s, "print i(vfs{d}) i(vfo{d})");
            }
        }
        let _ = writeln!(s, "quit 0");
        let _ = writeln!(s, ".endc");
    }
    let _ = writeln!(s, ".end");
    s
}

/// The followers of a transistor-held base (docs/physics.md §14) and their tap string. The
/// string runs from the cathode to the return rail with a node `s<j>` at the fraction of the
/// rail where dynode j is held (its control tap lies one drop below, inside the law); each
/// follower is a behavioural current source with the solver's smooth limit,
/// `i = L·tanh((v(dj) − v(sj))/(L·r))`, sinking its positive part to the cathode through the
/// zero-volt source `vfs<j>` and sourcing its negative part from the return rail through
/// `vfo<j>`.
fn followers(s: &mut String, design: &Design, tube: &TubeModel, rtn: &str) {
    let Some(f) = &design.followers else {
        return;
    };
    let net = crate::solve::network::Network::from_design(design, tube.clone());
    let k = node(design, 0);
    let total = f.string.get::<ohm>();
    let _ = writeln!(
        s,
        "* Followers on {} (limit {} A, output resistance {} ohm, drop {} V) and their tap string.",
        f.hold
            .iter()
            .map(|d| format!("d{d}"))
            .collect::<Vec<_>>()
            .join(", "),
        num(f.current_limit.get::<uom::si::electric_current::ampere>()),
        num(f.output_resistance.get::<ohm>()),
        num(f.drop.get::<volt>()),
    );
    let mut below = k.clone();
    let mut frac = 0.0;
    for fl in &net.followers {
        let tap = format!("s{}", fl.dynode);
        let _ = writeln!(
            s,
            "RSTR{} {below} {tap} {}",
            fl.dynode,
            num(total * (fl.fraction - frac))
        );
        frac = fl.fraction;
        below = tap;
    }
    let _ = writeln!(s, "RSTRTOP {below} {rtn} {}", num(total * (1.0 - frac)));
    for fl in &net.followers {
        let d = fl.dynode;
        let lr = fl.limit * fl.output_resistance;
        let law = format!(
            "{l}*tanh((v(d{d})-v(s{d}))/{lr})",
            l = num(fl.limit),
            lr = num(lr)
        );
        let _ = writeln!(s, "VFS{d} d{d} xs{d} 0");
        let _ = writeln!(s, "BFS{d} xs{d} {k} I = max({law}, 0)");
        let _ = writeln!(s, "VFO{d} {rtn} xo{d} 0");
        let _ = writeln!(s, "BFO{d} xo{d} d{d} I = max(-{law}, 0)");
    }
}

/// How the cathode current enters the circuit.
enum Source<'a> {
    /// A constant, as `.param ik`.
    Dc(f64),
    /// A piecewise-linear voltage on node `ikn` (1 V stands for 1 A), and the supply's output
    /// resistance and capacitance.
    Pwl(&'a [(f64, f64)]),
}

/// The circuit: header, supply, divider, capacitors, load and tube sources.
fn circuit(design: &Design, tube: &TubeModel, source: Source) -> String {
    let n = design.tube.stages;
    let vs = design.supply_magnitude();
    let rtn = node(design, n + 2);
    let mut s = String::new();
    // User text on comment lines only, one line each: a line break in a name would start a
    // line that the simulator runs (a `.control` block can run shell commands).
    let _ = writeln!(
        s,
        "* dynode netlist: {}",
        crate::report::one_line(&design.name)
    );
    let _ = writeln!(
        s,
        "* from design file {}",
        crate::report::one_line(&design.source)
    );
    let _ = writeln!(
        s,
        "* HIGH VOLTAGE: this circuit describes a base that can kill. See SAFETY.md."
    );
    let _ = writeln!(
        s,
        "* Nodes: k = photocathode, d1..d{n} = dynodes, p = anode, {rtn} = return rail."
    );
    let _ = writeln!(
        s,
        "* t1..t{} carry the tube's gap currents as voltages (1 V stands for 1 A).",
        n + 1
    );
    let _ = writeln!(
        s,
        "* Tube law: delta = {} * sp(u_acc)^{} * sp(u_coll)^{}, sp(u) = (u + sqrt(u^2 + {}^2))/2; collection {};",
        num(tube.a),
        num(tube.k * (1.0 - tube.share)),
        num(tube.k * tube.share),
        SMOOTH_VOLTS,
        num(tube.collection)
    );
    let _ = writeln!(
        s,
        "* gap transmission: I_out = (1 - exp(-sp(u)/{} V)) I_in / (1 + (I_in / (P sp(u)^1.5))^4)^0.25, P = {} A/V^1.5.",
        num(tube.knee),
        num(tube.perveance)
    );
    let ik = match source {
        Source::Dc(amps) => {
            let _ = writeln!(s, ".param ik = {}", num(amps));
            "ik".to_string()
        }
        Source::Pwl(points) => {
            let _ = writeln!(
                s,
                "* Cathode current of the pulse train (1 V on ikn stands for 1 A)."
            );
            let _ = write!(s, "VIK ikn 0 PWL(");
            for (i, (t, v)) in points.iter().enumerate() {
                if i % 4 == 0 {
                    let _ = write!(s, "\n+");
                }
                let _ = write!(s, " {} {}", num(*t), num(*v));
            }
            let _ = writeln!(s, ")");
            "v(ikn)".to_string()
        }
    };
    let _ = writeln!(s, "* Supply: {} V magnitude, {:?}.", vs, design.polarity);
    let rs = design.supply_resistance.map(|r| r.get::<ohm>());
    let (plus, minus) = match design.polarity {
        Polarity::CathodeNegative => ("0", "k"),
        Polarity::AnodePositive => ("hv", "0"),
    };
    match rs {
        None => {
            let _ = writeln!(s, "VHV {plus} {minus} DC {}", num(vs));
        }
        Some(r) => {
            // The output resistance in series with the lead that is not ground.
            let _ = writeln!(
                s,
                "* Supply output resistance in series, output capacitance across the output."
            );
            match design.polarity {
                Polarity::CathodeNegative => {
                    let _ = writeln!(s, "VHV 0 ks DC {}", num(vs));
                    let _ = writeln!(s, "RSUP ks k {}", num(r));
                }
                Polarity::AnodePositive => {
                    let _ = writeln!(s, "VHV hvs 0 DC {}", num(vs));
                    let _ = writeln!(s, "RSUP hvs hv {}", num(r));
                }
            }
            if let Some(c) = design.supply_capacitance {
                let _ = writeln!(s, "CSUP {plus} {minus} {}", num(c.get::<farad>()));
            }
        }
    }
    let _ = writeln!(
        s,
        "* Divider: element j spans electrode j-1 to j; the last spans d{n} to the return rail."
    );
    for (j, e) in design.elements.iter().enumerate() {
        let bottom = node(design, j);
        let top = if j == n {
            rtn.clone()
        } else {
            node(design, j + 1)
        };
        match e {
            Element::Resistor(r) => {
                let _ = writeln!(s, "R{} {} {} {}", j + 1, bottom, top, num(r.get::<ohm>()));
            }
            Element::Zener(v, rz) => {
                let vz = v.get::<volt>();
                let rz = rz.get::<ohm>();
                let _ = writeln!(
                    s,
                    "BZ{} {top} {bottom} I = (v({top},{bottom}) > {vz}) ? ({leak}*{vz} + (v({top},{bottom}) - {vz})/{rz}) : ({leak}*v({top},{bottom}))",
                    j + 1,
                    vz = num(vz),
                    rz = num(rz),
                    leak = num(ZENER_LEAK_SIEMENS),
                );
            }
        }
    }
    followers(&mut s, design, tube, &rtn);
    let _ = writeln!(s, "* Stray capacitance per gap, and decoupling capacitors.");
    let stray = design.stray.get::<farad>();
    for j in 0..=n {
        let a = node(design, j);
        let b = node(design, j + 1);
        let _ = writeln!(s, "CS{} {a} {b} {}", j + 1, num(stray));
    }
    for (i, d) in design.decoupling.iter().enumerate() {
        let c = d.value.get::<farad>();
        match d.style {
            CapStyle::Across(g) => {
                let a = node(design, g - 1);
                let b = if g == n + 1 {
                    rtn.clone()
                } else {
                    node(design, g)
                };
                let _ = writeln!(s, "CD{} {a} {b} {}", i + 1, num(c));
            }
            CapStyle::ToReturn(k) => {
                let _ = writeln!(s, "CD{} {} {rtn} {}", i + 1, node(design, k), num(c));
            }
        }
    }
    signal_path(&mut s, design, &rtn);
    let _ = writeln!(s, "* Tube: gap currents.");
    // Smooth positive part, in the cancellation-free form for negative voltages (as the solver).
    let sp = |a: &str, b: &str| {
        format!(
            "((v({a},{b}) >= 0) ? (0.5*(v({a},{b}) + sqrt(v({a},{b})*v({a},{b}) + {w}))) : (0.5*{w}/(sqrt(v({a},{b})*v({a},{b}) + {w}) - v({a},{b}))))",
            w = num(SMOOTH_VOLTS * SMOOTH_VOLTS)
        )
    };
    let fold = |offered: &str, gap: &str| {
        format!(
            "(1 - exp(-{gap}/{vc}))*({offered})/pow(1 + pow(({offered})/({p}*pow({gap},1.5)),4),0.25)",
            p = num(tube.perveance),
            vc = num(tube.knee)
        )
    };
    for j in 1..=n + 1 {
        let a = node(design, j);
        let b = node(design, j - 1);
        let gap = sp(&a, &b);
        let offered = if j == 1 {
            ik.clone()
        } else {
            let pa = node(design, j - 1);
            let pb = node(design, j - 2);
            let eta = if j == 2 { tube.collection } else { 1.0 };
            // Dynode j-1: accelerated by the gap before it, collected by this gap.
            format!(
                "{}*{}*pow({},{})*pow({},{})*v(t{})",
                num(eta),
                num(tube.a),
                sp(&pa, &pb),
                num(tube.k * (1.0 - tube.share)),
                gap,
                num(tube.k * tube.share),
                j - 1
            )
        };
        let _ = writeln!(s, "BT{j} t{j} 0 V = {}", fold(&offered, &gap));
    }
    let _ = writeln!(s, "* Tube: currents injected into the electrodes.");
    let _ = writeln!(s, "BIK 0 {} I = v(t1)", node(design, 0));
    for j in 1..=n {
        let _ = writeln!(
            s,
            "BID{j} 0 {} I = v(t{}) - v(t{j})",
            node(design, j),
            j + 1
        );
    }
    let _ = writeln!(s, "BIP p 0 I = v(t{})", n + 1);
    s
}

/// The cathode current of a train as piecewise-linear points (time, amperes): exact corners
/// for a trapezoid; a smooth shape is sampled at 64 points over its support (linear
/// interpolation between them, an approximation the simulator then follows).
pub fn train_points(arrivals: &[f64], shape: &Shape, cathode_charge: f64) -> Vec<(f64, f64)> {
    let mut knots: Vec<f64> = match shape {
        Shape::Trapezoid(..) => shape.corners(),
        _ => (0..=64)
            .map(|i| shape.support() * i as f64 / 64.0)
            .collect(),
    };
    knots.dedup();
    let mut times: Vec<f64> = arrivals
        .iter()
        .flat_map(|a| knots.iter().map(move |k| a + k))
        .collect();
    times.sort_by(f64::total_cmp);
    times.dedup_by(|a, b| (*a - *b).abs() <= 1e-18);
    let support = shape.support();
    let mut out: Vec<(f64, f64)> = times
        .iter()
        .map(|t| {
            // Pulses active at t: arrivals in [t - support, t] (sorted: two binary searches,
            // so the writer is linear in the pulse count).
            let hi = arrivals.partition_point(|a| *a <= *t);
            let lo = arrivals.partition_point(|a| *a < *t - support);
            let i: f64 = arrivals[lo..hi.max(lo)]
                .iter()
                .map(|a| shape.value(t - a))
                .sum();
            (*t, i * cathode_charge)
        })
        .collect();
    // The simulator needs strictly rising times.
    out.dedup_by(|a, b| a.0 <= b.0);
    out
}

/// The signal path as wired: anode capacitance, anode resistor and coupling capacitor when
/// fitted, the resistor at the base, the cable as a lossless line, the termination and the
/// instrument's input R ∥ C. Node `p` is the anode, `load` the base side after a coupling
/// capacitor, `far` the instrument end of the cable.
fn signal_path(s: &mut String, design: &Design, rtn: &str) {
    let path = crate::budget::signal::circuit(design);
    let _ = writeln!(
        s,
        "* Signal path: {}.",
        crate::budget::signal::path_line(design).replace('\n', " ")
    );
    // The signal's ground: the return rail for a cathode-negative supply, else the cathode.
    let gnd = match design.polarity {
        Polarity::CathodeNegative => rtn.to_string(),
        Polarity::AnodePositive => "0".to_string(),
    };
    let _ = writeln!(s, "CA p {rtn} {}", num(path.anode_capacitance));
    let base = match (path.anode_resistance, path.coupling) {
        (Some(ra), Some(cc)) => {
            let _ = writeln!(s, "RA p {rtn} {}", num(ra));
            let _ = writeln!(s, "CC p load {}", num(cc));
            "load"
        }
        (Some(ra), None) => {
            let _ = writeln!(s, "RA p {rtn} {}", num(ra));
            "p"
        }
        (None, _) => "p",
    };
    if let Some(rb) = path.base_resistance {
        let _ = writeln!(s, "RB {base} {gnd} {}", num(rb));
    }
    let far = match path.cable {
        Some(l) => {
            let _ = writeln!(
                s,
                "TCABLE {base} {gnd} far {gnd} Z0={} TD={}",
                num(l.impedance),
                num(l.delay)
            );
            "far"
        }
        None => base,
    };
    if path.load_resistance.is_finite() {
        let _ = writeln!(s, "RL {far} {gnd} {}", num(path.load_resistance));
    }
    if path.load_capacitance > 0.0 {
        let _ = writeln!(s, "CL {far} {gnd} {}", num(path.load_capacitance));
    }
    if base != "p"
        && path.base_resistance.is_none()
        && path.cable.is_none()
        && !path.load_resistance.is_finite()
    {
        // A coupling capacitor into nothing: keep the node defined for the simulator.
        let _ = writeln!(s, "RLEAK load {gnd} 1e15");
    }
}

/// Ground-referenced node of the pulse signal: the load behind a coupling capacitor, else the
/// anode. For a cathode-negative supply the ground is the return rail; for an anode-positive
/// one the cathode.
pub fn signal_node(design: &Design) -> &'static str {
    if design.coupling.is_some() {
        "load"
    } else {
        "p"
    }
}

/// A transient netlist of the base under a pulse train: the same circuit as [`write`], with
/// the cathode current as a piecewise-linear source, the supply's output resistance and
/// capacitance, a `.tran` over the train, and (with `control_block`) one `meas` per pulse of the
/// signal's extreme in the pulse's window (`pk<i>`), and of the last divider element's voltage
/// at the end of the train (`vlast`).
pub fn write_transient(
    design: &Design,
    tube: &TubeModel,
    arrivals: &[f64],
    shape: &Shape,
    cathode_charge: f64,
    control_block: bool,
) -> String {
    let n = design.tube.stages;
    let points = train_points(arrivals, shape, cathode_charge);
    let mut s = circuit(design, tube, Source::Pwl(&points));
    let end = arrivals.last().copied().unwrap_or(0.0) + shape.support();
    // A step limit of half a pulse; the source's corners are breakpoints for the simulator.
    let tmax = shape.support() / 2.0;
    let _ = writeln!(
        s,
        ".options reltol=1e-6 abstol=1e-15 vntol=1e-9 chgtol=1e-20 method=gear maxord=2"
    );
    let _ = writeln!(s, ".tran {} {} 0 {}", num(tmax), num(end), num(tmax));
    if control_block {
        let sig = signal_node(design);
        let gnd = match design.polarity {
            Polarity::CathodeNegative => node(design, n + 2),
            Polarity::AnodePositive => "0".to_string(),
        };
        let sig_expr = if gnd == "0" {
            format!("v({sig})")
        } else {
            format!("v({sig},{gnd})")
        };
        let _ = writeln!(s, ".control");
        let _ = writeln!(s, "set numdgt=12");
        let _ = writeln!(s, "run");
        for (i, a) in arrivals.iter().enumerate() {
            let to = arrivals.get(i + 1).copied().unwrap_or(end);
            let _ = writeln!(
                s,
                "meas tran pk{} MIN {sig_expr} FROM={} TO={}",
                i + 1,
                num(*a),
                num(to)
            );
        }
        let top = node(design, n + 2);
        let bottom = node(design, n);
        let last = if top == "0" {
            format!("0 - v({bottom})")
        } else {
            format!("v({top}) - v({bottom})")
        };
        let _ = writeln!(s, "let vlastgap = {last}");
        let _ = writeln!(s, "meas tran vlast FIND vlastgap AT={}", num(end));
        let _ = writeln!(s, "quit 0");
        let _ = writeln!(s, ".endc");
    }
    let _ = writeln!(s, ".end");
    s
}

/// A transient netlist of the supply's voltage multiplier ([`crate::solve::multiplier`]) feeding
/// `load_ohms`, run for `periods` drive periods from the ideal no-load charges, with `meas`
/// lines over the last period: `vtop_max`, `vtop_pp` (the multiplier's output `s<n>`),
/// `vout_pp`, `vout_avg` (the output at the base). Node names: `drv` the drive,
/// `o1`…`o<n>` the oscillating column, `s1`…`s<n>` the smoothing column, `out` after the filter.
pub fn write_multiplier(
    mult: &crate::solve::multiplier::Multiplier,
    load_ohms: f64,
    periods: usize,
) -> String {
    use uom::si::frequency::hertz;
    let n = mult.stages;
    let c = mult.capacitance.get::<farad>();
    let f = mult.frequency.get::<hertz>();
    let vp = mult.amplitude.get::<volt>();
    let d = mult.diode;
    // Initial charges from the textbook's loaded state (not from our solve): every capacitor
    // at its ideal charge less the textbook drop, shared in proportion, the filter capacitor
    // less its resistor's drop too; ngspice then runs to its own steady state.
    let total = 2.0 * n as f64 * vp;
    let r_f = mult.filter.map_or(0.0, |(r, _)| r.get::<ohm>());
    let amps = total / (load_ohms + r_f);
    let (_, drop) = crate::solve::multiplier::textbook(mult, amps);
    let keep = ((total - drop) / total).clamp(0.05, 1.0);
    let mut s = String::new();
    let _ = writeln!(s, "* Voltage multiplier, {n} stage(s), written by dynode");
    let _ = writeln!(s, "vdrv drv 0 sin(0 {} {})", num(vp), num(f));
    let _ = writeln!(s, "co1 drv o1 {} ic={}", num(c), num(keep * vp));
    let _ = writeln!(s, "cs1 s1 0 {} ic={}", num(c), num(keep * 2.0 * vp));
    for k in 1..n {
        let ic = num(keep * 2.0 * vp);
        let _ = writeln!(s, "co{} o{k} o{} {} ic={ic}", k + 1, k + 1, num(c));
        let _ = writeln!(s, "cs{} s{k} s{} {} ic={ic}", k + 1, k + 1, num(c));
    }
    let _ = writeln!(s, "dg 0 o1 rect");
    for k in 1..=n {
        let _ = writeln!(s, "du{k} o{k} s{k} rect");
        if k < n {
            let _ = writeln!(s, "dd{k} s{k} o{} rect", k + 1);
        }
    }
    let top = format!("s{n}");
    let out = match mult.filter {
        Some((r, cf)) => {
            let _ = writeln!(s, "rf {top} out {}", num(r.get::<ohm>()));
            let _ = writeln!(
                s,
                "cf out 0 {} ic={}",
                num(cf.get::<farad>()),
                num(keep * total - amps * r_f)
            );
            "out".to_string()
        }
        None => top.clone(),
    };
    let _ = writeln!(s, "rload {out} 0 {}", num(load_ohms));
    let _ = writeln!(
        s,
        ".model rect d(is={} n={})",
        num(d.saturation_amps),
        num(d.emission)
    );
    let period = 1.0 / f;
    let stop = periods as f64 * period;
    let from = stop - period;
    let _ = writeln!(
        s,
        ".options reltol=1e-6 abstol=1e-12 vntol=1e-7 method=gear"
    );
    let _ = writeln!(
        s,
        ".tran {} {} 0 {} uic",
        num(period / 1000.0),
        num(stop),
        num(period / 1000.0)
    );
    for (name, what, node) in [
        ("vtop_max", "max", top.as_str()),
        ("vtop_pp", "pp", top.as_str()),
        ("vout_pp", "pp", out.as_str()),
        ("vout_avg", "avg", out.as_str()),
    ] {
        let _ = writeln!(
            s,
            ".meas tran {name} {what} v({node}) from={} to={}",
            num(from),
            num(stop)
        );
    }
    let _ = writeln!(s, ".end");
    s
}
