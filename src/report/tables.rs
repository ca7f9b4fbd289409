//! The report's content as labelled rows and tables, shared by the HTML and Markdown renderers.

use crate::analysis::Analysis;
use crate::budget::safety;
use crate::design::{GainSpec, Polarity};
use crate::units::format_eng as eng;
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;

/// A table: column headers and rows of cells.
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    /// Column headers.
    pub head: Vec<String>,
    /// Rows.
    pub rows: Vec<Vec<String>>,
}

fn kv(k: &str, v: String) -> Vec<String> {
    vec![k.to_string(), v]
}

fn pair_table(rows: Vec<Vec<String>>) -> Table {
    Table {
        head: vec!["".into(), "".into()],
        rows,
    }
}

/// The design summary.
pub fn design(a: &Analysis) -> Table {
    let d = &a.design;
    let t = &a.network.tube;
    let law = match &d.tube.gain {
        GainSpec::Reference { volts, gain, .. } => format!(
            "calibrated on gain {gain:.3e} at {}",
            eng(volts.get::<volt>(), "V")
        ),
        GainSpec::Table(p) => format!(
            "fitted to {} points, RMS residual {:.1} %",
            p.len(),
            t.fit_rms.unwrap_or(0.0) * 100.0
        ),
    };
    pair_table(vec![
        kv(
            "tube",
            format!(
                "{} dynodes; δ = a·V_acc^(k(1−s))·V_coll^(k·s), a = {:.4}, k = {:.3}, s = {:.0} %; collection {:.0} %; {law}",
                t.stages,
                t.a,
                t.k,
                t.share * 100.0,
                t.collection * 100.0
            ),
        ),
        kv(
            "limits",
            format!(
                "supply {}, gap {}, average anode current {}",
                eng(d.tube.max_supply.get::<volt>(), "V"),
                d.tube
                    .max_gap
                    .map_or_else(|| "not rated".into(), |v| eng(v.get::<volt>(), "V")),
                eng(d.tube.max_anode_current.get::<ampere>(), "A")
            ),
        ),
        kv(
            "supply",
            format!(
                "{} ({}), current limit {}",
                eng(d.supply_volts.get::<volt>(), "V"),
                match d.polarity {
                    Polarity::CathodeNegative => "cathode negative",
                    Polarity::AnodePositive => "cathode grounded, anode positive",
                },
                d.current_limit
                    .map_or_else(|| "not given".into(), |i| eng(i.get::<ampere>(), "A"))
            ),
        ),
        kv("signal path", crate::budget::signal::path_line(d)),
        kv(
            "operating at",
            format!("{} average anode current", eng(a.op.anode_amps(), "A")),
        ),
    ])
}

/// The gap table.
pub fn gaps(a: &Analysis) -> Table {
    let head = [
        "#",
        "gap",
        "element",
        "voltage",
        "no current",
        "share",
        "current",
        "power",
        "power rating",
        "rated voltage",
        "δ",
        "flags",
    ];
    let rows = a
        .gaps
        .iter()
        .map(|g| {
            let mut flags = Vec::new();
            if g.over_power {
                flags.push("power over rating");
            }
            if g.over_voltage {
                flags.push("voltage over rating");
            }
            if g.over_gap_limit {
                flags.push("over tube's gap limit");
            }
            vec![
                g.number.to_string(),
                g.label.clone(),
                g.element.clone(),
                eng(g.volts, "V"),
                eng(g.quiescent_volts, "V"),
                format!("{:.1} %", g.share * 100.0),
                eng(g.amps, "A"),
                eng(g.watts, "W"),
                g.power_rating.map_or_else(|| "—".into(), |p| eng(p, "W")),
                g.rated_volts.map_or_else(|| "—".into(), |u| eng(u, "V")),
                g.delta.map_or_else(|| "—".into(), |x| format!("{x:.2}")),
                flags.join(", "),
            ]
        })
        .collect();
    Table {
        head: head.iter().map(|s| s.to_string()).collect(),
        rows,
    }
}

/// Divider, supply and gain figures.
pub fn gain(a: &Analysis) -> Table {
    let ia = a.op.anode_amps();
    pair_table(vec![
        kv(
            "divider current (no tube current)",
            format!(
                "{} ({:.0}× the anode current)",
                eng(a.quiescent_amps, "A"),
                a.quiescent_amps / ia
            ),
        ),
        kv(
            "supply current at the operating point",
            eng(a.op.supply_amps(), "A"),
        ),
        kv("base dissipation", eng(a.dissipation(), "W")),
        kv("small-signal gain", format!("{:.4e}", a.small_signal_gain)),
        kv(
            "gain at the operating point",
            format!(
                "{:.4e} ({:+.3} %)",
                a.gain(),
                (a.gain() / a.small_signal_gain - 1.0) * 100.0
            ),
        ),
        kv("cathode current", eng(a.op.cathode_amps, "A")),
        kv(
            "d ln G / d ln V",
            format!(
                "{:.2} (a 0.1 % supply change moves the gain {:.2} %)",
                a.sensitivity,
                a.sensitivity * 0.1
            ),
        ),
    ])
}

