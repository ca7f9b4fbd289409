//! The `readout` block: the instrument reading the pulses (bandwidth, ranges, input, noise)
//! and the cable to it, raw and checked.

use serde::Deserialize;

use super::{Checker, DesignError, Value, integer, limits};
use crate::units::Kind;

/// Cable velocity factor assumed when none is given (solid polyethylene dielectric, common
/// practice).
pub(crate) const TYPICAL_VELOCITY_FACTOR: f64 = 0.66;
/// Divisions on the vertical axis assumed for an oscilloscope (common practice).
pub(crate) const TYPICAL_DIVISIONS: u32 = 8;
/// An oscilloscope's baseline noise on its coarser ranges, in divisions rms (from memory: a
/// trace about a third of a division thick; the front end's own floor dominates only on the
/// most sensitive ranges).
pub(crate) const TYPICAL_NOISE_PER_DIVISION: f64 = 0.04;

/// The instrument's most sensitive range.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawRange {
    /// An oscilloscope: volts per division and the number of divisions.
    PerDivision {
        /// Volts per division.
        volts: Value,
        /// Vertical divisions (default 8).
        #[serde(default)]
        divisions: Option<i64>,
    },
    /// A digitiser: full-scale span.
    FullScale(Value),
}

/// Frequency response of the instrument.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, serde::Serialize)]
pub enum InstrumentResponse {
    /// First-order low-pass: rise = ln 9 / (2π BW) = 0.3497 / BW.
    SinglePole,
    /// Gaussian: rise = 0.3396 / BW.
    Gaussian,
}

/// A coaxial cable from the base to the instrument.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawCable {
    /// Length.
    pub length: Value,
    /// Characteristic impedance.
    pub impedance: Value,
    /// Velocity factor (default 0.66).
    #[serde(default)]
    pub velocity: Option<Value>,
}

/// The `readout` block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawReadout {
    /// Analogue bandwidth (−3 dB).
    pub bandwidth: Value,
    /// Response type (default SinglePole).
    #[serde(default)]
    pub response: Option<InstrumentResponse>,
    /// Most sensitive range.
    pub most_sensitive: RawRange,
    /// Largest full-scale span (default: 5 V/div for a scope, the same span for a digitiser).
    #[serde(default)]
    pub largest_full_scale: Option<Value>,
    /// Input resistance.
    pub input_resistance: Value,
    /// Input capacitance (default 0 for 50 ohm inputs, 15 pF otherwise).
    #[serde(default)]
    pub input_capacitance: Option<Value>,
    /// RMS noise at the most sensitive range.
    pub noise: Value,
    /// Oscilloscope: RMS noise in divisions on the coarser ranges (default 0.04, from memory).
    #[serde(default)]
    pub noise_per_division: Option<f64>,
    /// The 10–90 % rise time the measurement needs.
    #[serde(default)]
    pub rise_need: Option<Value>,
    /// Leading-edge threshold for timing (default 20 % of the mean pulse).
    #[serde(default)]
    pub threshold: Option<Value>,
    /// Cable from the base to the instrument.
    #[serde(default)]
    pub cable: Option<RawCable>,
    /// Pulses averaged for a delay measurement (timing benches).
    #[serde(default)]
    pub average_pulses: Option<i64>,
}

/// A checked cable.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CableSpec {
    /// Length, m.
    pub length: f64,
    /// Characteristic impedance, ohms.
    pub impedance: f64,
    /// Velocity factor.
    pub velocity: f64,
}

impl CableSpec {
    /// One-way delay, s.
    pub fn delay(&self) -> f64 {
        self.length / (self.velocity * crate::model::constants::LIGHT_SPEED)
    }
}

/// A checked readout.
#[derive(Debug, Clone, PartialEq)]
pub struct ReadoutSpec {
    /// −3 dB bandwidth, Hz.
    pub bandwidth: f64,
    /// Response type.
    pub response: InstrumentResponse,
    /// Volts per division at the most sensitive range (oscilloscope), or `None` (digitiser).
    pub division_volts: Option<f64>,
    /// Divisions (oscilloscope).
    pub divisions: u32,
    /// Full-scale span at the most sensitive range, V.
    pub sensitive_full_scale: f64,
    /// Largest full-scale span, V.
    pub largest_full_scale: f64,
    /// Input resistance, ohms.
    pub input_resistance: f64,
    /// Input capacitance, F.
    pub input_capacitance: f64,
    /// RMS noise at the most sensitive range, V.
    pub noise_rms: f64,
    /// Oscilloscope: RMS noise in divisions on the coarser ranges.
    pub noise_per_division: f64,
    /// Rise-time need, s.
    pub rise_need: Option<f64>,
    /// Timing threshold, V.
    pub threshold: Option<f64>,
    /// Cable.
    pub cable: Option<CableSpec>,
    /// Pulses averaged for a delay measurement.
    pub average_pulses: Option<u64>,
}

