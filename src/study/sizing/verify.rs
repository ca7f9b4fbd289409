//! Every requirement checked on the analysed sized design (the core solve).

use super::{CapChoice, Check, Requirements, worst_deviation};
use crate::analysis::Analysis;
use crate::solve::network::Workspace;
use crate::units::format_eng;
use uom::si::electric_potential::volt;

/// Check every requirement on the analysed design (the core solve).
pub(crate) fn verify(
    req: &Requirements,
    a: &Analysis,
    caps: &[CapChoice],
    charge: Option<f64>,
) -> Vec<Check> {
    let mut out = Vec::new();
    let mut push = |what: String, value: String, limit: String, ok: bool| {
        out.push(Check {
            what,
            value,
            limit,
            ok,
        });
    };
    let g0 = a.small_signal_gain;
    let gerr = g0 / req.target_gain - 1.0;
    push(
        "small-signal gain".into(),
        format!("{g0:.4e} ({:+.3} %)", gerr * 100.0),
        format!("{:.4e} ± 0.1 %", req.target_gain),
        gerr.abs() <= 1e-3,
    );
    let mut ws = Workspace::default();
    let worst = worst_deviation(&a.network, req.max_average, &mut ws);
    push(
        "worst DC gain deviation up to the max average anode current".into(),
        worst.map_or("not reached".into(), |w| format!("{:.3} %", w * 100.0)),
        format!("{:.2} %", req.deviation * 100.0),
        worst.is_some_and(|w| w <= req.deviation),
    );
    let vs = a.design.supply_magnitude();
    let vmax = req
        .supply_max_volts
        .min(req.base.tube.max_supply.get::<volt>());
    push(
        "supply voltage".into(),
        format_eng(vs, "V"),
        format_eng(vmax, "V"),
        vs <= vmax,
    );
    let is = a.op.supply_amps();
    push(
        "supply current at the max average anode current".into(),
        format_eng(is, "A"),
        format_eng(req.supply_max_current, "A"),
        is <= req.supply_max_current,
    );
    let diss = a.dissipation();
    if let Some(p) = req.max_dissipation {
        push(
            "base dissipation".into(),
            format_eng(diss, "W"),
            format_eng(p, "W"),
            diss <= p,
        );
    }
    for g in &a.gaps {
        if let (Some(pr), Some(ur)) = (g.power_rating, g.rated_volts) {
            push(
                format!("gap {} ({}) power", g.number, g.label),
                format_eng(g.watts, "W"),
                format!(
                    "{} ({:.0} % of {})",
                    format_eng(pr * req.derating, "W"),
                    req.derating * 100.0,
                    format_eng(pr, "W")
                ),
                g.watts <= pr * req.derating,
            );
            push(
                format!("gap {} ({}) voltage", g.number, g.label),
                format_eng(g.volts, "V"),
                format_eng(ur, "V"),
                !g.over_voltage,
            );
        }
        if let Some(mg) = req.base.tube.max_gap {
            push(
                format!(
                    "gap {} ({}) against the tube's gap limit",
                    g.number, g.label
                ),
                format_eng(g.volts, "V"),
                format_eng(mg.get::<volt>(), "V"),
                !g.over_gap_limit,
            );
        }
    }
    if let (Some(_), Some((_, droop))) = (&a.design.train, req.capacitors) {
        // The pulse-train solve on the sized design itself, at the low end of the tolerance.
        let mut low = a.design.clone();
        for c in &mut low.decoupling {
            c.value *= 1.0 - req.capacitor_tolerance;
        }
        let opts = crate::budget::pulsetrain::TrainOptions {
            train_only: true,
            ..Default::default()
        };
        match crate::budget::pulsetrain::analyse(&low, &a.network.tube, &opts) {
            Ok(Some(t)) => {
                for d in &t.droop {
                    let f = d.droop_volts / d.gap_volts.abs().max(1e-9);
                    push(
                        format!(
                            "{} droop per pulse, time domain (capacitor at −{:.0} %)",
                            d.label,
                            req.capacitor_tolerance * 100.0
                        ),
                        format!("{:.3} %", f * 100.0),
                        format!("{:.2} %", droop * 100.0),
                        f <= droop,
                    );
                }
            }
            Ok(None) => {}
            Err(e) => push(
                "droop per pulse, time domain".into(),
                format!("solve failed: {e}"),
                format!("{:.2} %", droop * 100.0),
                false,
            ),
        }
    } else if let (Some(q), Some((_, droop))) = (charge, req.capacitors) {
        let _ = q;
        for c in caps {
            let v = a.gaps[c.gap - 1].quiescent_volts;
            let d = c.charge / (c.farads * (1.0 - req.capacitor_tolerance) * v);
            push(
                format!(
                    "gap {} droop per pulse (capacitor at −{:.0} %)",
                    c.gap,
                    req.capacitor_tolerance * 100.0
                ),
                format!("{:.3} %", d * 100.0),
                format!("{:.2} %", droop * 100.0),
                d <= droop,
            );
        }
    }
    out
}
