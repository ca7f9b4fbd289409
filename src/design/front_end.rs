//! The `front_end` block (a voltage amplifier or a charge preamplifier with its shaper) and
//! the `counting` block, raw and checked.

use serde::Deserialize;

use super::limits::{self, Range};
use super::{Checker, DesignError, InstrumentResponse, Value, density, integer, plain};
use crate::budget::counting::CountingSpec;
use crate::budget::frontend::{ChargePreamp, FrontEnd, VoltageAmplifier};
use crate::units::Kind;

/// An amplifier between the signal path and the instrument (the `front_end` block).
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawFrontEnd {
    /// A fast voltage amplifier.
    Voltage {
        /// Voltage gain.
        gain: f64,
        /// −3 dB bandwidth.
        bandwidth: Value,
        /// Response type (default SinglePole).
        #[serde(default)]
        response: Option<InstrumentResponse>,
        /// Input resistance: the far-end termination.
        input_resistance: Value,
        /// Input capacitance (default 0).
        #[serde(default)]
        input_capacitance: Option<Value>,
        /// Input voltage noise density, e.g. "1.5 nV/rtHz".
        noise_density: Value,
    },
    /// A charge-sensitive preamplifier with a CR–RC^n shaper.
    Charge {
        /// Feedback capacitance.
        feedback_capacitance: Value,
        /// Feedback resistance.
        feedback_resistance: Value,
        /// Shaping time constant τ.
        shaping_time: Value,
        /// Number of RC integrators n.
        order: i64,
        /// Shaper gain (default 1).
        #[serde(default)]
        shaper_gain: Option<f64>,
        /// Input resistance (default 50 ohm).
        #[serde(default)]
        input_resistance: Option<Value>,
        /// Input capacitance of the amplifier (default 5 pF).
        #[serde(default)]
        input_capacitance: Option<Value>,
        /// Series noise density (default 1 nV/rtHz).
        #[serde(default)]
        noise_density: Option<Value>,
        /// Parallel noise current density besides the resistors' (default 0).
        #[serde(default)]
        noise_current: Option<Value>,
        /// Measured equivalent noise charge, electrons rms (replaces the computed one).
        #[serde(default)]
        enc_electrons: Option<f64>,
    },
}

/// The `counting` block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawCounting {
    /// Dark-count rate above the threshold.
    #[serde(default)]
    pub dark_rate: Option<Value>,
    /// Dead time of the counter (default the pulse-pair resolution).
    #[serde(default)]
    pub dead_time: Option<Value>,
    /// Coincidence window τ_w (pulses within ±τ_w coincide).
    #[serde(default)]
    pub coincidence_window: Option<Value>,
    /// The other channel's rate (default the same dark rate).
    #[serde(default)]
    pub other_rate: Option<Value>,
    /// Weight of the under-amplified part of the single-photoelectron spectrum (default 10 %).
    #[serde(default)]
    pub under_amplified: Option<Value>,
}

