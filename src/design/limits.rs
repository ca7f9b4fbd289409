//! One table of plausible ranges, shared by the design file, the requirements file, `sweep`
//! values and command-line options, so that a value one of them accepts the others accept too.
//!
//! A range catches unit slips ("4.7 uF" for nF) and keeps every accepted input inside what the
//! solver and the renderers handle in bounded time and memory: a gain of 1e307 overflows the
//! currents, a millisecond light pulse or a ten-kilometre cable makes the computed pulse a
//! series of millions of points. The limits are this tool's choices, wide against practice.

use crate::units::{self, Kind};

/// A plausible range for one quantity. `lo` is excluded when `open_lo`, `hi` is included.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Range {
    /// Kind of quantity (fixes the units accepted and shown).
    pub kind: Kind,
    /// Lower limit, SI base units.
    pub lo: f64,
    /// Upper limit, SI base units.
    pub hi: f64,
    /// Whether `lo` itself is refused ("above 1").
    pub open_lo: bool,
    /// Whether a ratio is shown as a percentage ("30 %") rather than a plain number.
    pub percent: bool,
}

const fn r(kind: Kind, lo: f64, hi: f64) -> Range {
    Range {
        kind,
        lo,
        hi,
        open_lo: false,
        percent: false,
    }
}

/// A fraction shown as a percentage.
pub const fn fraction(lo: f64, hi: f64) -> Range {
    Range {
        kind: Kind::Ratio,
        lo,
        hi,
        open_lo: false,
        percent: true,
    }
}

/// Relative slack at the limits, so that a limit written in other units ("300 nm" read as
/// 3.0000000000000004e-7 m) is accepted exactly as printed.
const SLACK: f64 = 1e-9;

impl Range {
    /// Whether `x` lies in the range (finite, and within the limits up to rounding).
    pub fn contains(&self, x: f64) -> bool {
        let above = if self.open_lo {
            x > self.lo * (1.0 + SLACK) || (self.lo == 0.0 && x > 0.0)
        } else {
            x >= self.lo * (1.0 - SLACK)
        };
        x.is_finite() && above && x <= self.hi * (1.0 + SLACK)
    }

    /// The range in words, as it is enforced: "1 Ω to 100 GΩ", "above 1 up to 1e10".
    pub fn describe(&self) -> String {
        let lo = self.show(self.lo);
        let hi = self.show(self.hi);
        if self.open_lo {
            format!("above {lo} up to {hi}")
        } else {
            format!("{lo} to {hi}")
        }
    }

    /// `x` if it lies in the range, else a message naming the range and the value.
    pub fn check(&self, x: f64) -> Result<f64, String> {
        if self.contains(x) {
            Ok(x)
        } else {
            Err(format!(
                "{} is outside the plausible range {}",
                self.show(x),
                self.describe()
            ))
        }
    }

    /// A value of this range for a message.
    pub fn show(&self, x: f64) -> String {
        if self.percent {
            format!("{} %", units::show_number(x * 100.0))
        } else {
            show(x, self.kind)
        }
    }
}

/// A value for a message, in the units a reader would write it.
pub fn show(x: f64, kind: Kind) -> String {
    match kind {
        Kind::Ratio => units::show_number(x),
        Kind::Resistance => units::format_eng(x, "Ω"),
        k => units::format_eng(x, k.symbol()),
    }
}

