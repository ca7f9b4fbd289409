//! The plain-text report: cautions first, then the design, the gap table, gain, linearity,
//! safety, warnings and assumptions, and a closing caution last.

use std::fmt::Write;

use crate::analysis::Analysis;
use crate::budget::safety::{self, CAUTIONS, CLOSING_CAUTION};
use crate::design::{GainSpec, Polarity};
use crate::units::format_eng as eng;
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;

const RULE: &str =
    "================================================================================";
const THIN: &str =
    "--------------------------------------------------------------------------------";

/// Wrap `text` at 78 columns with a prefix on every line.
pub fn wrap(out: &mut String, prefix: &str, text: &str) {
    let width = 80usize.saturating_sub(prefix.chars().count()).max(20);
    let mut line = String::new();
    let mut first = true;
    for word in text.split_whitespace() {
        if !line.is_empty() && line.chars().count() + 1 + word.chars().count() > width {
            let p = if first {
                prefix.to_string()
            } else {
                " ".repeat(prefix.chars().count())
            };
            let _ = writeln!(out, "{p}{line}");
            line.clear();
            first = false;
        }
        if !line.is_empty() {
            line.push(' ');
        }
        line.push_str(word);
    }
    if !line.is_empty() {
        let p = if first {
            prefix.to_string()
        } else {
            " ".repeat(prefix.chars().count())
        };
        let _ = writeln!(out, "{p}{line}");
    }
}

/// The caution block that opens every text report.
pub fn caution_block(out: &mut String, a: &Analysis) {
    let _ = writeln!(out, "{RULE}");
    let _ = writeln!(out, "  !! HIGH-VOLTAGE CAUTION !!");
    let _ = writeln!(out, "{RULE}");
    for c in CAUTIONS {
        wrap(out, "  ! ", c);
    }
    for c in &a.safety.specific {
        wrap(out, "  ! ", c);
    }
    let _ = writeln!(out, "{RULE}");
}

fn pct(x: f64) -> String {
    format!("{:.1} %", x * 100.0)
}

fn opt_amps(x: Option<f64>) -> String {
    x.map_or_else(|| "not reached".to_string(), |v| eng(v, "A"))
}

/// Render the whole text report.
pub fn render(a: &Analysis) -> String {
    let mut out = String::new();
    let d = &a.design;
    caution_block(&mut out, a);
    let _ = writeln!(out);
    let _ = writeln!(out, "dynode report: {}", d.name);
    let _ = writeln!(out, "design file:   {}", d.source);
    if let Some(notes) = &d.notes {
        wrap(&mut out, "notes:         ", notes);
    }
    let _ = writeln!(out);
    design_text(&mut out, a);

    gaps_text(&mut out, a);

    dc_text(&mut out, a);

    crate::report::supply::text(&mut out, a);
    crate::report::active::text(&mut out, a);

    linearity_text(&mut out, a);

    safety_text(&mut out, a);

    super::train::text(&mut out, a);
    super::signal::render_text(&mut out, a);
    let _ = writeln!(out, "PARTS LIST");
    out.push_str(&crate::budget::parts::text(a));
    let _ = writeln!(out);

    let _ = writeln!(out, "WARNINGS");
    if a.warnings.is_empty() {
        let _ = writeln!(out, "  none");
    }
    for w in a.warnings.iter().map(|w| w.message.as_str()) {
        wrap(&mut out, "  * ", w);
    }
    if !a.assumptions.is_empty() {
        let _ = writeln!(out);
        let _ = writeln!(out, "ASSUMED (not given in the design)");
        for w in &a.assumptions {
            wrap(&mut out, "  - ", w);
        }
    }
    let _ = writeln!(out);
    let _ = writeln!(out, "{THIN}");
    wrap(&mut out, "  !! ", CLOSING_CAUTION);
    let _ = writeln!(out, "{THIN}");
    out
}