pub(crate) fn check_front_end(c: &Checker, f: &RawFrontEnd) -> Result<FrontEnd, DesignError> {
    Ok(match f {
        RawFrontEnd::Voltage {
            gain,
            bandwidth,
            response,
            input_resistance,
            input_capacitance,
            noise_density,
        } => FrontEnd::Voltage(VoltageAmplifier {
            gain: plain(c, "front_end.gain", *gain, &limits::FRONT_GAIN)?,
            bandwidth: c.within("front_end.bandwidth", bandwidth, &limits::FRONT_BANDWIDTH)?,
            response: response.unwrap_or(InstrumentResponse::SinglePole),
            input_resistance: c.within(
                "front_end.input_resistance",
                input_resistance,
                &limits::FRONT_INPUT_RESISTANCE,
            )?,
            input_capacitance: match input_capacitance {
                None => 0.0,
                Some(v) => c.within(
                    "front_end.input_capacitance",
                    v,
                    &limits::FRONT_INPUT_CAPACITANCE,
                )?,
            },
            noise_density: density(
                c,
                "front_end.noise_density",
                noise_density,
                &limits::NOISE_DENSITY,
            )?,
        }),
        RawFrontEnd::Charge {
            feedback_capacitance,
            feedback_resistance,
            shaping_time,
            order,
            shaper_gain,
            input_resistance,
            input_capacitance,
            noise_density,
            noise_current,
            enc_electrons,
        } => FrontEnd::Charge(ChargePreamp {
            feedback_capacitance: c.within(
                "front_end.feedback_capacitance",
                feedback_capacitance,
                &limits::FEEDBACK_CAPACITANCE,
            )?,
            feedback_resistance: c.within(
                "front_end.feedback_resistance",
                feedback_resistance,
                &limits::FEEDBACK_RESISTANCE,
            )?,
            shaping_time: c.within(
                "front_end.shaping_time",
                shaping_time,
                &limits::SHAPING_TIME,
            )?,
            order: integer(c, "front_end.order", *order, limits::SHAPER_ORDER)? as u32,
            shaper_gain: match shaper_gain {
                None => 1.0,
                Some(g) => plain(c, "front_end.shaper_gain", *g, &limits::SHAPER_GAIN)?,
            },
            input_resistance: match input_resistance {
                None => crate::budget::frontend::TYPICAL_PREAMP_INPUT_OHMS,
                Some(v) => c.within(
                    "front_end.input_resistance",
                    v,
                    &limits::FRONT_INPUT_RESISTANCE,
                )?,
            },
            input_capacitance: match input_capacitance {
                None => crate::budget::frontend::TYPICAL_PREAMP_INPUT_FARADS,
                Some(v) => c.within(
                    "front_end.input_capacitance",
                    v,
                    &limits::FRONT_INPUT_CAPACITANCE,
                )?,
            },
            noise_density: match noise_density {
                None => crate::budget::frontend::TYPICAL_PREAMP_NOISE,
                Some(v) => density(c, "front_end.noise_density", v, &limits::NOISE_DENSITY)?,
            },
            noise_current: match noise_current {
                None => 0.0,
                Some(v) => density(c, "front_end.noise_current", v, &limits::NOISE_CURRENT)?,
            },
            enc_electrons: match enc_electrons {
                None => None,
                Some(e) => Some(plain(
                    c,
                    "front_end.enc_electrons",
                    *e,
                    &limits::ENC_ELECTRONS,
                )?),
            },
        }),
    })
}

pub(crate) fn check_counting(c: &Checker, k: &RawCounting) -> Result<CountingSpec, DesignError> {
    let opt = |field: &str, v: &Option<Value>, range: &Range| -> Result<Option<f64>, DesignError> {
        v.as_ref().map(|v| c.within(field, v, range)).transpose()
    };
    let under = match &k.under_amplified {
        None => None,
        Some(v) => {
            let x = c.quantity("counting.under_amplified", v, Kind::Ratio)?;
            if !limits::UNDER_AMPLIFIED.contains(x) {
                return Err(c.fail(
                    "counting.under_amplified",
                    format!(
                        "expected a fraction from {} such as \"10 %\", found {v}",
                        limits::UNDER_AMPLIFIED.describe()
                    ),
                ));
            }
            Some(x)
        }
    };
    Ok(CountingSpec {
        dark_rate: opt("counting.dark_rate", &k.dark_rate, &limits::COUNT_RATE)?,
        dead_time: opt("counting.dead_time", &k.dead_time, &limits::DEAD_TIME)?,
        coincidence_window: opt(
            "counting.coincidence_window",
            &k.coincidence_window,
            &limits::COINCIDENCE_WINDOW,
        )?,
        other_rate: opt("counting.other_rate", &k.other_rate, &limits::COUNT_RATE)?,
        under_amplified: under.unwrap_or(crate::budget::counting::TYPICAL_UNDER_AMPLIFIED),
        under_assumed: under.is_none(),
    })
}