/// Linearity limits.
pub fn linearity(a: &Analysis) -> Table {
    let l = &a.linearity;
    let f = |x: Option<f64>| x.map_or_else(|| "not reached".into(), |v| eng(v, "A"));
    let mut rows = vec![
        kv("+1 % reached at", f(l.plus_1pct)),
        kv("−1 % reached at", f(l.minus_1pct)),
        kv("+5 % reached at", f(l.plus_5pct)),
        kv("−5 % reached at", f(l.minus_5pct)),
    ];
    rows.push(kv(
        "ceiling (most anode current the divider delivers)",
        l.ceiling_amps
            .map_or_else(|| "not reached in the traced range".into(), |c| eng(c, "A")),
    ));
    if let Some(p) = l.peak_over {
        rows.push(kv(
            "largest over-linearity (model-dependent height)",
            format!(
                "{:+.2} % at {}",
                p.deviation * 100.0,
                eng(p.anode_amps, "A")
            ),
        ));
    }
    if let Some(s) = &l.stopped {
        rows.push(kv("note", s.clone()));
    }
    pair_table(rows)
}

/// Stored charge per capacitor.
pub fn stored_charge(a: &Analysis) -> Table {
    let s = &a.safety;
    let mut rows: Vec<Vec<String>> = s
        .capacitors
        .iter()
        .map(|c| {
            vec![
                c.label.clone(),
                eng(c.farads, "F"),
                eng(c.volts, "V"),
                eng(c.coulombs, "C"),
                eng(c.joules, "J"),
                c.rating_volts.map_or_else(|| "—".into(), |r| eng(r, "V")),
            ]
        })
        .collect();
    rows.push(vec![
        "total".into(),
        String::new(),
        String::new(),
        eng(s.total_coulombs, "C"),
        eng(s.total_joules, "J"),
        String::new(),
    ]);
    Table {
        head: ["capacitor", "C", "holds", "charge", "energy", "rating"]
            .iter()
            .map(|s| s.to_string())
            .collect(),
        rows,
    }
}

/// Safety figures besides the capacitor table.
pub fn safety_facts(a: &Analysis) -> Vec<String> {
    let s = &a.safety;
    let mut v = vec![
        format!(
            "Limits quoted: {} µC touchable charge, {} mJ stored energy (IEC 61010-1 §6.3.1, from memory).",
            safety::CHARGE_LIMIT_COULOMBS * 1e6,
            safety::ENERGY_LIMIT_JOULES * 1e3
        ),
        format!(
            "Bleed-down to {:.0} V after switch-off: {} (worst case: {}; threshold IEC 60204-1 §6.2.4, from memory).",
            safety::SAFE_VOLTS,
            s.bleed_seconds
                .map_or_else(|| "over an hour".into(), |t| eng(t, "s")),
            s.bleed_case
        ),
    ];
    if let Some(i) = s.shield_touch_amps {
        v.push(format!(
            "Shield touch current: {} (limit {} DC, IEC 61010-1 §6.3.1, from memory).",
            eng(i, "A"),
            eng(safety::TOUCH_CURRENT_DC_AMPS, "A")
        ));
    }
    v
}

/// All cautions in order: the general ones, then this design's.
pub fn cautions(a: &Analysis) -> Vec<String> {
    safety::CAUTIONS
        .iter()
        .map(|c| c.to_string())
        .chain(a.safety.specific.iter().cloned())
        .collect()
}

/// The parts list as document blocks (HTML and Markdown): one table row per line of identical
/// parts, ratings to order beside what each part sees, the units in the column headers.
pub fn parts_blocks(a: &Analysis) -> Vec<crate::report::doc::Block> {
    use crate::report::doc::{Block, Column, Table, sig4};
    let lines = crate::budget::parts::list(a);
    let o = |x: Option<f64>, scale: f64| x.map_or("—".to_string(), |v| sig4(v / scale));
    let rows = lines
        .iter()
        .map(|l| {
            vec![
                crate::budget::parts::designator_text(&l.designators),
                l.count.to_string(),
                l.kind.word().to_string(),
                l.value_text(),
                l.series.unwrap_or("none").to_string(),
                format!(
                    "{}{}",
                    crate::units::show_number(l.tolerance * 100.0),
                    if l.tolerance_assumed {
                        " (assumed)"
                    } else {
                        ""
                    }
                ),
                o(l.watts, 1e-3),
                o(l.power_rating, 1e-3),
                sig4(l.volts),
                o(l.voltage_rating, 1.0),
                l.notes.join(" "),
            ]
        })
        .collect();
    vec![
        Block::Table(Table {
            columns: vec![
                Column::new("parts", ""),
                Column::new("count", ""),
                Column::new("kind", ""),
                Column::new("value", ""),
                Column::new("E-series", ""),
                Column::new("tolerance", "%"),
                Column::new("dissipation", "mW"),
                Column::new("power rating", "mW"),
                Column::new("highest voltage", "V"),
                Column::new("voltage rating", "V"),
                Column::new("notes", ""),
            ],
            rows,
        }),
        Block::Paragraph(format!(
            "Ratings: at least {}× the highest voltage a part sees (with or without the tube's current) and {}× its dissipation (common practice, from memory); the design's own ratings are kept where they meet that.",
            crate::budget::parts::VOLTAGE_MARGIN,
            crate::budget::parts::POWER_MARGIN
        )),
    ]
}
