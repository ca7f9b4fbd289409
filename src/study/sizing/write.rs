//! The sized design as design-file text (with its comment block of requirements, reasoning
//! and gaps), and the terminal summary.

use std::fmt::Write as _;

use super::{CapChoice, GapChoice, Requirements, Sized};
use crate::design::{GainSpec, Polarity, TubeSpec};
use crate::units::format_eng;
use uom::si::capacitance::farad;
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

/// A quantity as design-file text, exact to 6 significant digits: `"470 kΩ"`, `"-1234.5 V"`.
pub(crate) fn exact(value: f64, unit: &str) -> String {
    if value == 0.0 || !value.is_finite() {
        return format!("0 {unit}");
    }
    let (scale, p) = crate::units::engineering_prefix(value.abs(), "u", 1.0 - 1e-9);
    let x = value / scale;
    // Six significant digits, trailing zeros dropped.
    let int_digits = (x.abs().log10().floor() as i32 + 1).max(1) as usize;
    let decimals = 6usize.saturating_sub(int_digits);
    let mut s = format!("{:.*}", decimals, x);
    if s.contains('.') {
        s = s.trim_end_matches('0').trim_end_matches('.').to_string();
    }
    let unit = if unit == "Ω" { "ohm" } else { unit };
    if p.is_empty() {
        format!("{s} {unit}")
    } else {
        format!("{s} {p}{unit}")
    }
}

fn tube_block(t: &TubeSpec) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "    tube: (");
    let _ = writeln!(s, "        stages: {},", t.stages);
    match &t.gain {
        GainSpec::Reference {
            volts,
            gain,
            exponent,
        } => {
            let _ = writeln!(
                s,
                "        gain: Reference(volts: \"{}\", gain: {:e}{}),",
                exact(volts.get::<volt>(), "V"),
                gain,
                exponent.map_or(String::new(), |k| format!(", exponent: Some({k})"))
            );
        }
        GainSpec::Table(points) => {
            let pts: Vec<String> = points
                .iter()
                .map(|(v, g)| format!("(\"{}\", {:e})", exact(v.get::<volt>(), "V"), g))
                .collect();
            let _ = writeln!(s, "        gain: Table(points: [{}]),", pts.join(", "));
        }
    }
    let ratio: Vec<String> = t.reference_ratio.iter().map(|x| format!("{x}")).collect();
    let _ = writeln!(s, "        reference_ratio: Some([{}]),", ratio.join(", "));
    if !t.collection_assumed {
        let _ = writeln!(s, "        collection: Some({}),", t.collection);
    }
    let _ = writeln!(s, "        limits: (");
    let _ = writeln!(
        s,
        "            max_supply: \"{}\",",
        exact(t.max_supply.get::<volt>(), "V")
    );
    if let Some(g) = t.max_gap {
        let _ = writeln!(
            s,
            "            max_gap: Some(\"{}\"),",
            exact(g.get::<volt>(), "V")
        );
    }
    let _ = writeln!(
        s,
        "            max_anode_current: \"{}\",",
        exact(t.max_anode_current.get::<ampere>(), "A")
    );
    let _ = writeln!(s, "        ),");
    if let Some((i, d, v)) = t.pulse_linearity {
        let _ = writeln!(
            s,
            "        pulse_linearity: Some((peak_current: \"{}\", deviation: Some({}), last_gap: \"{}\")),",
            exact(i.get::<ampere>(), "A"),
            d,
            exact(v.get::<volt>(), "V")
        );
    }
    let _ = writeln!(s, "    ),");
    s
}

fn comment(out: &mut String, text: &str) {
    let mut line = String::from("//");
    for word in text.split_whitespace() {
        if line.len() + word.len() + 1 > 98 && line.len() > 2 {
            let _ = writeln!(out, "{line}");
            line = String::from("//  ");
        }
        line.push(' ');
        line.push_str(word);
    }
    let _ = writeln!(out, "{line}");
}

