//! The pulse-train section as document blocks for the HTML and Markdown reports (the full
//! report and `dynode train`): the same facts as the text section ([`super::train::text`]) as
//! sub-headings, short paragraphs and tables with a unit per column.
//!
//! Pulses are numbered from 1, as in the text. Figures are printed by the project's
//! engineering formatting, so the HTML and Markdown show the digits the text shows.

use super::doc::{Block, Column, FigureTable, Table, eng_cells, eng_column};
use super::train::{shown_pulses, sizing_basis};
use crate::analysis::Analysis;
use crate::budget::pulsetrain::{self, TrainAnalysis};
use crate::budget::safety::{CHARGE_LIMIT_COULOMBS, ENERGY_LIMIT_JOULES};
use crate::design::train::PulseSize;
use crate::model::constants::ELEMENTARY_CHARGE;
use crate::units::format_eng as eng;

/// The section's blocks, `None` when the design gives no train.
pub fn blocks(a: &Analysis) -> Option<Vec<Block>> {
    let t = a.train.as_ref()?;
    let mut b = vec![Block::Paragraph(super::doc::sentence(
        &pulsetrain::describe(&t.spec),
    ))];
    summary(&mut b, t);
    if let Some(ss) = &t.steady {
        steady(&mut b, t, ss);
    }
    pulses(&mut b, t);
    droop(&mut b, t);
    linearity(&mut b, t);
    sizing(&mut b, t);
    taper(&mut b, t);
    b.push(Block::Paragraph(format!(
        "Note: time-domain solve of the whole base (BDF2, adaptive steps: {} accepted, {} rejected; {} of {} pulses through the pulse map, checked against full solves); the tube's currents follow the pulse and the instantaneous gap voltages (quasi-static gain and space-charge fold); transit time and the single-electron response are left out.",
        t.steps.0,
        t.steps.1,
        t.mapped_pulses,
        t.gain_ratio.len()
    )));
    Some(b)
}

fn summary(b: &mut Vec<Block>, t: &TrainAnalysis) {
    let mut f = FigureTable::new();
    let size = match t.spec.size {
        PulseSize::AnodeCharge(_) => "anode charge given",
        PulseSize::Photoelectrons(_) => "photoelectrons given",
        PulseSize::PeakAnodeCurrent(_) => "peak anode current given",
    };
    f.eng(
        "pulse size at the anode",
        t.nominal_anode_charge,
        "C",
        format!("at the small-signal gain ({size})"),
    );
    let pe = t.cathode_charge / ELEMENTARY_CHARGE;
    f.text(
        "photoelectrons at the cathode",
        if pe >= 10.0 {
            format!("{pe:.0}")
        } else {
            format!("{pe:.3}")
        },
        "per pulse",
        eng(t.cathode_charge, "C"),
    );
    let over = |avg: f64| {
        format!(
            "(tube rating {}){}",
            eng(t.rated_average_amps, "A"),
            if avg > t.rated_average_amps {
                ": OVER RATING"
            } else {
                ""
            }
        )
    };
    match (t.average_anode_amps, t.from_rest_average_anode_amps) {
        (Some(avg), rest) => {
            f.eng(
                "average anode current",
                avg,
                "A",
                format!(
                    "with the pattern repeated until the base settles {}",
                    over(avg)
                ),
            );
            if let Some(rest) = rest {
                f.eng(
                    "average anode current, from rest",
                    rest,
                    "A",
                    "over the train as given, the base starting at rest".to_string(),
                );
            }
        }
        (None, Some(rest)) => f.eng(
            "average anode current",
            rest,
            "A",
            format!("over the train, the base starting at rest {}", over(rest)),
        ),
        (None, None) => f.text("average anode current", "—", "", "a single pulse has none"),
    }
    f.eng(
        "peak anode current",
        t.peak_anode_amps,
        "A",
        format!(
            "pulse-linearity figure {} at {:.0} %{}",
            eng(t.rated_pulse.0, "A"),
            t.rated_pulse.1 * 100.0,
            if t.peak_anode_amps > t.rated_pulse.0 {
                ": ABOVE"
            } else {
                ""
            }
        ),
    );
    f.text(
        "gain of the first pulse",
        format!("{:.4e}", t.first_gain),
        "",
        format!(
            "{:+.3} % from the small-signal {:.4e}",
            (t.first_gain / t.initial_gain - 1.0) * 100.0,
            t.initial_gain
        ),
    );
    let (worst_i, worst) =
        t.gain_ratio
            .iter()
            .copied()
            .enumerate()
            .fold(
                (0, f64::INFINITY),
                |m, (i, g)| if g < m.1 { (i, g) } else { m },
            );
    f.text(
        "gain of the last pulse / first",
        format!("{:.3}", t.gain_ratio.last().copied().unwrap_or(1.0) * 100.0),
        "%",
        "",
    );
    f.text(
        "lowest gain / first",
        format!("{:.3}", worst * 100.0),
        "%",
        format!("at pulse {}", worst_i + 1),
    );
    match t.recovery_s {
        Some(r) => f.eng(
            "recovery after the train",
            r,
            "s",
            "until the gain stays within 0.1 % of its value before the train",
        ),
        None => f.text(
            "recovery after the train",
            "not within 0.1 %",
            "",
            format!("after {}", eng(t.recovery_horizon, "s")),
        ),
    }
    b.push(f.block());
}