/// Supply voltage magnitude.
pub const SUPPLY_VOLTS: Range = r(Kind::Voltage, 10.0, 1e5);
/// Supply current limit.
pub const SUPPLY_CURRENT_LIMIT: Range = r(Kind::Current, 1e-9, 10.0);
/// Stages of a supply's voltage multiplier (a doubler is 1); the upper limit bounds the
/// steady-state solve (shooting on 2 n + 1 nodes) to a few seconds: a lightly loaded cascade
/// of 8 or more stages has a mode that decays over thousands of periods, and its shooting
/// needs many iterations.
pub const MULTIPLIER_STAGES: (usize, usize) = (1, 6);
/// Capacitance of each multiplier capacitor.
pub const MULTIPLIER_CAPACITANCE: Range = r(Kind::Capacitance, 1e-11, 1e-4);
/// Drive frequency of a multiplier (mains to a fast switching converter).
pub const MULTIPLIER_FREQUENCY: Range = r(Kind::Frequency, 10.0, 2e6);
/// Drive amplitude (peak) of a multiplier.
pub const MULTIPLIER_AMPLITUDE: Range = r(Kind::Voltage, 1.0, 2e4);
/// Series resistance of the supply's RC filter.
pub const FILTER_RESISTANCE: Range = r(Kind::Resistance, 1.0, 1e9);
/// Shunt capacitance of the supply's RC filter.
pub const FILTER_CAPACITANCE: Range = r(Kind::Capacitance, 1e-12, 1e-4);
/// A divider resistor (each part of a series string).
pub const RESISTOR: Range = r(Kind::Resistance, 1.0, 1e11);
/// The factor `sweep` scales every divider resistor by (`divider.gaps[*]`).
pub const GAP_SCALE: Range = r(Kind::Ratio, 1e-3, 1e3);
/// A Zener diode's voltage.
pub const ZENER_VOLTS: Range = r(Kind::Voltage, 1.0, 1e4);
/// A decoupling capacitor.
pub const DECOUPLING: Range = r(Kind::Capacitance, 1e-13, 1e-4);
/// Stray capacitance per gap.
pub const STRAY: Range = r(Kind::Capacitance, 1e-15, 1e-9);
/// Load resistance.
pub const LOAD_RESISTANCE: Range = r(Kind::Resistance, 1.0, 1e9);
/// Load capacitance.
pub const LOAD_CAPACITANCE: Range = r(Kind::Capacitance, 1e-15, 1e-6);
/// Anode resistor.
pub const ANODE_RESISTOR: Range = r(Kind::Resistance, 1.0, 1e9);
/// Coupling capacitor.
pub const COUPLING: Range = r(Kind::Capacitance, 1e-13, 1e-4);
/// Secondary-emission exponent k of `delta = a V^k`.
pub const GAIN_EXPONENT: Range = r(Kind::Ratio, 0.2, 1.5);
/// A tube gain (reference point or table point): above 1, at most 1e10 (twenty stages of a
/// high-gain dynode material reach about 1e9).
pub const TUBE_GAIN: Range = Range {
    kind: Kind::Ratio,
    lo: 1.0,
    hi: 1e10,
    open_lo: true,
    percent: false,
};
/// A voltage of the tube's gain law or limits.
pub const TUBE_VOLTS: Range = r(Kind::Voltage, 1.0, 1e5);
/// Share of the secondary-emission exponent on the collecting gap (0: all on the accelerating gap).
pub const COLLECTING_SHARE: Range = fraction(0.0, 1.0);
/// Low-field collection knee of a gap: from a tenth of a volt to a hundred volts.
pub const COLLECTION_KNEE: Range = r(Kind::Voltage, 0.1, 100.0);
/// Cathode–D1 collection efficiency.
pub const COLLECTION: Range = Range {
    kind: Kind::Ratio,
    lo: 0.0,
    hi: 1.0,
    open_lo: true,
    percent: true,
};
/// Fraction of the light that reaches the cathode (`light.coupling`).
pub const LIGHT_COUPLING: Range = fraction(1e-12, 1.0);
/// The tube's rated average anode current.
pub const MAX_ANODE_CURRENT: Range = r(Kind::Current, 1e-12, 1.0);
/// Peak current of the pulse-linearity figure.
pub const PULSE_PEAK_CURRENT: Range = r(Kind::Current, 1e-6, 100.0);
/// Last-gap voltage of the pulse-linearity figure.
pub const PULSE_LAST_GAP: Range = r(Kind::Voltage, 1.0, 1e4);
/// A resistor's power rating.
pub const RESISTOR_POWER: Range = r(Kind::Power, 1e-3, 100.0);
/// A resistor's working voltage.
pub const RESISTOR_WORKING_VOLTAGE: Range = r(Kind::Voltage, 1.0, 1e5);
/// The average anode current a report is made at (`operating`, `netlist --anode-current`).
pub const ANODE_CURRENT: Range = r(Kind::Current, 1e-15, 10.0);
/// Width of a light pulse (FWHM, rectangle width): a pulse of the computed waveform is
/// sampled finely over its whole width, so the width bounds its memory and time.
pub const LIGHT_PULSE_WIDTH: Range = r(Kind::Time, 1e-12, 1e-5);
/// Decay time of a scintillator-like light pulse (same reason).
pub const LIGHT_DECAY: Range = r(Kind::Time, 1e-11, 1e-5);
/// Length of the signal cable (its delay and echoes are computed point by point).
pub const CABLE_LENGTH: Range = r(Kind::Length, 1e-3, 1e3);
/// A wavelength (light lines, `light-match --lines`).
pub const WAVELENGTH: Range = r(Kind::Length, 100e-9, 2500e-9);
/// Photons at the cathode per pulse (`light-match --photons`, the design's light).
pub const PHOTONS: Range = Range {
    kind: Kind::Ratio,
    lo: 0.0,
    hi: 1e20,
    open_lo: true,
    percent: false,
};
/// Voltage gain of a front-end amplifier.
pub const FRONT_GAIN: Range = r(Kind::Ratio, 0.1, 1e5);
/// Bandwidth of a front-end voltage amplifier (its pulse is computed through it).
pub const FRONT_BANDWIDTH: Range = r(Kind::Frequency, 1e4, 1e11);
/// Input resistance of a front end (the far-end termination).
pub const FRONT_INPUT_RESISTANCE: Range = r(Kind::Resistance, 1.0, 1e12);
/// Input capacitance of a front end.
pub const FRONT_INPUT_CAPACITANCE: Range = r(Kind::Capacitance, 1e-15, 1e-8);
/// Input voltage noise density of a front end, V/√Hz.
pub const NOISE_DENSITY: Range = r(Kind::Voltage, 1e-11, 1e-5);
/// Input current noise density of a preamplifier, A/√Hz.
pub const NOISE_CURRENT: Range = r(Kind::Current, 1e-18, 1e-9);
/// Feedback capacitance of a charge-sensitive preamplifier.
pub const FEEDBACK_CAPACITANCE: Range = r(Kind::Capacitance, 1e-15, 1e-8);
/// Feedback resistance of a charge-sensitive preamplifier.
pub const FEEDBACK_RESISTANCE: Range = r(Kind::Resistance, 1e3, 1e13);
/// Shaping time constant τ (the shaped pulse is computed over (n + 10) τ in steps of τ/200).
pub const SHAPING_TIME: Range = r(Kind::Time, 1e-9, 1e-4);
/// Order n of a CR–RC^n shaper.
pub const SHAPER_ORDER: (i64, i64) = (1, 10);
/// Gain of a shaper.
pub const SHAPER_GAIN: Range = r(Kind::Ratio, 0.01, 1e4);
/// An equivalent noise charge stated in electrons rms.
pub const ENC_ELECTRONS: Range = r(Kind::Ratio, 0.1, 1e8);
/// A dark-count rate or the other channel's rate of a coincidence.
pub const COUNT_RATE: Range = r(Kind::Frequency, 1e-6, 1e9);
/// A follower's drop (gate–source or base–emitter voltage) at a held dynode.
pub const FOLLOWER_DROP: Range = r(Kind::Voltage, 0.1, 20.0);
/// A follower's current limit.
pub const FOLLOWER_CURRENT_LIMIT: Range = r(Kind::Current, 1e-6, 1.0);
/// A follower's small-signal output resistance.
pub const FOLLOWER_OUTPUT_RESISTANCE: Range = r(Kind::Resistance, 0.1, 1e5);
/// The high-resistance string that sets the followers' taps.
pub const FOLLOWER_STRING: Range = r(Kind::Resistance, 1e5, 1e11);
/// A follower transistor's voltage rating.
pub const FOLLOWER_VOLTS_RATING: Range = r(Kind::Voltage, 1.0, 1e5);
/// A follower transistor's power rating.
pub const FOLLOWER_POWER_RATING: Range = r(Kind::Power, 1e-3, 1e3);
/// Dead time of a counter.
pub const DEAD_TIME: Range = r(Kind::Time, 1e-11, 1.0);
/// Coincidence window τ_w.
pub const COINCIDENCE_WINDOW: Range = r(Kind::Time, 1e-12, 1.0);
/// Weight of the under-amplified part of the single-photoelectron spectrum.
pub const UNDER_AMPLIFIED: Range = fraction(0.0, 0.9);
/// The tube's transit time at its reference voltage.
pub const TRANSIT_TIME: Range = r(Kind::Time, 1e-11, 1e-5);
/// Pulses averaged for a delay measurement.
pub const AVERAGE_PULSES: (i64, i64) = (1, 1_000_000_000_000);
/// Largest ratio between two weights of `tube.reference_ratio` (real ratios stay within 10).
pub const WEIGHT_SPREAD: f64 = 100.0;
/// `spread --sigmas`: standard deviations per stated tolerance.
pub const SPREAD_SIGMAS: Range = r(Kind::Ratio, 0.5, 10.0);
/// `spread --samples` (a million samples take about 0.5 GB and half a minute on 2 cores).
pub const SPREAD_SAMPLES: (usize, usize) = (1, 1_000_000);
/// `spread --linearity-samples`.
pub const SPREAD_LINEARITY_SAMPLES: usize = 10_000;