pub(super) fn write_design(
    req: &Requirements,
    gaps: &[GapChoice],
    caps: &[CapChoice],
    v_set: f64,
    reasoning: &[String],
    charge: &Option<(f64, String)>,
    train: Option<&str>,
) -> String {
    let b = &req.base;
    let mut s = String::new();
    write_header(&mut s, req, gaps, caps, reasoning, charge);
    let _ = writeln!(s, "(");
    let _ = writeln!(s, "    name: {:?},", format!("{} (sized)", req.name));
    if let Some(notes) = &req.notes {
        let _ = writeln!(s, "    notes: Some({notes:?}),");
    }
    s.push_str(&tube_block(&b.tube));
    let sign = if b.polarity == Polarity::CathodeNegative {
        -1.0
    } else {
        1.0
    };
    write_supply(&mut s, req, sign * v_set);
    write_divider(&mut s, req, gaps, caps);
    write_load(&mut s, req);
    let _ = writeln!(
        s,
        "    resistors: Some((power: \"{}\", working_voltage: \"{}\", tolerance: Some({}))),",
        exact(b.resistors.power.get::<watt>(), "W"),
        exact(b.resistors.working_voltage.get::<volt>(), "V"),
        b.resistors.tolerance
    );
    let _ = writeln!(
        s,
        "    // Reported at the largest average anode current the base was sized for."
    );
    let _ = writeln!(
        s,
        "    operating: Some((anode_current: \"{}\")),",
        exact(req.max_average, "A")
    );
    if let Some(t) = train {
        let _ = writeln!(
            s,
            "    // The pulse the decoupling capacitors were sized for (time-domain solve)."
        );
        s.push_str(t);
    }
    let _ = writeln!(s, ")");
    s
}

/// The comment block: the cautions, the requirements, the reasoning, the gaps and capacitors.
fn write_header(
    s: &mut String,
    req: &Requirements,
    gaps: &[GapChoice],
    caps: &[CapChoice],
    reasoning: &[String],
    charge: &Option<(f64, String)>,
) {
    let b = &req.base;
    comment(
        s,
        &format!("Design sized by `dynode size` from {}.", req.source),
    );
    comment(
        s,
        "HIGH VOLTAGE: check every value against your own tube's data and your parts before building; switch off, wait the bleed-down time and discharge before touching.",
    );
    let _ = writeln!(s, "//");
    let _ = writeln!(s, "// Requirements:");
    comment(
        s,
        &format!(
            "  target small-signal gain {:.4e}; {} ratio",
            req.target_gain,
            req.ratio.name()
        ),
    );
    comment(
        s,
        &format!(
            "  largest average anode current {}{}{}{}; allowed DC gain deviation {:.2} %",
            format_eng(req.max_average, "A"),
            req.max_peak
                .map_or(String::new(), |i| format!(", peak {}", format_eng(i, "A"))),
            req.rate
                .map_or(String::new(), |r| format!(", rate {}", format_eng(r, "Hz"))),
            req.pulse_width.map_or(String::new(), |w| format!(
                ", pulse width {}",
                format_eng(w, "s")
            )),
            req.deviation * 100.0
        ),
    );
    comment(
        s,
        &format!(
            "  supply up to {} and {}{}",
            format_eng(req.supply_max_volts, "V"),
            format_eng(req.supply_max_current, "A"),
            req.max_dissipation.map_or(String::new(), |p| format!(
                "; base dissipation up to {}",
                format_eng(p, "W")
            ))
        ),
    );
    comment(
        s,
        &format!(
            "  resistors {} {:.1} %, {} / {} per part, derated to {:.0} % power{}",
            req.series,
            b.resistors.tolerance * 100.0,
            format_eng(b.resistors.power.get::<watt>(), "W"),
            format_eng(b.resistors.working_voltage.get::<volt>(), "V"),
            req.derating * 100.0,
            req.capacitors.map_or(String::new(), |(cs, d)| format!(
                "; capacitors {cs}, droop up to {:.2} % per pulse",
                d * 100.0
            ))
        ),
    );
    let _ = writeln!(s, "//");
    let _ = writeln!(s, "// Reasoning:");
    for r in reasoning {
        comment(s, &format!("  {r}"));
    }
    let _ = writeln!(s, "//");
    let _ = writeln!(s, "// Gaps (ideal share → snapped share, error):");
    for (j, g) in gaps.iter().enumerate() {
        let _ = writeln!(
            s,
            "//   {:>2} {:<8} {:>2} × {:<9} {:>6.3} % → {:>6.3} %  {:+.2} %  {:>9}  {:>9}",
            j + 1,
            g.label,
            g.parts,
            format_eng(g.each_ohms, "Ω"),
            g.ideal_share * 100.0,
            g.share * 100.0,
            g.error * 100.0,
            format_eng(g.volts, "V"),
            format_eng(g.watts, "W")
        );
    }
    if let Some((q, _)) = charge {
        for c in caps {
            let _ = writeln!(
                s,
                "//   capacitor across gap {}: {} rated {} (gives {} per pulse, droop {:.3} %); pulse charge {}",
                c.gap,
                format_eng(c.farads, "F"),
                format_eng(c.rating, "V"),
                format_eng(c.charge, "C"),
                c.droop * 100.0,
                format_eng(*q, "C")
            );
        }
    }
}