fn steady(b: &mut Vec<Block>, t: &TrainAnalysis, ss: &pulsetrain::SteadyReport) {
    let what = match ss.kind {
        "poisson" => "arrivals at the mean rate for ever",
        "bursts" => "the bursts repeated for ever",
        _ => "the pulses repeated for ever",
    };
    b.push(Block::Heading(3, "Steady state".into()));
    b.push(Block::Paragraph(format!(
        "With {what} (solved in {} periods of {}), a pulse's gain is {:.3} % of the first pulse's.",
        ss.periods_solved,
        eng(ss.period_s, "s"),
        ss.gain_ratio * 100.0
    )));
    if t.droop.is_empty() {
        return;
    }
    let q = ss.droop_quantile_99.as_ref();
    let mut columns = vec![
        Column::new("capacitor", ""),
        Column::new("droop, of its gap", "%"),
        Column::new("shift before the pulse", "%"),
        Column::new("per pulse", "%"),
    ];
    if q.is_some() {
        columns.push(Column::new("droop exceeded by 1 % of pulses", "%"));
    }
    let rows = t
        .droop
        .iter()
        .enumerate()
        .map(|(k, d)| {
            let mut r = vec![
                d.label.clone(),
                format!("{:.3}", ss.droop_fraction[k] * 100.0),
                format!("{:.3}", ss.shift_fraction[k] * 100.0),
                format!("{:.3}", ss.pulse_droop_fraction[k] * 100.0),
            ];
            if let Some(q) = q {
                r.push(format!("{:.3}", q[k] * 100.0));
            }
            r
        })
        .collect();
    b.push(Block::Table(Table { columns, rows }));
    b.push(Block::Paragraph(
        "The shift is the DC drop at the average anode current, set by the divider current: no capacitor removes it (a larger divider current or actively held last stages do). The per-pulse part is set by the capacitors.".into(),
    ));
}

fn pulses(b: &mut Vec<Block>, t: &TrainAnalysis) {
    let shown = shown_pulses(t.gain_ratio.len());
    let arrivals = t.spec.pattern.arrivals();
    let (arrival, arrival_cells) = eng_column(
        "arrival",
        &shown
            .iter()
            .map(|&i| Some(arrivals.get(i).copied().unwrap_or(0.0)))
            .collect::<Vec<_>>(),
        "s",
        "—",
    );
    let (signal, signal_cells) = eng_column(
        "peak signal",
        &shown
            .iter()
            .map(|&i| Some(t.peak_signal_volts[i]))
            .collect::<Vec<_>>(),
        "V",
        "—",
    );
    let rows = shown
        .iter()
        .enumerate()
        .map(|(k, &i)| {
            vec![
                (i + 1).to_string(),
                arrival_cells[k].clone(),
                format!("{:.4}", t.gain_ratio[i] * 100.0),
                signal_cells[k].clone(),
            ]
        })
        .collect();
    b.push(Block::Heading(3, "Pulses".into()));
    b.push(Block::Table(Table {
        columns: vec![
            Column::new("pulse", ""),
            arrival,
            Column::new("gain / first", "%"),
            signal,
        ],
        rows,
    }));
}