pub(crate) fn check_readout(c: &Checker, r: &RawReadout) -> Result<ReadoutSpec, DesignError> {
    let bandwidth = c.ranged(
        "readout.bandwidth",
        &r.bandwidth,
        Kind::Frequency,
        1e3,
        1e12,
    )?;
    let (division_volts, divisions, sensitive_fs) = match &r.most_sensitive {
        RawRange::PerDivision { volts, divisions } => {
            let v = c.ranged(
                "readout.most_sensitive.volts",
                volts,
                Kind::Voltage,
                1e-6,
                100.0,
            )?;
            let d = divisions.unwrap_or(TYPICAL_DIVISIONS as i64);
            if !(1..=100).contains(&d) {
                return Err(c.fail(
                    "readout.most_sensitive.divisions",
                    format!("expected 1 to 100 divisions, found {d}"),
                ));
            }
            (Some(v), d as u32, v * d as f64)
        }
        RawRange::FullScale(v) => (
            None,
            TYPICAL_DIVISIONS,
            c.ranged("readout.most_sensitive", v, Kind::Voltage, 1e-5, 1e3)?,
        ),
    };
    let largest = match &r.largest_full_scale {
        Some(v) => c.ranged("readout.largest_full_scale", v, Kind::Voltage, 1e-5, 1e4)?,
        None => match division_volts {
            Some(_) => 5.0 * divisions as f64,
            None => sensitive_fs,
        },
    };
    if largest < sensitive_fs {
        return Err(c.fail(
            "readout.largest_full_scale",
            "expected a span at least as large as the most sensitive range",
        ));
    }
    let input_resistance = c.ranged(
        "readout.input_resistance",
        &r.input_resistance,
        Kind::Resistance,
        1.0,
        1e12,
    )?;
    let input_capacitance = match &r.input_capacitance {
        Some(v) => c.ranged(
            "readout.input_capacitance",
            v,
            Kind::Capacitance,
            1e-15,
            1e-8,
        )?,
        None if input_resistance <= 100.0 => 0.0,
        None => 15e-12,
    };
    let noise = c.ranged("readout.noise", &r.noise, Kind::Voltage, 1e-9, 1.0)?;
    let rise_need = match &r.rise_need {
        None => None,
        Some(v) => Some(c.ranged("readout.rise_need", v, Kind::Time, 1e-12, 1.0)?),
    };
    let threshold = match &r.threshold {
        None => None,
        Some(v) => Some(c.ranged("readout.threshold", v, Kind::Voltage, 1e-9, 1e3)?),
    };
    let cable = match &r.cable {
        None => None,
        Some(k) => {
            let length = c.within(
                "readout.cable.length",
                &k.length,
                &crate::design::limits::CABLE_LENGTH,
            )?;
            let impedance = c.ranged(
                "readout.cable.impedance",
                &k.impedance,
                Kind::Resistance,
                1.0,
                1e3,
            )?;
            let velocity = match &k.velocity {
                None => TYPICAL_VELOCITY_FACTOR,
                Some(v) => {
                    let x = c.quantity("readout.cable.velocity", v, Kind::Ratio)?;
                    if !(x > 0.05 && x <= 1.0) {
                        return Err(c.fail(
                            "readout.cable.velocity",
                            format!(
                                "expected a velocity factor in (0.05, 1] such as 0.66, found {v}"
                            ),
                        ));
                    }
                    x
                }
            };
            Some(CableSpec {
                length,
                impedance,
                velocity,
            })
        }
    };
    Ok(ReadoutSpec {
        bandwidth,
        response: r.response.unwrap_or(InstrumentResponse::SinglePole),
        division_volts,
        divisions,
        sensitive_full_scale: sensitive_fs,
        largest_full_scale: largest,
        input_resistance,
        input_capacitance,
        noise_rms: noise,
        noise_per_division: match r.noise_per_division {
            None => TYPICAL_NOISE_PER_DIVISION,
            Some(x) if x.is_finite() && x > 0.0 && x <= 1.0 => x,
            Some(x) => {
                return Err(c.fail(
                    "readout.noise_per_division",
                    format!(
                        "expected a fraction of a division between 0 and 1 such as 0.04, found {x}"
                    ),
                ));
            }
        },
        rise_need,
        threshold,
        cable,
        average_pulses: match r.average_pulses {
            None => None,
            Some(n) => {
                Some(integer(c, "readout.average_pulses", n, limits::AVERAGE_PULSES)? as u64)
            }
        },
    })
}