/// The supply block at the signed voltage `volts`.
fn write_supply(s: &mut String, req: &Requirements, volts: f64) {
    let b = &req.base;
    let _ = writeln!(s, "    supply: (");
    let _ = writeln!(s, "        volts: \"{}\",", exact(volts, "V"));
    let _ = writeln!(s, "        polarity: {:?},", b.polarity);
    let _ = writeln!(
        s,
        "        current_limit: Some(\"{}\"),",
        exact(req.supply_max_current, "A")
    );
    if let Some(c) = b.supply_capacitance {
        let _ = writeln!(
            s,
            "        output_capacitance: Some(\"{}\"),",
            exact(c.get::<farad>(), "F")
        );
    }
    if let Some(q) = b.supply_quality {
        let f = |x: Option<f64>| x.map_or("None".to_string(), |v| format!("Some({v})"));
        let _ = writeln!(
            s,
            "        quality: Some((ripple: {}, drift: {}, setting_accuracy: {}, gain_stability: {})),",
            q.ripple_volts.map_or("None".to_string(), |v| format!(
                "Some(\"{}\")",
                exact(v, "V")
            )),
            f(q.drift),
            f(q.setting_accuracy),
            f(q.gain_stability)
        );
    }
    let _ = writeln!(s, "    ),");
}

/// The divider block: the snapped parts, the capacitors across gaps and the stray.
fn write_divider(s: &mut String, req: &Requirements, gaps: &[GapChoice], caps: &[CapChoice]) {
    let b = &req.base;
    let _ = writeln!(s, "    divider: (");
    let elems: Vec<String> = gaps
        .iter()
        .map(|g| {
            let v = exact(g.each_ohms, "Ω");
            if g.parts > 1 {
                format!("Series({}, \"{v}\")", g.parts)
            } else {
                format!("R(\"{v}\")")
            }
        })
        .collect();
    let _ = writeln!(
        s,
        "        // One element per gap: K–D1 first, D{}–return last.",
        b.tube.stages
    );
    let _ = writeln!(s, "        gaps: [{}],", elems.join(", "));
    let _ = writeln!(s, "        decoupling: [");
    for c in caps {
        let _ = writeln!(
            s,
            "            Across(gap: {}, value: \"{}\", rating: Some(\"{}\")),",
            c.gap,
            exact(c.farads, "F"),
            exact(c.rating, "V")
        );
    }
    let _ = writeln!(s, "        ],");
    let _ = writeln!(
        s,
        "        stray: Some(\"{}\"),",
        exact(b.stray.get::<farad>(), "F")
    );
    let _ = writeln!(s, "    ),");
}

/// The load block as the requirements give it.
fn write_load(s: &mut String, req: &Requirements) {
    let b = &req.base;
    let _ = writeln!(s, "    load: (");
    let _ = writeln!(
        s,
        "        resistance: \"{}\",",
        b.load
            .resistance
            .map_or("open".to_string(), |r| exact(r.get::<ohm>(), "Ω"))
    );
    if let Some(r) = b.load.at_base {
        let _ = writeln!(
            s,
            "        at_base: Some(\"{}\"),",
            exact(r.get::<ohm>(), "Ω")
        );
    }
    let _ = writeln!(
        s,
        "        capacitance: Some(\"{}\"),",
        exact(b.load.capacitance.get::<farad>(), "F")
    );
    if let Some(r) = b.load.anode_resistor {
        let _ = writeln!(
            s,
            "        anode_resistor: Some(\"{}\"),",
            exact(r.get::<ohm>(), "Ω")
        );
    }
    if let Some((c, rating)) = b.load.coupling {
        let _ = writeln!(
            s,
            "        coupling: Some(\"{}\"),",
            exact(c.get::<farad>(), "F")
        );
        if let Some(r) = rating {
            let _ = writeln!(
                s,
                "        coupling_rating: Some(\"{}\"),",
                exact(r.get::<volt>(), "V")
            );
        }
    }
    let _ = writeln!(s, "    ),");
}

/// A short text summary of a sizing for the terminal.
pub fn summary(s: &Sized) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "SIZING");
    for r in &s.reasoning {
        crate::report::text::wrap(&mut out, "  * ", r);
    }
    let _ = writeln!(out);
    let _ = writeln!(out, "CHECKS on the sized design (core solve)");
    for c in &s.checks {
        let _ = writeln!(
            out,
            "  {:<4} {:<58} {:>18}  limit {}",
            if c.ok { "ok" } else { "FAIL" },
            c.what,
            c.value,
            c.limit
        );
    }
    out
}