fn droop(b: &mut Vec<Block>, t: &TrainAnalysis) {
    b.push(Block::Heading(
        3,
        "Decoupling capacitors over the train".into(),
    ));
    if t.droop.is_empty() {
        b.push(Block::Paragraph(
            "No decoupling capacitors to droop.".into(),
        ));
        return;
    }
    let d = &t.droop;
    let (c, c_cells) = eng_column(
        "C",
        &d.iter().map(|x| Some(x.farads)).collect::<Vec<_>>(),
        "F",
        "—",
    );
    let (gap, gap_cells) = eng_column(
        "gap",
        &d.iter().map(|x| Some(x.gap_volts)).collect::<Vec<_>>(),
        "V",
        "—",
    );
    let (worst, worst_cells) = eng_column(
        "worst droop",
        &d.iter().map(|x| Some(x.droop_volts)).collect::<Vec<_>>(),
        "V",
        "—",
    );
    let rows = d
        .iter()
        .enumerate()
        .map(|(k, x)| {
            vec![
                x.label.clone(),
                c_cells[k].clone(),
                gap_cells[k].clone(),
                worst_cells[k].clone(),
                format!(
                    "{:.3}",
                    100.0 * x.droop_volts / x.gap_volts.abs().max(1e-12)
                ),
                x.pulse
                    .map_or_else(|| "—".to_string(), |p| (p + 1).to_string()),
            ]
        })
        .collect();
    b.push(Block::Table(Table {
        columns: vec![
            Column::new("decoupling capacitor", ""),
            c,
            gap,
            worst,
            Column::new("of the gap", "%"),
            Column::new("at pulse", ""),
        ],
        rows,
    }));
}

fn linearity(b: &mut Vec<Block>, t: &TrainAnalysis) {
    let Some(pl) = &t.pulse_linearity else {
        return;
    };
    let sign = |s: f64| if s > 0.0 { "gain up" } else { "gain down" };
    b.push(Block::Heading(
        3,
        "Pulse linearity (single pulses of this shape, divider as built)".into(),
    ));
    let mut f = FigureTable::new();
    f.opt(
        "peak anode current at 1 % deviation",
        pl.pct1_amps,
        "A",
        "not reached",
        if pl.pct1_amps.is_some() {
            sign(pl.pct1_sign)
        } else {
            ""
        },
    );
    f.opt(
        "peak anode current at 5 % deviation",
        pl.pct5_amps,
        "A",
        "not reached",
        if pl.pct5_amps.is_some() {
            sign(pl.pct5_sign)
        } else {
            ""
        },
    );
    f.text(
        "one pulse of this train alone deviates",
        format!("{:+.3}", pl.train_pulse_deviation * 100.0),
        "%",
        "",
    );
    b.push(f.block());
}