/// The range of a sweepable field (`sweep::FIELDS`), by its generic path (`divider.gaps[i]`);
/// `zener` selects the Zener voltage for a gap that holds a Zener.
pub fn of_field(generic: &str, zener: bool) -> Option<Range> {
    Some(match generic {
        "supply.volts" => SUPPLY_VOLTS,
        "supply.current_limit" => SUPPLY_CURRENT_LIMIT,
        "divider.gaps[i]" if zener => ZENER_VOLTS,
        "divider.gaps[i]" => RESISTOR,
        "divider.gaps[*]" => GAP_SCALE,
        "divider.decoupling[i].value" => DECOUPLING,
        "divider.stray" => STRAY,
        "load.resistance" => LOAD_RESISTANCE,
        "load.capacitance" => LOAD_CAPACITANCE,
        "load.anode_resistor" => ANODE_RESISTOR,
        "load.coupling" => COUPLING,
        "tube.gain.exponent" => GAIN_EXPONENT,
        "tube.gain.gain" => TUBE_GAIN,
        "tube.gain.volts" | "tube.limits.max_supply" | "tube.limits.max_gap" => TUBE_VOLTS,
        "tube.collection" => COLLECTION,
        "tube.limits.max_anode_current" => MAX_ANODE_CURRENT,
        "tube.pulse_linearity.peak_current" => PULSE_PEAK_CURRENT,
        "tube.pulse_linearity.last_gap" => PULSE_LAST_GAP,
        "resistors.power" => RESISTOR_POWER,
        "resistors.working_voltage" => RESISTOR_WORKING_VOLTAGE,
        "operating.anode_current" => ANODE_CURRENT,
        "front_end.gain" => FRONT_GAIN,
        "front_end.bandwidth" => FRONT_BANDWIDTH,
        "front_end.input_resistance" => FRONT_INPUT_RESISTANCE,
        "front_end.input_capacitance" => FRONT_INPUT_CAPACITANCE,
        "front_end.feedback_capacitance" => FEEDBACK_CAPACITANCE,
        "front_end.feedback_resistance" => FEEDBACK_RESISTANCE,
        "front_end.shaping_time" => SHAPING_TIME,
        "front_end.shaper_gain" => SHAPER_GAIN,
        _ => return None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn limits_are_accepted_as_printed() {
        // "300 nm" parses to 3.0000000000000004e-7 m: the printed limit must be accepted.
        let nm300 = units::parse("300 nm", Kind::Length).unwrap();
        assert!(r(Kind::Length, 1e-10, 3e-7).contains(nm300));
        assert!(!TUBE_GAIN.contains(1.0));
        assert!(TUBE_GAIN.contains(1e10));
        assert!(!TUBE_GAIN.contains(1.1e10));
        assert!(!COLLECTION.contains(0.0));
        assert!(COLLECTION.contains(1.0));
        assert_eq!(TUBE_GAIN.describe(), "above 1 up to 1e10");
        assert_eq!(RESISTOR.describe(), "1.00 Ω to 100 GΩ");
    }
}
