//! The design's whole-base checks: the operating point, the divider against the tube (gap
//! rating and gain with no tube current), and one pulse stream from the light and the train.

use serde::Deserialize;

use super::{
    Checker, DesignError, Element, SignalSpec, TubeSpec, Value, limits, linear_gap_voltages,
};
use crate::units;
use uom::si::electric_potential::volt;

/// Where the report evaluates the operating point.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawOperating {
    /// Average anode current.
    pub anode_current: Value,
}

/// The average anode current to report at: `operating.anode_current`, or a tenth of the tube's
/// rating (`max_anode`, amperes) when no operating block is given.
pub(crate) fn check_operating(
    c: &Checker,
    operating: Option<&RawOperating>,
    max_anode: f64,
) -> Result<f64, DesignError> {
    Ok(match operating {
        None => max_anode * 0.1,
        Some(o) => c.within(
            "operating.anode_current",
            &o.anode_current,
            &limits::ANODE_CURRENT,
        )?,
    })
}

/// The divider under the tube with no tube current: every gap within `tube.limits.max_gap`, and
/// the gain at `supply` volts a tube's gain (a gain law calibrated far from the supply, a 1 V
/// reference under a 100 kV supply, would otherwise give currents of hundreds of digits).
pub(crate) fn check_divider_on_tube(
    c: &Checker,
    tube: &TubeSpec,
    elements: &[Element],
    supply: f64,
) -> Result<(), DesignError> {
    // Zero-current gap voltages against the gap rating.
    if let Some(max_gap) = tube.max_gap.map(|v| v.get::<volt>())
        && let Some((i, v)) = linear_gap_voltages(elements, supply)
            .into_iter()
            .enumerate()
            .find(|(_, v)| *v > max_gap * 1.0000001)
    {
        return Err(c.fail(
            format!("divider.gaps[{i}]"),
            format!(
                "this gap would hold {} with no tube current, above tube.limits.max_gap = {}",
                units::format_eng(v, "V"),
                units::format_eng(max_gap, "V")
            ),
        ));
    }

    // The gain this supply gives under this divider (no tube current) must be a tube's gain:
    // a gain law calibrated far from the supply (1 V reference, 100 kV supply) would
    // otherwise give currents of hundreds of digits.
    if let Ok(model) = crate::model::tube::TubeModel::from_spec(tube) {
        let gaps = linear_gap_voltages(elements, supply);
        let g = model.gain_for_gaps(&gaps);
        if !(g.is_finite() && g <= limits::TUBE_GAIN.hi) {
            return Err(c.fail(
                "supply.volts",
                format!(
                    "the gain law (tube.gain) gives a gain of {} at {} under this divider, above the plausible {}; check tube.gain against the supply",
                    units::show_number(g),
                    units::format_eng(supply, "V"),
                    units::show_number(limits::TUBE_GAIN.hi)
                ),
            ));
        }
    }
    Ok(())
}

/// The light block and the train block describe the same pulses: the train's pattern sets the
/// average rate, the light's `rate` may restate it (within 1 %) or be left out (it is then
/// taken from the train), and a contradiction is refused where the light's rate is written.
pub(crate) fn one_pulse_stream(
    c: &Checker,
    train: Option<&crate::design::train::TrainSpec>,
    signal: &mut SignalSpec,
) -> Result<(), DesignError> {
    let (Some(t), Some(light)) = (train, signal.light.as_mut()) else {
        return Ok(());
    };
    let Some(avg) = t.pattern.average_rate() else {
        return Ok(());
    };
    match light.rate {
        None => light.rate = Some(avg),
        Some(r) if (r / avg - 1.0).abs() > 0.01 => {
            return Err(c.fail(
                "light.rate",
                format!(
                    "{} contradicts the train block, whose pattern ({}) averages {}; the light and the train are the same pulses: leave light.rate out (it is taken from the train) or make the two agree",
                    units::format_eng(r, "Hz"),
                    t.pattern.describe(),
                    units::format_eng(avg, "Hz")
                ),
            ));
        }
        Some(_) => {}
    }
    Ok(())
}