/// The DC linearity section: output against light, the ceiling, the model-dependent peak.
fn linearity_text(out: &mut String, a: &Analysis) {
    let l = &a.linearity;
    let rating = a
        .design
        .tube
        .max_anode_current
        .get::<uom::si::electric_current::ampere>();
    let _ = writeln!(
        out,
        "DC LINEARITY (output against light: gain deviation against the ideal anode current G0·I_k, {} points)",
        l.points.len()
    );
    let _ = writeln!(out, "  +1 % reached at    {}", opt_amps(l.plus_1pct));
    let _ = writeln!(out, "  -1 % reached at    {}", opt_amps(l.minus_1pct));
    let _ = writeln!(out, "  +5 % reached at    {}", opt_amps(l.plus_5pct));
    let _ = writeln!(out, "  -5 % reached at    {}", opt_amps(l.minus_5pct));
    match l.ceiling_amps {
        Some(c) => wrap(
            out,
            "  ceiling            ",
            &format!(
                "{}: the most anode current this divider delivers before its gain falls to half; past it the output no longer follows the light{}",
                eng(c, "A"),
                if c > rating {
                    format!(" (above the tube's {} rating)", eng(rating, "A"))
                } else {
                    String::new()
                }
            ),
        ),
        None => {
            let _ = writeln!(
                out,
                "  ceiling            not reached up to {} of anode current",
                eng(l.points.last().map_or(0.0, |p| p.anode_amps), "A")
            );
        }
    }
    if let Some(p) = l.peak_over {
        wrap(
            out,
            "  over-linearity     ",
            &format!(
                "largest {:+.2} % at {}{}; its height is model-dependent (set by how the tube model lets collection fail at a starved gap{}), the ±1 % and ±5 % onsets are not",
                p.deviation * 100.0,
                eng(p.anode_amps, "A"),
                if p.anode_amps > rating {
                    format!(", above the tube's {} rating", eng(rating, "A"))
                } else {
                    String::new()
                },
                match l.peak_over_stiff_knee {
                    Some((knee, dev)) => format!(
                        ": with a collection knee of {} instead of {} it is {:+.2} %",
                        eng(knee, "V"),
                        eng(a.network.tube.knee, "V"),
                        dev * 100.0
                    ),
                    None => String::new(),
                }
            ),
        );
    }
    if let Some(s) = &l.stopped {
        wrap(out, "  note: ", s);
    }
    let _ = writeln!(
        out,
        "  {:>12}  {:>12}  {:>10}",
        "ideal", "anode", "deviation"
    );
    let step = (l.points.len() / 12).max(1);
    for (i, p) in l.points.iter().enumerate() {
        let first_past = p.past_ceiling && (i == 0 || !l.points[i - 1].past_ceiling);
        if i % step != 0 && !first_past {
            continue;
        }
        let mut flags = Vec::new();
        if p.past_ceiling {
            flags.push("past the ceiling");
        }
        if p.anode_amps > rating {
            flags.push("above the tube's rating");
        }
        let _ = writeln!(
            out,
            "  {:>12}  {:>12}  {:>+9.3} %{}",
            eng(p.ideal_amps, "A"),
            eng(p.anode_amps, "A"),
            p.deviation * 100.0,
            if flags.is_empty() {
                String::new()
            } else {
                format!("  ({})", flags.join(", "))
            }
        );
        if first_past {
            break;
        }
    }
    let _ = writeln!(out);
}