fn sizing(b: &mut Vec<Block>, t: &TrainAnalysis) {
    let Some(s) = &t.sizing else {
        return;
    };
    b.push(Block::Heading(
        3,
        format!(
            "Capacitors for at most {:.1} % droop of each decoupled gap",
            s.allowed * 100.0
        ),
    ));
    b.push(Block::Paragraph(format!(
        "Droop from the pulses themselves, {}; the DC shift at the average current is the divider's and no capacitor removes it. Values from IEC 60063 E12.",
        sizing_basis(t, s)
    )));
    let c = &s.caps;
    let col = |label: &str, get: &dyn Fn(&pulsetrain::SizedCap) -> f64, unit: &str| {
        eng_column(
            label,
            &c.iter().map(|x| Some(get(x))).collect::<Vec<_>>(),
            unit,
            "—",
        )
    };
    let cols = [
        col("fitted", &|x| x.fitted_farads, "F"),
        col("needed", &|x| x.needed_farads, "F"),
        col("fit this", &|x| x.preferred_farads, "F"),
        col("rating at least", &|x| x.rating_volts, "V"),
        col("holds", &|x| x.holds_volts, "V"),
        col("energy", &|x| x.joules, "J"),
    ];
    let mut columns = vec![Column::new("place", "")];
    columns.extend(cols.iter().map(|x| x.0.clone()));
    let rows = c
        .iter()
        .enumerate()
        .map(|(i, x)| {
            let mut r = vec![x.label.clone()];
            r.extend(cols.iter().map(|col| col.1[i].clone()));
            r
        })
        .collect();
    b.push(Block::Table(Table { columns, rows }));
    b.push(Block::Paragraph(format!(
        "Ratings: {}× the voltage each capacitor holds (common practice), rounded up to a common rating. The recommended capacitors store {} in all ({} {} than the fitted ones); quoted limits {} mJ and {} µC (IEC 61010-1, from memory).{}",
        crate::model::eseries::CAPACITOR_RATING_MARGIN,
        eng(s.total_joules, "J"),
        eng(s.added_joules.abs(), "J"),
        if s.added_joules >= 0.0 { "more" } else { "less" },
        ENERGY_LIMIT_JOULES * 1e3,
        CHARGE_LIMIT_COULOMBS * 1e6,
        if s.verified {
            ""
        } else {
            " The check run with these values still exceeds the allowed droop: a larger value or more capacitors are needed."
        }
    )));
}

fn taper(b: &mut Vec<Block>, t: &TrainAnalysis) {
    let Some(tp) = &t.taper else {
        return;
    };
    let factors: Vec<String> = tp.factors.iter().map(|f| format!("{f}×")).collect();
    b.push(Block::Heading(3, "Taper".into()));
    b.push(Block::Paragraph(format!(
        "The last {} gap resistor(s) raised {}{}, same supply.",
        tp.factors.len(),
        factors.join(", "),
        if tp.assumed {
            " (the tool's default; set train.taper)"
        } else {
            ""
        }
    )));
    let mut rows = vec![vec![
        "small-signal gain".to_string(),
        String::new(),
        format!("{:.4e}", tp.gain.0),
        format!("{:.4e}", tp.gain.1),
        format!("{:+.1}", (tp.gain.1 / tp.gain.0 - 1.0) * 100.0),
    ]];
    let mut row = |what: &str, v: [Option<f64>; 2], unit: &str| {
        let (u, cells) = eng_cells(&v, unit, "not reached");
        let mut r = vec![what.to_string(), u];
        r.extend(cells);
        r.push(String::new());
        rows.push(r);
    };
    row(
        "last gap before the train",
        [Some(tp.last_gap_volts.0), Some(tp.last_gap_volts.1)],
        "V",
    );
    row(
        "1 % pulse-linearity limit",
        [tp.pct1_amps.0, tp.pct1_amps.1],
        "A",
    );
    row(
        "5 % pulse-linearity limit",
        [tp.pct5_amps.0, tp.pct5_amps.1],
        "A",
    );
    rows.push(vec![
        if tp.pulses_compared < t.count {
            "lowest pulse gain / first (200 pulses)"
        } else {
            "lowest pulse gain / first"
        }
        .to_string(),
        "%".to_string(),
        format!("{:.3}", tp.worst_gain_ratio.0 * 100.0),
        format!("{:.3}", tp.worst_gain_ratio.1 * 100.0),
        String::new(),
    ]);
    b.push(Block::Table(Table {
        columns: vec![
            Column::new("figure", ""),
            Column::new("unit", ""),
            Column::new("as built", ""),
            Column::new("tapered", ""),
            Column::new("change", "%"),
        ],
        rows,
    }));
}
