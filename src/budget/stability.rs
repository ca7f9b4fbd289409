//! Supply quality: ripple, drift and setting accuracy of the high-voltage supply turned into gain
//! changes, and the supply stability a stated gain stability needs.
//!
//! Equations: with `S = d ln G / d ln V` (the core's [`crate::solve::network::Network::gain_sensitivity`];
//! `S = k n` for an all-resistor divider, Ahmed §6.5: `dG/G = α n dV/V`),
//! - ripple of `ΔV` peak to peak modulates the gain by `S ΔV / V` peak to peak;
//! - a drift of `d` (fraction) moves the gain by `S d`; a setting error of `s` offsets it by `S s`
//!   (an offset the user calibrates away, not an instability);
//! - a gain stability `g` needs a supply stable to `g / S`, i.e. ripple plus drift within
//!   `g V / S` volts (worst-case sum).
//!
//! First order: valid while `S ΔV / V` is small (under a few per cent).

use crate::design::Design;

/// Gain stability used for the example line when the design states none (1 %).
pub const EXAMPLE_GAIN_STABILITY: f64 = 0.01;

/// Supply quality figures.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct SupplyStability {
    /// d ln G / d ln V.
    pub sensitivity: f64,
    /// Supply magnitude, volts.
    pub supply_volts: f64,
    /// Ripple, volts peak to peak (given).
    pub ripple_volts: Option<f64>,
    /// Gain modulation by the ripple, fraction peak to peak.
    pub ripple_gain: Option<f64>,
    /// Drift (given), fraction.
    pub drift: Option<f64>,
    /// Gain change by the drift, fraction.
    pub drift_gain: Option<f64>,
    /// Setting accuracy (given), fraction.
    pub setting_accuracy: Option<f64>,
    /// Gain offset by the setting accuracy, fraction.
    pub setting_gain: Option<f64>,
    /// Gain stability wanted (given, or the example 1 %), fraction.
    pub gain_stability: f64,
    /// Whether `gain_stability` was given in the design.
    pub gain_stability_given: bool,
    /// Supply stability that needs, fraction.
    pub needed_supply_stability: f64,
    /// The same in volts.
    pub needed_supply_volts: f64,
    /// Ripple plus drift against what is needed (only when both the stability and a ripple or
    /// drift are given).
    pub meets: Option<bool>,
}

/// Work out the supply quality figures for a design with gain sensitivity `sensitivity`.
pub fn assess(design: &Design, sensitivity: f64) -> SupplyStability {
    let q = design.supply_quality.unwrap_or_default();
    let v = design.supply_magnitude();
    let s = sensitivity.abs().max(1e-9);
    let gain_stability = q.gain_stability.unwrap_or(EXAMPLE_GAIN_STABILITY);
    let needed = gain_stability / s;
    let ripple_gain = q.ripple_volts.map(|r| s * r / v);
    let drift_gain = q.drift.map(|d| s * d);
    let meets = match (q.gain_stability, q.ripple_volts, q.drift) {
        (Some(_), None, None) => None,
        (Some(_), r, d) => Some(r.unwrap_or(0.0) / v + d.unwrap_or(0.0) <= needed),
        (None, _, _) => None,
    };
    SupplyStability {
        sensitivity,
        supply_volts: v,
        ripple_volts: q.ripple_volts,
        ripple_gain,
        drift: q.drift,
        drift_gain,
        setting_accuracy: q.setting_accuracy,
        setting_gain: q.setting_accuracy.map(|a| s * a),
        gain_stability,
        gain_stability_given: q.gain_stability.is_some(),
        needed_supply_stability: needed,
        needed_supply_volts: needed * v,
        meets,
    }
}
