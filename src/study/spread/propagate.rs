//! First-order propagation beside the Monte Carlo (`σ²_lnG ≈ Σ (∂lnG/∂p)² σ_p²`, standard
//! error propagation): each parameter's derivative of ln G by central differences with the
//! core (relative step 1e-4), its share of the variance, and its correlation with the samples.

use super::draw::{Draw, Model};
use super::sample::{Outcome, correlation};
use super::{Influence, SpreadConfig};
use crate::design::{Design, Element};

/// The influences, largest first, and the first-order relative spread of the gain.
pub(super) fn influences(
    design: &Design,
    cfg: &SpreadConfig,
    (rtol, setting, drift): (f64, f64, f64),
    model: &Model,
    outcomes: &[Outcome],
    ln_g0: &[f64],
) -> (Vec<Influence>, f64) {
    let infl = derivatives(design, cfg, (rtol, setting, drift), model);
    let total_var: f64 = infl.iter().map(|(_, s, d, _)| (s * d).powi(2)).sum();
    let mut influences: Vec<Influence> = infl
        .into_iter()
        .map(|(parameter, sigma, deriv, zi)| {
            let zs: Vec<f64> = outcomes.iter().map(|o| o.z[zi]).collect();
            let fo = (sigma * deriv).abs();
            Influence {
                parameter,
                sigma,
                first_order: fo,
                variance_share: if total_var > 0.0 {
                    fo * fo / total_var
                } else {
                    0.0
                },
                correlation: if sigma > 0.0 {
                    correlation(&zs, ln_g0)
                } else {
                    0.0
                },
            }
        })
        .collect();
    influences.sort_by(|a, b| b.first_order.total_cmp(&a.first_order));
    (influences, total_var.sqrt())
}

/// Each parameter's (name, σ, ∂lnG/∂p, index of its draw in `Outcome::z`).
fn derivatives(
    design: &Design,
    cfg: &SpreadConfig,
    (rtol, setting, drift): (f64, f64, f64),
    model: &Model,
) -> Vec<(String, f64, f64, usize)> {
    let n = design.tube.stages;
    let base_draw = Draw {
        parts: vec![1.0; n + 1],
        supply: 1.0,
        ln_gain: 0.0,
        dk: 0.0,
        caps: vec![1.0; design.decoupling.len()],
        string: vec![1.0; model.string.as_ref().map_or(0, |s| s.shares.len())],
        z: Vec::new(),
    };
    let lng = |d: &Draw| model.network(d).small_signal_gain().ln();
    let h = 1e-4;
    let mut infl: Vec<(String, f64, f64, usize)> = Vec::new();
    for j in 0..=n {
        let mut up = base_draw.clone();
        up.parts[j] = 1.0 + h;
        let mut dn = base_draw.clone();
        dn.parts[j] = 1.0 - h;
        let deriv = (lng(&up) - lng(&dn)) / ((1.0 + h).ln() - (1.0 - h).ln());
        let tol = match design.elements[j] {
            Element::Resistor(_) => rtol,
            Element::Zener(..) => cfg.zener_tolerance,
        };
        let what = match design.elements[j] {
            Element::Resistor(_) => format!("resistor, gap {} ({})", j + 1, design.gap_label(j)),
            Element::Zener(..) => format!("Zener voltage, gap {} ({})", j + 1, design.gap_label(j)),
        };
        infl.push((what, tol / cfg.sigmas, deriv, j));
    }
    let sens = model.net.gain_sensitivity();
    infl.push(("supply setting".into(), setting / cfg.sigmas, sens, n + 1));
    infl.push((
        "supply drift (uniform)".into(),
        drift / 3f64.sqrt(),
        sens,
        n + 2,
    ));
    infl.push((
        "tube gain (log-normal)".into(),
        cfg.tube_gain_sigma,
        1.0,
        n + 3,
    ));
    let mut up = base_draw.clone();
    up.dk = h;
    let mut dn = base_draw.clone();
    dn.dk = -h;
    infl.push((
        "exponent k".into(),
        cfg.exponent_sigma,
        (lng(&up) - lng(&dn)) / (2.0 * h),
        n + 4,
    ));
    for j in 0..base_draw.string.len() {
        let mut up = base_draw.clone();
        up.string[j] = 1.0 + h;
        let mut dn = base_draw.clone();
        dn.string[j] = 1.0 - h;
        let deriv = (lng(&up) - lng(&dn)) / ((1.0 + h).ln() - (1.0 - h).ln());
        infl.push((
            format!("tap-string resistor {}", j + 1),
            rtol / cfg.sigmas,
            deriv,
            n + 5 + j,
        ));
    }
    infl
}