/// The design as read: tube, limits, supply, divider, signal path, operating point.
fn design_text(out: &mut String, a: &Analysis) {
    let d = &a.design;
    let t = &a.network.tube;
    let _ = writeln!(out, "DESIGN");
    let law = match &d.tube.gain {
        GainSpec::Reference { volts, gain, .. } => format!(
            "calibrated on gain {gain:.3e} at {} under the reference ratio",
            eng(volts.get::<volt>(), "V")
        ),
        GainSpec::Table(p) => format!(
            "fitted to {} (voltage, gain) points, RMS residual {:.1} % in gain",
            p.len(),
            t.fit_rms.unwrap_or(0.0) * 100.0
        ),
    };
    let _ = writeln!(
        out,
        "  tube        {} dynodes; delta = a·V_acc^(k(1−s))·V_coll^(k·s) with a = {:.4}, k = {:.3}, s = {:.0} %; collection {:.0} %",
        t.stages,
        t.a,
        t.k,
        t.share * 100.0,
        t.collection * 100.0
    );
    let _ = writeln!(out, "              {law}");
    let _ = writeln!(
        out,
        "  limits      supply {}, gap {}, average anode current {}",
        eng(d.tube.max_supply.get::<volt>(), "V"),
        d.tube
            .max_gap
            .map_or_else(|| "not rated".to_string(), |v| eng(v.get::<volt>(), "V")),
        eng(d.tube.max_anode_current.get::<ampere>(), "A")
    );
    let _ = writeln!(
        out,
        "  supply      {} ({}), current limit {}",
        eng(d.supply_volts.get::<volt>(), "V"),
        match d.polarity {
            Polarity::CathodeNegative => "cathode negative, anode near ground",
            Polarity::AnodePositive => "cathode grounded, anode positive",
        },
        d.current_limit
            .map_or_else(|| "not given".to_string(), |i| eng(i.get::<ampere>(), "A"))
    );
    let total_r: f64 = a
        .gaps
        .iter()
        .map(|g| g.quiescent_volts / a.quiescent_amps)
        .sum();
    let _ = writeln!(
        out,
        "  divider     {} gaps, {} total; {} decoupling capacitor(s); stray {} per gap",
        a.gaps.len(),
        eng(total_r, "Ω"),
        d.decoupling.len(),
        eng(d.stray.get::<uom::si::capacitance::farad>(), "F")
    );
    let _ = writeln!(out, "  signal path {}", crate::budget::signal::path_line(d));
    let _ = writeln!(
        out,
        "  operating   average anode current {}",
        eng(a.op.anode_amps(), "A")
    );
    let _ = writeln!(out);
}

/// The gap table at the operating point.
fn gaps_text(out: &mut String, a: &Analysis) {
    let d = &a.design;
    let _ = writeln!(
        out,
        "GAPS at {} average anode current (no-current values in brackets)",
        eng(a.op.anode_amps(), "A")
    );
    let _ = writeln!(
        out,
        "  {:>2}  {:<8} {:<20} {:>9} {:>11} {:>7} {:>9} {:>19} {:>17} {:>6}",
        "#",
        "gap",
        "element",
        "volts",
        "(no curr.)",
        "share",
        "current",
        "power / rating",
        "volts / rated",
        "delta"
    );
    for g in &a.gaps {
        let power = match g.power_rating {
            Some(p) => format!("{} / {}", eng(g.watts, "W"), eng(p, "W")),
            None => eng(g.watts, "W"),
        };
        let volts = match g.rated_volts {
            Some(u) => format!("{} / {}", eng(g.volts, "V"), eng(u, "V")),
            None => "Zener".to_string(),
        };
        let mut flags = String::new();
        if g.over_power {
            flags.push_str(" POWER!");
        }
        if g.over_voltage {
            flags.push_str(" VOLTS!");
        }
        if g.over_gap_limit {
            flags.push_str(" GAP-LIMIT!");
        }
        let _ = writeln!(
            out,
            "  {:>2}  {:<8} {:<20} {:>9} {:>11} {:>7} {:>9} {:>19} {:>17} {:>6}{}",
            g.number,
            g.label,
            g.element,
            eng(g.volts, "V"),
            format!("({})", eng(g.quiescent_volts, "V")),
            pct(g.share),
            eng(g.amps, "A"),
            power,
            volts,
            g.delta
                .map_or_else(|| "—".to_string(), |x| format!("{x:.2}")),
            flags
        );
    }
    let _ = writeln!(
        out,
        "  The last gap's resistor sets the D{}–anode voltage; that gap collects and does not multiply.",
        d.tube.stages
    );
    let _ = writeln!(out);
}

/// Divider current, supply current and dissipation; the gain at the operating point.
fn dc_text(out: &mut String, a: &Analysis) {
    let _ = writeln!(out, "DIVIDER AND SUPPLY");
    let ia = a.op.anode_amps();
    let _ = writeln!(
        out,
        "  divider current with no tube current   {}  ({:.0}× the operating anode current)",
        eng(a.quiescent_amps, "A"),
        a.quiescent_amps / ia
    );
    let _ = writeln!(
        out,
        "  supply current at the operating point  {}",
        eng(a.op.supply_amps(), "A")
    );
    let _ = writeln!(
        out,
        "  base dissipation                       {}",
        eng(a.dissipation(), "W")
    );
    let _ = writeln!(out);

    let _ = writeln!(out, "GAIN");
    let dev = a.gain() / a.small_signal_gain - 1.0;
    let _ = writeln!(
        out,
        "  small-signal gain                      {:.4e}",
        a.small_signal_gain
    );
    let _ = writeln!(
        out,
        "  gain at the operating point            {:.4e}  ({:+.3} %)",
        a.gain(),
        dev * 100.0
    );
    let _ = writeln!(
        out,
        "  cathode current at the operating point {}",
        eng(a.op.cathode_amps, "A")
    );
    let _ = writeln!(
        out,
        "  d ln G / d ln V                        {:.2}  (a 0.1 % supply change moves the gain {:.2} %)",
        a.sensitivity,
        a.sensitivity * 0.1
    );
    let _ = writeln!(
        out,
        "  excess noise factor of the chain       {:.3}",
        a.network.tube.excess_noise_factor(&a.op.tube_gap_volts())
    );
    let _ = writeln!(out);
}

/// Stored charge and energy, bleed-down, Zener power and shield touch current.
fn safety_text(out: &mut String, a: &Analysis) {
    let s = &a.safety;
    let _ = writeln!(out, "SAFETY");
    let _ = writeln!(
        out,
        "  {:<34} {:>9} {:>9} {:>10} {:>10} {:>9}",
        "stored charge", "C", "holds", "charge", "energy", "rating"
    );
    for c in &s.capacitors {
        let _ = writeln!(
            out,
            "  {:<34} {:>9} {:>9} {:>10} {:>10} {:>9}",
            c.label,
            eng(c.farads, "F"),
            eng(c.volts, "V"),
            eng(c.coulombs, "C"),
            eng(c.joules, "J"),
            c.rating_volts
                .map_or_else(|| "—".to_string(), |r| eng(r, "V"))
        );
    }
    if s.capacitors.is_empty() {
        let _ = writeln!(out, "  (no capacitors named besides the strays)");
    }
    let _ = writeln!(
        out,
        "  total                               {:>28} {:>10}",
        eng(s.total_coulombs, "C"),
        eng(s.total_joules, "J")
    );
    let _ = writeln!(
        out,
        "  limits quoted: {} µC touchable charge, {} mJ energy (IEC 61010-1 §6.3.1, from memory)",
        safety::CHARGE_LIMIT_COULOMBS * 1e6,
        safety::ENERGY_LIMIT_JOULES * 1e3
    );
    if s.never_bleeds.is_empty() {
        let _ = writeln!(
            out,
            "  bleed-down to {:.0} V after switch-off: {} (worst case: {}; threshold IEC 60204-1 §6.2.4, from memory)",
            safety::SAFE_VOLTS,
            s.bleed_seconds
                .map_or_else(|| "over an hour".to_string(), |t| eng(t, "s")),
            s.bleed_case
        );
    } else {
        wrap(
            out,
            "  bleed-down         ",
            &format!(
                "NEVER through the divider for the {}: nothing discharges it below {:.0} V (fit a bleeder resistor)",
                s.never_bleeds.join(", the "),
                safety::SAFE_VOLTS
            ),
        );
    }
    for v in &s.verdicts {
        wrap(
            out,
            "  judged             ",
            &format!(
                "{}: {}, {}: {} {}",
                v.place,
                eng(v.coulombs, "C"),
                eng(v.joules, "J"),
                if v.over { "OVER," } else { "within," },
                v.clause
            ),
        );
    }
    for &(g, w, rating) in &s.zener_power {
        let _ = writeln!(
            out,
            "  Zener on gap {g}: {} of its {} rating{}",
            eng(w, "W"),
            eng(rating, "W"),
            if w > rating { "  OVER" } else { "" }
        );
    }
    if let Some(i) = s.shield_touch_amps {
        let _ = writeln!(
            out,
            "  shield touch current: {} (limit {} DC, IEC 61010-1 §6.3.1, from memory)",
            eng(i, "A"),
            eng(safety::TOUCH_CURRENT_DC_AMPS, "A")
        );
    }
    let _ = writeln!(out);
}
