//! The design file: a RON document describing one tube, its divider, supply, load and parts.
//!
//! Two layers live here. The *raw* layer mirrors the file exactly (serde, `deny_unknown_fields`,
//! quantities still as typed text). The *checked* layer ([`Design`]) holds uom quantities and is
//! built only after every field has been read and every physical-sense rule has passed; errors
//! name the file and either the `line:col` that ron reports or the field path
//! (`divider.gaps[3]`) with what was expected. Nothing downstream sees raw text.
//!
//! The schema is documented field by field in docs/design-file.md and by the commented demo designs.

use std::fmt;
use std::path::Path;

use serde::de::{self, Visitor};
use serde::{Deserialize, Deserializer};

use crate::units::{
    self, Capacitance, ElectricCurrent, ElectricPotential, ElectricalResistance, Kind, Power,
};
use uom::si::capacitance::farad;
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

pub mod limits;
mod signal_fields;
pub mod starter;
pub mod train;
pub use signal_fields::*;

/// Largest design file read, in bytes: a design is a page of text, not a data dump.
pub const MAX_FILE_BYTES: u64 = 1 << 20;

/// Everything that can be wrong with a design file.
#[derive(Debug, thiserror::Error)]
pub enum DesignError {
    /// The file could not be read.
    #[error("{file}: cannot read the design: {reason}")]
    Io {
        /// The path as given.
        file: String,
        /// The operating system's reason, in words.
        reason: String,
    },
    /// The file is not valid RON for this schema; ron gives the position.
    #[error("{file}:{line}:{col}: {message}")]
    Syntax {
        /// The path as given.
        file: String,
        /// 1-based line.
        line: usize,
        /// 1-based column.
        col: usize,
        /// What ron found and what it expected.
        message: String,
    },
    /// The file parsed, but a field breaks a rule of physical sense.
    #[error("{file}: {field}: {message}")]
    Field {
        /// The path as given.
        file: String,
        /// Field path, e.g. `divider.gaps[3]`.
        field: String,
        /// What was expected and what was found.
        message: String,
    },
}

// ---------------------------------------------------------------------------------------------
// Raw layer
// ---------------------------------------------------------------------------------------------

/// A quantity as written: a plain number (SI base units) or engineering-notation text.
#[derive(Debug, Clone, PartialEq)]
pub enum Value {
    /// A bare number, in SI base units.
    Number(f64),
    /// Text such as `"4.7 nF"`.
    Text(String),
}

impl<'de> Deserialize<'de> for Value {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = Value;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a quantity: a number in SI units or text such as \"4.7 nF\"")
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<Value, E> {
                Ok(Value::Number(v))
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<Value, E> {
                Ok(Value::Number(v as f64))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<Value, E> {
                Ok(Value::Number(v as f64))
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<Value, E> {
                Ok(Value::Text(v.to_string()))
            }
        }
        d.deserialize_any(V)
    }
}

impl fmt::Display for Value {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Value::Number(x) => write!(f, "{}", units::show_number(*x)),
            Value::Text(s) => write!(f, "\"{s}\""),
        }
    }
}

/// Top level of a design file.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawDesign {
    /// A short title for reports.
    pub name: String,
    /// Free text carried into reports.
    #[serde(default)]
    pub notes: Option<String>,
    /// The tube.
    pub tube: RawTube,
    /// The high-voltage supply.
    pub supply: RawSupply,
    /// The divider.
    pub divider: RawDivider,
    /// The anode load.
    pub load: RawLoad,
    /// The resistor family the divider is built from.
    #[serde(default)]
    pub resistors: Option<RawResistors>,
    /// Where to evaluate the operating point.
    #[serde(default)]
    pub operating: Option<RawOperating>,
    /// A pulse train for the time-domain solve (see [`crate::design::train`]).
    #[serde(default)]
    pub train: Option<crate::design::train::RawTrain>,
    /// The light source (signal budget).
    #[serde(default)]
    pub light: Option<RawLight>,
    /// The instrument reading the pulses (signal budget).
    #[serde(default)]
    pub readout: Option<RawReadout>,
    /// An amplifier between the signal path and the instrument.
    #[serde(default)]
    pub front_end: Option<RawFrontEnd>,
    /// Photon counting: dark rate, dead time, coincidence window.
    #[serde(default)]
    pub counting: Option<RawCounting>,
}

/// The tube block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawTube {
    /// Number of dynodes.
    pub stages: i64,
    /// The gain law.
    pub gain: RawGainLaw,
    /// Ratio of the gaps (K–D1 first, Dn–return last) at which the gain figures hold.
    #[serde(default)]
    pub reference_ratio: Option<Vec<f64>>,
    /// Fraction of photoelectrons collected by D1.
    #[serde(default)]
    pub collection: Option<Value>,
    /// Ratings.
    pub limits: RawLimits,
    /// The pulse-linearity figure that calibrates the space-charge limit.
    #[serde(default)]
    pub pulse_linearity: Option<RawPulseLinearity>,
    /// Spectral response of the photocathode (signal budget).
    #[serde(default)]
    pub cathode: Option<RawCathode>,
    /// 10–90 % rise of the single-electron response (signal budget).
    #[serde(default)]
    pub single_electron_rise: Option<Value>,
    /// Transit-time spread, FWHM (signal budget).
    #[serde(default)]
    pub transit_spread: Option<Value>,
    /// Transit time at a stated supply voltage (timing benches).
    #[serde(default)]
    pub transit_time: Option<RawTransit>,
    /// Share of the secondary-emission exponent on the gap that collects a dynode's
    /// secondaries (the rest is on the gap that accelerates its primaries).
    #[serde(default)]
    pub collecting_share: Option<Value>,
    /// Low-field collection knee: a gap below a few times this passes few electrons.
    #[serde(default)]
    pub collection_knee: Option<Value>,
}

/// The gain law as given.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawGainLaw {
    /// One point and the secondary-emission exponent k.
    Reference {
        /// Supply voltage magnitude at the reference point.
        volts: Value,
        /// Gain at that voltage.
        gain: f64,
        /// Exponent k in delta = a V^k.
        #[serde(default)]
        exponent: Option<f64>,
    },
    /// Points (supply voltage, gain) to fit a and k.
    Table {
        /// The points.
        points: Vec<(Value, f64)>,
    },
}

/// Tube ratings.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawLimits {
    /// Largest supply voltage magnitude.
    pub max_supply: Value,
    /// Largest voltage on any gap.
    #[serde(default)]
    pub max_gap: Option<Value>,
    /// Largest average anode current.
    pub max_anode_current: Value,
}

/// Pulse-linearity figure: the peak anode current at which the gain has moved by `deviation`,
/// with `last_gap` across the last gap.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawPulseLinearity {
    /// Peak anode current.
    pub peak_current: Value,
    /// Gain deviation at that current (default 2 %).
    #[serde(default)]
    pub deviation: Option<Value>,
    /// Voltage across the last gap when the figure holds.
    pub last_gap: Value,
}

/// Polarity of the supply.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, serde::Serialize)]
pub enum Polarity {
    /// Cathode at negative high voltage, anode DC-coupled near ground.
    CathodeNegative,
    /// Cathode grounded, positive high voltage on the last dynodes and the anode resistor.
    AnodePositive,
}

/// The supply block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSupply {
    /// Output voltage, signed as the polarity requires.
    pub volts: Value,
    /// Polarity.
    pub polarity: Polarity,
    /// Output current limit.
    #[serde(default)]
    pub current_limit: Option<Value>,
    /// Output (filter) capacitance of the supply.
    #[serde(default)]
    pub output_capacitance: Option<Value>,
    /// Ripple, drift and setting accuracy of the supply, and the gain stability wanted.
    #[serde(default)]
    pub quality: Option<RawSupplyQuality>,
    /// Output (series) resistance of the supply, seen by the base in the time-domain solve.
    #[serde(default)]
    pub output_resistance: Option<Value>,
    /// The supply as built: a voltage multiplier (see [`crate::solve::multiplier`]).
    #[serde(default)]
    pub multiplier: Option<RawMultiplier>,
}

/// A Cockcroft–Walton voltage multiplier driven by a sine, with an optional RC filter.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawMultiplier {
    /// Number of stages (a doubler is 1).
    pub stages: i64,
    /// Capacitance of each capacitor of both columns.
    pub capacitance: Value,
    /// Drive frequency.
    pub frequency: Value,
    /// Drive amplitude: the peak of the sine at the transformer secondary.
    pub amplitude: Value,
    /// Series resistance and shunt capacitance of an RC filter after the multiplier.
    #[serde(default)]
    pub filter: Option<RawFilter>,
}

/// An RC filter: a series resistor, then a capacitor to ground.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawFilter {
    /// Series resistance.
    pub resistance: Value,
    /// Shunt capacitance.
    pub capacitance: Value,
}

/// How steady the supply is, and how steady the gain must be.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSupplyQuality {
    /// Peak-to-peak ripple on the output.
    #[serde(default)]
    pub ripple: Option<Value>,
    /// Drift of the output over the run, as a fraction of the setting.
    #[serde(default)]
    pub drift: Option<Value>,
    /// Accuracy of the output setting, as a fraction.
    #[serde(default)]
    pub setting_accuracy: Option<Value>,
    /// Gain stability the experiment needs, as a fraction.
    #[serde(default)]
    pub gain_stability: Option<Value>,
}

/// One divider element.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawElement {
    /// A resistor.
    R(Value),
    /// A Zener diode (or stack) with its voltage and dynamic resistance.
    Zener {
        /// Breakdown voltage.
        volts: Value,
        /// Dynamic resistance above the knee.
        dynamic: Value,
        /// Power rating of the diode or stack (default 1.3 W, a common small part: from
        /// memory, give yours).
        #[serde(default)]
        power: Option<Value>,
        /// Leakage below the knee as a current at the breakdown voltage (default: none
        /// counted for bleed-down, so a capacitor across the gap is taken never to discharge
        /// through it).
        #[serde(default)]
        leakage: Option<Value>,
    },
    /// `count` equal resistors in series (a gap whose voltage exceeds one part's rating).
    Series(i64, Value),
}

/// A decoupling capacitor.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawCapacitor {
    /// Across one gap (gap numbers start at 1 for K–D1).
    Across {
        /// Gap number.
        gap: i64,
        /// Capacitance.
        value: Value,
        /// Voltage rating.
        #[serde(default)]
        rating: Option<Value>,
    },
    /// From a dynode to the return rail (ground for cathode-negative, +HV for anode-positive).
    ToReturn {
        /// Dynode number.
        dynode: i64,
        /// Capacitance.
        value: Value,
        /// Voltage rating.
        #[serde(default)]
        rating: Option<Value>,
    },
}

/// The divider block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawDivider {
    /// One element per gap: K–D1, D1–D2, …, Dn–return.
    pub gaps: Vec<RawElement>,
    /// Decoupling capacitors.
    #[serde(default)]
    pub decoupling: Vec<RawCapacitor>,
    /// Stray capacitance per gap.
    #[serde(default)]
    pub stray: Option<Value>,
    /// Resistor from the cathode-potential shield to its return, if fitted.
    #[serde(default)]
    pub shield_resistor: Option<Value>,
    /// Followers holding the last dynodes (transistor-held stages), if fitted.
    #[serde(default)]
    pub followers: Option<RawFollowers>,
}

/// Transistor-held dynodes: each named dynode is held by a follower whose control terminal
/// sits on a tap of a separate high-resistance string (docs/physics.md §14).
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawFollowers {
    /// The dynodes held (numbers from 1 for D1).
    pub hold: Vec<i64>,
    /// Total resistance of the string from the cathode to the return rail.
    pub string: Value,
    /// The follower's drop (gate–source or base–emitter voltage) between tap and dynode.
    pub drop: Value,
    /// The most current a follower sinks or sources.
    pub current_limit: Value,
    /// A follower's small-signal output resistance (default 100 Ω).
    #[serde(default)]
    pub output_resistance: Option<Value>,
    /// Each transistor's voltage rating.
    pub volts_rating: Value,
    /// Each transistor's power rating.
    pub power_rating: Value,
}

/// The load block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawLoad {
    /// Load resistor at the instrument end of the cable (a termination), or `"open"`.
    pub resistance: Value,
    /// Load resistor mounted in the base, from the signal node to ground (back-termination,
    /// or the whole load into a high-impedance input).
    #[serde(default)]
    pub at_base: Option<Value>,
    /// Capacitance at the anode node.
    #[serde(default)]
    pub capacitance: Option<Value>,
    /// Anode resistor to the return rail (needed with a coupling capacitor).
    #[serde(default)]
    pub anode_resistor: Option<Value>,
    /// Coupling capacitor from the anode to the load.
    #[serde(default)]
    pub coupling: Option<Value>,
    /// Voltage rating of the coupling capacitor.
    #[serde(default)]
    pub coupling_rating: Option<Value>,
}

/// The resistor family.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawResistors {
    /// Power rating per part.
    pub power: Value,
    /// Working (limiting element) voltage per part.
    pub working_voltage: Value,
    /// Tolerance.
    #[serde(default)]
    pub tolerance: Option<Value>,
}

/// Where the report evaluates the operating point.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawOperating {
    /// Average anode current.
    pub anode_current: Value,
}

// ---------------------------------------------------------------------------------------------
// Checked layer
// ---------------------------------------------------------------------------------------------

/// How the gain law was given.
#[derive(Debug, Clone, PartialEq)]
pub enum GainSpec {
    /// One reference point.
    Reference {
        /// Supply voltage magnitude.
        volts: ElectricPotential,
        /// Gain there.
        gain: f64,
        /// Exponent k; `None` means the typical value was assumed.
        exponent: Option<f64>,
    },
    /// Table of (supply voltage magnitude, gain).
    Table(Vec<(ElectricPotential, f64)>),
}

/// The tube as specified.
#[derive(Debug, Clone, PartialEq)]
pub struct TubeSpec {
    /// Number of dynodes, 1..=20.
    pub stages: usize,
    /// Gain law.
    pub gain: GainSpec,
    /// Reference ratio, `stages + 1` positive weights.
    pub reference_ratio: Vec<f64>,
    /// Cathode–D1 collection efficiency (0, 1].
    pub collection: f64,
    /// Whether collection was given or assumed.
    pub collection_assumed: bool,
    /// Share of the exponent on the collecting gap, 0..=1.
    pub collecting_share: f64,
    /// Whether the share was given or the default.
    pub share_assumed: bool,
    /// Low-field collection knee, volts.
    pub collection_knee: f64,
    /// Whether the knee was given or the default.
    pub knee_assumed: bool,
    /// Largest supply voltage magnitude.
    pub max_supply: ElectricPotential,
    /// Largest gap voltage, if rated.
    pub max_gap: Option<ElectricPotential>,
    /// Largest average anode current.
    pub max_anode_current: ElectricCurrent,
    /// Pulse-linearity figure (peak current, deviation, last-gap voltage); `None` = assumed.
    pub pulse_linearity: Option<(ElectricCurrent, f64, ElectricPotential)>,
}

/// One checked divider element.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Element {
    /// Resistor.
    Resistor(ElectricalResistance),
    /// Zener: breakdown voltage and dynamic resistance.
    Zener(ElectricPotential, ElectricalResistance),
}

/// How a decoupling capacitor is connected.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub enum CapStyle {
    /// Across gap `n` (1-based, gap 1 = K–D1).
    Across(usize),
    /// From dynode `n` (1-based) to the return rail.
    ToReturn(usize),
}

/// A checked decoupling capacitor.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Decoupling {
    /// Connection.
    pub style: CapStyle,
    /// Capacitance.
    pub value: Capacitance,
    /// Voltage rating, if given.
    pub rating: Option<ElectricPotential>,
}

/// Checked supply quality figures (all fractions except the ripple, which is in volts).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct SupplyQuality {
    /// Peak-to-peak ripple, volts.
    pub ripple_volts: Option<f64>,
    /// Drift over the run, fraction of the setting.
    pub drift: Option<f64>,
    /// Setting accuracy, fraction.
    pub setting_accuracy: Option<f64>,
    /// Gain stability wanted, fraction.
    pub gain_stability: Option<f64>,
}

/// The checked design.
#[derive(Debug, Clone, PartialEq)]
pub struct Design {
    /// Where it was read from (for messages).
    pub source: String,
    /// Title.
    pub name: String,
    /// Notes.
    pub notes: Option<String>,
    /// Tube.
    pub tube: TubeSpec,
    /// Supply voltage, signed.
    pub supply_volts: ElectricPotential,
    /// Polarity.
    pub polarity: Polarity,
    /// Supply current limit.
    pub current_limit: Option<ElectricCurrent>,
    /// Supply output capacitance.
    pub supply_capacitance: Option<Capacitance>,
    /// Divider elements, `stages + 1`.
    pub elements: Vec<Element>,
    /// Decoupling capacitors.
    pub decoupling: Vec<Decoupling>,
    /// Stray capacitance per gap.
    pub stray: Capacitance,
    /// Shield resistor.
    pub shield_resistor: Option<ElectricalResistance>,
    /// Load resistor at the instrument end of the cable (the termination), `None` when open.
    pub load_resistance: Option<ElectricalResistance>,
    /// Load resistor at the base, from the signal node to ground, if fitted.
    pub base_resistance: Option<ElectricalResistance>,
    /// Anode-node capacitance.
    pub load_capacitance: Capacitance,
    /// Anode resistor to the return rail.
    pub anode_resistor: Option<ElectricalResistance>,
    /// Coupling capacitor and its rating.
    pub coupling: Option<(Capacitance, Option<ElectricPotential>)>,
    /// Resistor power rating.
    pub resistor_power: Power,
    /// Resistor working voltage.
    pub resistor_working_voltage: ElectricPotential,
    /// Resistor tolerance (fraction).
    pub resistor_tolerance: f64,
    /// Whether the resistor family was given or assumed.
    pub resistors_assumed: bool,
    /// Average anode current to report at.
    pub anode_current: ElectricCurrent,
    /// Whether the operating current was assumed (no `operating` block).
    pub operating_assumed: bool,
    /// Number of equal resistors in series in each gap (1 for a single part; 1 for a Zener).
    pub series_parts: Vec<usize>,
    /// Per gap, for a Zener: its power rating (W) and its stated leakage below the knee as a
    /// conductance (S; `None` when not given).
    pub zener_ratings: Vec<Option<(f64, Option<f64>)>>,
    /// Supply ripple, drift, setting accuracy and the gain stability wanted, if given.
    pub supply_quality: Option<SupplyQuality>,
    /// Supply output resistance (time-domain solve only; the DC solve takes the supply as ideal).
    pub supply_resistance: Option<ElectricalResistance>,
    /// The voltage multiplier that makes the supply, if the design describes it.
    pub multiplier: Option<crate::solve::multiplier::Multiplier>,
    /// Followers holding dynodes, if fitted.
    pub followers: Option<Followers>,
    /// Pulse train, if the design gives one.
    pub train: Option<crate::design::train::TrainSpec>,
    /// Cathode response, tube timing, light and readout (signal budget).
    pub signal: SignalSpec,
}

impl Design {
    /// Supply voltage magnitude in volts.
    pub fn supply_magnitude(&self) -> f64 {
        self.supply_volts.get::<volt>().abs()
    }

    /// Resistance from the anode to the return rail at DC: the anode resistor, or else every
    /// load on the signal path in parallel (the resistor at the base, the termination at the
    /// instrument end and the instrument's own input resistance, the cable being a wire at DC).
    pub fn anode_dc_resistance(&self) -> ElectricalResistance {
        match self.anode_resistor {
            Some(r) => r,
            None => ElectricalResistance::new::<ohm>(self.signal_load_resistance()),
        }
    }

    /// The loads of the signal path in parallel, ohms: resistor at the base, termination at
    /// the instrument end, instrument input. Finite whenever the design checks (a DC-coupled
    /// anode must have one of them).
    pub fn signal_load_resistance(&self) -> f64 {
        let g = |r: Option<ElectricalResistance>| r.map_or(0.0, |r| 1.0 / r.get::<ohm>());
        // The far end's input: the front end's when one is fitted, else the instrument's.
        let input = match (&self.signal.front_end, &self.signal.readout) {
            (Some(f), _) => 1.0 / f.input().0,
            (None, Some(r)) => 1.0 / r.input_resistance,
            (None, None) => 0.0,
        };
        1.0 / (g(self.base_resistance) + g(self.load_resistance) + input)
    }

    /// The label of gap `i` (0-based): "K–D1", "D1–D2", …, and "Dn–GND" or "Dn–HV" for the last.
    pub fn gap_label(&self, i: usize) -> String {
        let n = self.tube.stages;
        if i == 0 {
            "K–D1".to_string()
        } else if i < n {
            format!("D{}–D{}", i, i + 1)
        } else {
            match self.polarity {
                Polarity::CathodeNegative => format!("D{n}–GND"),
                Polarity::AnodePositive => format!("D{n}–HV"),
            }
        }
    }
}

/// Typical secondary-emission exponent assumed when none is given (Knoll ch. 9; from memory).
pub const TYPICAL_EXPONENT: f64 = 0.75;
/// Typical cathode–D1 collection assumed when none is given (from memory).
pub const TYPICAL_COLLECTION: f64 = 0.9;
/// Stray capacitance per gap assumed when none is given (common practice: a few pF).
pub const TYPICAL_STRAY_FARADS: f64 = 3e-12;

/// Field checks shared by the design's blocks (other modules check their own blocks with it).
pub(crate) struct Checker<'a> {
    file: &'a str,
}

impl Checker<'_> {
    pub(crate) fn fail(&self, field: impl Into<String>, message: impl Into<String>) -> DesignError {
        DesignError::Field {
            file: self.file.to_string(),
            field: field.into(),
            message: message.into(),
        }
    }

    pub(crate) fn quantity(&self, field: &str, v: &Value, kind: Kind) -> Result<f64, DesignError> {
        match v {
            Value::Number(x) if !x.is_finite() => Err(self.fail(
                field,
                format!("expected a finite {}, found {v}", kind.noun()),
            )),
            Value::Number(x) if kind.needs_unit() => Err(self.fail(
                field,
                format!(
                    "expected {} with its unit, e.g. {}; a bare number has no unit here (found {x})",
                    kind.name(),
                    kind.typical(&x.to_string())
                ),
            )),
            Value::Number(x) => Ok(*x),
            Value::Text(t) => {
                units::parse(t, kind).map_err(|e| self.fail(field, format!("{e} (found {v})")))
            }
        }
    }

    fn positive(&self, field: &str, v: &Value, kind: Kind) -> Result<f64, DesignError> {
        let x = self.quantity(field, v, kind)?;
        if x > 0.0 {
            Ok(x)
        } else {
            Err(self.fail(
                field,
                format!("expected a positive {}, found {v}", kind.noun()),
            ))
        }
    }

    /// A positive quantity inside a plausible range, to catch unit slips ("4.7 uF" for nF).
    pub(crate) fn ranged(
        &self,
        field: &str,
        v: &Value,
        kind: Kind,
        lo: f64,
        hi: f64,
    ) -> Result<f64, DesignError> {
        let range = crate::design::limits::Range {
            kind,
            lo,
            hi,
            open_lo: false,
            percent: false,
        };
        self.within(field, v, &range)
    }

    /// A positive quantity inside `range` (from [`crate::design::limits`], shared with `sweep` and
    /// the command line); the message prints the range exactly as it is enforced.
    pub(crate) fn within(
        &self,
        field: &str,
        v: &Value,
        range: &crate::design::limits::Range,
    ) -> Result<f64, DesignError> {
        let x = self.positive(field, v, range.kind)?;
        if !range.contains(x) {
            return Err(self.fail(
                field,
                format!(
                    "{v} ({}) is outside the plausible range {} for this field; check the unit prefix",
                    range.show(x),
                    range.describe()
                ),
            ));
        }
        Ok(x)
    }
}

/// Power rating assumed for a Zener diode or stack when the design gives none, watts (a
/// common small part, from memory).
pub const TYPICAL_ZENER_WATTS: f64 = 1.3;

/// Read, parse and check a design file.
pub fn load(path: &Path) -> Result<Design, DesignError> {
    let text = read_text(path, "design")?;
    parse_str(&text, &path.display().to_string())
}

/// Read a text input of this tool (a design, a requirements file): a regular file of at most
/// [`MAX_FILE_BYTES`], UTF-8 (a byte-order mark is dropped). `what` names it in messages.
pub fn read_text(path: &Path, what: &str) -> Result<String, DesignError> {
    let file = path.display().to_string();
    let io = |reason: String| DesignError::Io {
        file: file.clone(),
        reason,
    };
    let meta = std::fs::metadata(path).map_err(|e| io(e.to_string()))?;
    if meta.is_dir() {
        return Err(io(format!("it is a directory; give a .ron {what} file")));
    }
    if meta.len() > MAX_FILE_BYTES {
        return Err(io(format!(
            "it is {} bytes; a {what} file is at most {} bytes",
            meta.len(),
            MAX_FILE_BYTES
        )));
    }
    // Read at most one byte past the limit: a device or pipe (`/dev/zero`) reports no length.
    let mut bytes = Vec::new();
    std::fs::File::open(path)
        .and_then(|f| {
            use std::io::Read;
            f.take(MAX_FILE_BYTES + 1).read_to_end(&mut bytes)
        })
        .map_err(|e| io(e.to_string()))?;
    if bytes.len() as u64 > MAX_FILE_BYTES {
        return Err(io(format!(
            "it holds more than {MAX_FILE_BYTES} bytes; a {what} file is a page of text"
        )));
    }
    if bytes.starts_with(&[0xff, 0xfe]) || bytes.starts_with(&[0xfe, 0xff]) {
        return Err(io(
            "it is UTF-16 text; save it as UTF-8 (plain text) and try again".into(),
        ));
    }
    let text = String::from_utf8(bytes).map_err(|e| {
        io(format!(
            "it is not UTF-8 text (byte {} is invalid); is it a binary file?",
            e.utf8_error().valid_up_to()
        ))
    })?;
    Ok(match text.strip_prefix('\u{feff}') {
        Some(rest) => rest.to_string(),
        None => text,
    })
}

/// Parse and check design text; `file` names it in messages.
pub fn parse_str(text: &str, file: &str) -> Result<Design, DesignError> {
    // A byte-order mark, as some editors write, is not part of the design.
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let raw: RawDesign = ron::from_str(text).map_err(|e| syntax_error(file, text, &e))?;
    check(raw, file)
}

/// A RON error in the words of the file (see [`parse_str`]); for every RON input of the tool.
pub fn syntax_error(file: &str, text: &str, e: &ron::error::SpannedError) -> DesignError {
    let (line, col) = (e.span.start.line, e.span.start.col);
    let mut message = describe_ron_error(&e.code, text);
    if matches!(e.code, ron::Error::ExpectedComma) && fraction_at(text, line, col) {
        message = "expected a whole number here, without a decimal point".to_string();
    }
    if let Some(better) = stray_character_at(text, line, col) {
        message = better;
    }
    if let Some(hint) = unclosed_string_before(text, line) {
        message.push_str(&format!(
            "; line {hint} has an odd number of quotes: a string there may not be closed"
        ));
    }
    if let Some(snippet) = snippet(text, line, col) {
        message.push('\n');
        message.push_str(&snippet);
    }
    DesignError::Syntax {
        file: file.to_string(),
        line,
        col,
        message,
    }
}

/// A character at `line:col` that the parser's own words would misname: an invisible one (a
/// byte-order mark inside the file, a zero-width space, a no-break space) or a second comma.
fn stray_character_at(text: &str, line: usize, col: usize) -> Option<String> {
    let src = text.lines().nth(line.saturating_sub(1))?;
    let chars: Vec<char> = src.chars().collect();
    let i = col.saturating_sub(1);
    // The parser may point at the end of the last token read: look from the character before
    // the place to the first one after it that is not ASCII white space (on later lines too).
    let offset: usize = text
        .lines()
        .take(line.saturating_sub(1))
        .map(|l| l.chars().count() + 1)
        .sum::<usize>()
        + i.saturating_sub(1);
    let mut near: Vec<char> = text.chars().skip(offset).take(2).collect();
    near.extend(
        text.chars()
            .skip(offset + 2)
            .skip_while(|c| c.is_ascii_whitespace())
            .take(1),
    );
    let invisible = near.iter().find_map(|c| {
        Some(match c {
            '\u{FEFF}' => (*c, "a byte-order mark"),
            '\u{200B}' => (*c, "a zero-width space"),
            '\u{200C}' | '\u{200D}' | '\u{2060}' => (*c, "a zero-width joiner"),
            '\u{00A0}' | '\u{202F}' => (*c, "a no-break space"),
            '\u{200E}' | '\u{200F}' | '\u{202A}'..='\u{202E}' | '\u{2066}'..='\u{2069}' => {
                (*c, "a direction control")
            }
            _ => return None,
        })
    });
    if let Some((c, name)) = invisible {
        return Some(format!(
            "found an invisible character at or just after this place, U+{:04X} ({name}), probably pasted with the text; delete it",
            c as u32
        ));
    }
    let before = chars[..i.min(chars.len())]
        .iter()
        .rev()
        .find(|c| !c.is_whitespace());
    if chars.get(i) == Some(&',') && before == Some(&',') {
        return Some("found two commas in a row; delete one".to_string());
    }
    None
}

/// Whether the text at `line:col` is the `.5` of a number like `10.5`.
fn fraction_at(text: &str, line: usize, col: usize) -> bool {
    let Some(src) = text.lines().nth(line.saturating_sub(1)) else {
        return false;
    };
    let chars: Vec<char> = src.chars().collect();
    let i = col.saturating_sub(1);
    i > 0
        && chars.get(i) == Some(&'.')
        && chars[i - 1].is_ascii_digit()
        && chars.get(i + 1).is_some_and(|c| c.is_ascii_digit())
}

/// The user-facing name of the place a serde type stands for: `RawTube` is `tube`.
fn place_name(type_name: &str) -> String {
    match type_name {
        "RawDesign" => "the design".to_string(),
        "RawGainLaw" => "`tube.gain`".to_string(),
        "RawLimits" => "`tube.limits`".to_string(),
        "RawElement" => "a divider element".to_string(),
        "RawCapacitor" => "a decoupling capacitor".to_string(),
        "Polarity" => "`supply.polarity`".to_string(),
        "RawSource" => "`light.source`".to_string(),
        "RawAmount" => "`light.source.pulse`".to_string(),
        "RawEmission" => "`light.source.emission`".to_string(),
        "RawBackground" => "`light.background`".to_string(),
        "RawRange" => "`readout.most_sensitive`".to_string(),
        "RawCable" => "`readout.cable`".to_string(),
        "RawCathode" => "`tube.cathode`".to_string(),
        other => match other.strip_prefix("Raw") {
            // RawPulseLinearity -> pulse_linearity; new blocks follow the same rule.
            Some(rest) => {
                let mut out = String::new();
                for (i, c) in rest.chars().enumerate() {
                    if c.is_uppercase() && i > 0 {
                        out.push('_');
                    }
                    out.extend(c.to_lowercase());
                }
                format!("`{out}`")
            }
            None => format!("`{other}`"),
        },
    }
}

fn list(names: &[&str]) -> String {
    names
        .iter()
        .map(|n| format!("`{n}`"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The design text with comments blanked out, to tell an empty design from a broken one.
fn without_comments(text: &str) -> String {
    text.lines()
        .map(|l| l.split("//").next().unwrap_or(""))
        .collect::<Vec<_>>()
        .join("\n")
}

/// ron's error in the words of the design file, with hints a newcomer needs.
fn describe_ron_error(code: &ron::Error, text: &str) -> String {
    use ron::Error as E;
    let within = |outer: &Option<String>| match outer {
        Some(o) => format!(" in {}", place_name(o)),
        None => String::new(),
    };
    match code {
        E::NoSuchStructField {
            expected,
            found,
            outer,
        } => {
            let mut m = format!("unknown field `{found}`{}", within(outer));
            // Suggest only names valid in this block; fall back on all names when ron gives none.
            let pool: &[&str] = if expected.is_empty() { FIELD_NAMES } else { expected };
            if let Some(name) = nearest(found, pool) {
                m.push_str(&format!("; did you mean `{name}`?"));
            }
            m.push_str(&format!(" (expected one of {})", list(expected)));
            m
        }
        E::MissingStructField { field, outer } => format!(
            "{} lacks the required field `{field}` (see the design file schema in docs/design-file.md)",
            outer
                .as_deref()
                .map_or_else(|| "this block".to_string(), place_name)
        ),
        E::DuplicateStructField { field, outer } => format!(
            "the field `{field}` is given twice{}; keep one",
            within(outer)
        ),
        E::NoSuchEnumVariant {
            expected,
            found,
            outer,
        } => {
            let mut m = format!("`{found}` is not a valid choice{}", within(outer));
            if let Some(name) = nearest(found, expected) {
                m.push_str(&format!("; did you mean `{name}`?"));
            }
            m.push_str(&format!(" (expected one of {})", list(expected)));
            m
        }
        E::ExpectedNamedStructLike(_) | E::ExpectedStructLike => {
            let body = without_comments(text);
            let body = body.trim().trim_start_matches('\u{feff}');
            if body.is_empty() {
                "the file holds no design (it is empty or only comments); a design is a RON struct `( name: \"...\", tube: (...), supply: (...), divider: (...), load: (...) )`, see designs/".to_string()
            } else if body.starts_with('{') {
                "this looks like JSON; a design file is RON: `( name: \"...\", tube: (...), ... )` with `(` `)` around blocks and unquoted field names, see designs/".to_string()
            } else {
                "expected `(` to open a block of fields".to_string()
            }
        }
        E::ExpectedDifferentStructName { .. } => {
            "expected `(` to open the design: a design file is a RON struct `( name: \"...\", tube: (...), ... )`, see designs/".to_string()
        }
        E::ExpectedOption => "expected an optional value written `Some(...)`, e.g. `Some(\"90 %\")`, or `None`".to_string(),
        E::ExpectedIdentifier => "expected a name without quotes here, e.g. `CathodeNegative`".to_string(),
        E::ExpectedString => "expected text in double quotes, e.g. \"Paddle 3\"".to_string(),
        E::ExpectedStringEnd => "a string is not closed with `\"`".to_string(),
        E::ExpectedFloat => "expected a plain number without quotes, e.g. 1.0e6".to_string(),
        E::ExpectedInteger => "expected a whole number without quotes or decimal point, e.g. 10".to_string(),
        E::IntegerOutOfBounds => "this whole number is too large to be meaningful here".to_string(),
        E::ExpectedArray => "expected a list in square brackets `[...]`".to_string(),
        E::ExpectedComma => "expected a comma (or a closing bracket) after the previous value".to_string(),
        E::Eof => "the file ends before the design is complete: a closing `)` or `]` is missing".to_string(),
        E::TrailingCharacters => "there is text after the design's closing `)`; a design file holds exactly one design".to_string(),
        E::ExceededRecursionLimit => "the brackets nest too deeply for a design file".to_string(),
        other => humanise_type_names(&other.to_string()),
    }
}

/// Replace serde type names (`RawTube`) in a message by the places they stand for.
fn humanise_type_names(message: &str) -> String {
    let mut out = String::new();
    let mut rest = message;
    while let Some(i) = rest.find("`Raw") {
        out.push_str(&rest[..i]);
        let after = &rest[i + 1..];
        match after.find('`') {
            Some(j) => {
                out.push_str(&place_name(&after[..j]));
                rest = &after[j + 1..];
            }
            None => {
                out.push_str(&rest[i..]);
                rest = "";
            }
        }
    }
    out.push_str(rest);
    out
}

/// The source line of an error with a caret under the column.
fn snippet(text: &str, line: usize, col: usize) -> Option<String> {
    let src = text.lines().nth(line.checked_sub(1)?)?;
    // Long lines (a pasted blob) are cut around the column.
    let chars: Vec<char> = src.chars().collect();
    let col0 = col.saturating_sub(1).min(chars.len());
    let (from, to) = if chars.len() <= 100 {
        (0, chars.len())
    } else {
        (col0.saturating_sub(60), (col0 + 40).min(chars.len()))
    };
    let shown: String = chars[from..to]
        .iter()
        .map(|c| if c.is_control() { ' ' } else { *c })
        .collect();
    let gutter = format!("{line:>5} | ");
    Some(format!(
        "{gutter}{shown}\n{}| {}^",
        " ".repeat(gutter.len() - 2),
        " ".repeat(col0 - from)
    ))
}

/// The first line before `line` with an odd number of quote marks (outside comments), if any.
fn unclosed_string_before(text: &str, line: usize) -> Option<usize> {
    for (i, l) in text.lines().enumerate().take(line.saturating_sub(1)) {
        let code = l.split("//").next().unwrap_or("");
        let quotes = code.matches('"').count() - code.matches("\\\"").count();
        if quotes % 2 == 1 {
            return Some(i + 1);
        }
    }
    None
}

/// Known field names, for "did you mean" suggestions on unknown fields.
const FIELD_NAMES: &[&str] = &[
    "name",
    "notes",
    "tube",
    "supply",
    "divider",
    "load",
    "resistors",
    "operating",
    "stages",
    "gain",
    "reference_ratio",
    "collection",
    "limits",
    "pulse_linearity",
    "volts",
    "exponent",
    "points",
    "max_supply",
    "max_gap",
    "max_anode_current",
    "peak_current",
    "deviation",
    "last_gap",
    "polarity",
    "current_limit",
    "output_capacitance",
    "gaps",
    "decoupling",
    "stray",
    "shield_resistor",
    "dynamic",
    "gap",
    "dynode",
    "value",
    "rating",
    "resistance",
    "capacitance",
    "anode_resistor",
    "coupling",
    "coupling_rating",
    "power",
    "working_voltage",
    "tolerance",
    "anode_current",
    "quality",
    "ripple",
    "drift",
    "setting_accuracy",
    "gain_stability",
    "output_resistance",
    // signal budget
    "light",
    "readout",
    "cathode",
    "single_electron_rise",
    "transit_spread",
    "window",
    "unit",
    "source",
    "rate",
    "filter",
    "background",
    "wavelength",
    "pulse",
    "width",
    "shape",
    "centre",
    "fwhm",
    "emission",
    "yield_per_mev",
    "deposited_mev",
    "decay",
    "rise",
    "per_second",
    "bandwidth",
    "response",
    "most_sensitive",
    "divisions",
    "largest_full_scale",
    "input_resistance",
    "input_capacitance",
    "noise",
    "rise_need",
    "threshold",
    "cable",
    "length",
    "impedance",
    "velocity",
    "average_pulses",
    // front end, photon counting, timing
    "front_end",
    "feedback_capacitance",
    "feedback_resistance",
    "shaping_time",
    "order",
    "shaper_gain",
    "noise_density",
    "noise_current",
    "enc_electrons",
    "counting",
    "dark_rate",
    "dead_time",
    "coincidence_window",
    "other_rate",
    "under_amplified",
    "transit_time",
    "time",
];

/// Levenshtein distance, for suggestions.
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut cur = vec![i + 1; b.len() + 1];
        for (j, cb) in b.iter().enumerate() {
            let cost = usize::from(ca != *cb);
            cur[j + 1] = (prev[j] + cost).min(prev[j + 1] + 1).min(cur[j] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

/// The candidate closest to `unknown` by edit distance, when close enough to be a slip.
fn nearest<'a>(unknown: &str, candidates: &[&'a str]) -> Option<&'a str> {
    candidates
        .iter()
        .chain(crate::design::train::FIELD_NAMES)
        .map(|n| (edit_distance(unknown, n), *n))
        .filter(|(d, n)| *d <= 3 && *d < n.len() && *n != unknown)
        .min()
        .map(|(_, n)| n)
}

/// Check an already-parsed design (used by divider sizing, which builds the raw blocks itself).
pub fn check_raw(raw: RawDesign, file: &str) -> Result<Design, DesignError> {
    check(raw, file)
}

fn check(raw: RawDesign, file: &str) -> Result<Design, DesignError> {
    let c = Checker { file };

    // Free text goes to terminals and documents: no control characters (an escape sequence in a
    // title could rewrite the terminal that shows the report); notes may hold line breaks.
    for (field, text, allowed) in [
        ("name", Some(&raw.name), &[][..]),
        ("notes", raw.notes.as_ref(), &['\n', '\t'][..]),
    ] {
        if let Some(bad) = text.and_then(|t| {
            t.chars()
                .find(|ch| ch.is_control() && !allowed.contains(ch))
        }) {
            return Err(c.fail(
                field,
                format!(
                    "expected plain text, found the control character U+{:04X}",
                    bad as u32
                ),
            ));
        }
    }

    // Tube
    let t = &raw.tube;
    if !(1..=20).contains(&t.stages) {
        return Err(c.fail(
            "tube.stages",
            format!("expected 1 to 20 dynodes, found {}", t.stages),
        ));
    }
    let n = t.stages as usize;
    let gain = match &t.gain {
        RawGainLaw::Reference {
            volts,
            gain,
            exponent,
        } => {
            let v = c.within("tube.gain.volts", volts, &limits::TUBE_VOLTS)?;
            if !limits::TUBE_GAIN.contains(*gain) {
                return Err(c.fail(
                    "tube.gain.gain",
                    format!(
                        "expected a gain {}, found {}",
                        limits::TUBE_GAIN.describe(),
                        units::show_number(*gain)
                    ),
                ));
            }
            if let Some(k) = exponent
                && !limits::GAIN_EXPONENT.contains(*k)
            {
                return Err(c.fail(
                        "tube.gain.exponent",
                        format!(
                            "expected a secondary-emission exponent k from {} (typically 0.7–0.8), found {}",
                            limits::GAIN_EXPONENT.describe(),
                            units::show_number(*k)
                        ),
                    ));
            }
            GainSpec::Reference {
                volts: ElectricPotential::new::<volt>(v),
                gain: *gain,
                exponent: *exponent,
            }
        }
        RawGainLaw::Table { points } => {
            if points.len() < 2 {
                return Err(c.fail(
                    "tube.gain.points",
                    format!(
                        "expected at least 2 (voltage, gain) points to fit, found {}",
                        points.len()
                    ),
                ));
            }
            let mut out = Vec::with_capacity(points.len());
            for (i, (v, g)) in points.iter().enumerate() {
                let field = format!("tube.gain.points[{i}]");
                let v = c.within(&field, v, &limits::TUBE_VOLTS)?;
                if !limits::TUBE_GAIN.contains(*g) {
                    return Err(c.fail(
                        &field,
                        format!(
                            "expected a gain {}, found {}",
                            limits::TUBE_GAIN.describe(),
                            units::show_number(*g)
                        ),
                    ));
                }
                if let Some((pv, pg)) = out
                    .last()
                    .map(|(pv, pg): &(ElectricPotential, f64)| (pv.get::<volt>(), *pg))
                {
                    if v <= pv {
                        return Err(c.fail(
                            &field,
                            format!(
                                "expected voltages in increasing order, found {} V after {} V",
                                units::show_number(v),
                                units::show_number(pv)
                            ),
                        ));
                    }
                    if *g <= pg {
                        return Err(c.fail(
                            &field,
                            format!(
                                "expected the gain to rise with voltage, found {} after {}",
                                units::show_number(*g),
                                units::show_number(pg)
                            ),
                        ));
                    }
                }
                out.push((ElectricPotential::new::<volt>(v), *g));
            }
            GainSpec::Table(out)
        }
    };
    let reference_ratio = match &t.reference_ratio {
        None => vec![1.0; n + 1],
        Some(r) => {
            if r.len() != n + 1 {
                return Err(c.fail(
                    "tube.reference_ratio",
                    format!(
                        "expected {} weights (one per gap, K–D1 to D{n}–return) for {n} dynodes, found {}",
                        n + 1,
                        r.len()
                    ),
                ));
            }
            for (i, w) in r.iter().enumerate() {
                if !(w.is_finite() && *w > 0.0) {
                    return Err(c.fail(
                        format!("tube.reference_ratio[{i}]"),
                        format!(
                            "expected a positive weight, found {}",
                            units::show_number(*w)
                        ),
                    ));
                }
            }
            let (lo, hi) = r
                .iter()
                .fold((f64::INFINITY, 0.0f64), |(a, b), w| (a.min(*w), b.max(*w)));
            if hi > lo * limits::WEIGHT_SPREAD {
                let i = r.iter().position(|w| *w == hi).unwrap_or(0);
                return Err(c.fail(
                    format!("tube.reference_ratio[{i}]"),
                    format!(
                        "expected weights within a factor of {} of each other, found {} beside {}",
                        units::show_number(limits::WEIGHT_SPREAD),
                        units::show_number(hi),
                        units::show_number(lo)
                    ),
                ));
            }
            r.clone()
        }
    };
    let (collection, collection_assumed) = match &t.collection {
        None => (TYPICAL_COLLECTION, true),
        Some(v) => {
            let x = c.quantity("tube.collection", v, Kind::Ratio)?;
            if !limits::COLLECTION.contains(x) {
                return Err(c.fail(
                    "tube.collection",
                    format!(
                        "expected a fraction {}, found {v}",
                        limits::COLLECTION.describe()
                    ),
                ));
            }
            (x, false)
        }
    };
    let (collecting_share, share_assumed) = match &t.collecting_share {
        None => (crate::model::tube::COLLECTING_SHARE, true),
        Some(v) => {
            let x = c.quantity("tube.collecting_share", v, Kind::Ratio)?;
            if !limits::COLLECTING_SHARE.contains(x) {
                return Err(c.fail(
                    "tube.collecting_share",
                    format!(
                        "expected a share of the exponent {}, found {v}",
                        limits::COLLECTING_SHARE.describe()
                    ),
                ));
            }
            (x, false)
        }
    };
    let (collection_knee, knee_assumed) = match &t.collection_knee {
        None => (crate::model::tube::COLLECTION_VOLTS, true),
        Some(v) => (
            c.within("tube.collection_knee", v, &limits::COLLECTION_KNEE)?,
            false,
        ),
    };
    let max_supply = c.within(
        "tube.limits.max_supply",
        &t.limits.max_supply,
        &limits::TUBE_VOLTS,
    )?;
    let max_gap = match &t.limits.max_gap {
        None => None,
        Some(v) => Some(c.within("tube.limits.max_gap", v, &limits::TUBE_VOLTS)?),
    };
    let max_anode = c.within(
        "tube.limits.max_anode_current",
        &t.limits.max_anode_current,
        &limits::MAX_ANODE_CURRENT,
    )?;
    let pulse_linearity = match &t.pulse_linearity {
        None => None,
        Some(p) => {
            let i = c.within(
                "tube.pulse_linearity.peak_current",
                &p.peak_current,
                &limits::PULSE_PEAK_CURRENT,
            )?;
            let dev = match &p.deviation {
                None => 0.02,
                Some(v) => c.quantity("tube.pulse_linearity.deviation", v, Kind::Ratio)?,
            };
            if !(dev > 0.0 && dev < 0.5) {
                return Err(c.fail(
                    "tube.pulse_linearity.deviation",
                    format!("expected a gain deviation between 0 and 50 %, found {dev}"),
                ));
            }
            let vg = c.within(
                "tube.pulse_linearity.last_gap",
                &p.last_gap,
                &limits::PULSE_LAST_GAP,
            )?;
            Some((
                ElectricCurrent::new::<ampere>(i),
                dev,
                ElectricPotential::new::<volt>(vg),
            ))
        }
    };
    let tube = TubeSpec {
        stages: n,
        gain,
        reference_ratio,
        collection,
        collection_assumed,
        collecting_share,
        share_assumed,
        collection_knee,
        knee_assumed,
        max_supply: ElectricPotential::new::<volt>(max_supply),
        max_gap: max_gap.map(ElectricPotential::new::<volt>),
        max_anode_current: ElectricCurrent::new::<ampere>(max_anode),
        pulse_linearity,
    };

    // Supply
    let s = &raw.supply;
    let sv = c.quantity("supply.volts", &s.volts, Kind::Voltage)?;
    // The magnitude first: "-0 V" is too small, whatever its sign.
    if sv.abs() < limits::SUPPLY_VOLTS.lo {
        return Err(c.fail(
            "supply.volts",
            format!(
                "expected a high voltage of at least {} V in magnitude, found {}",
                units::show_number(limits::SUPPLY_VOLTS.lo),
                s.volts
            ),
        ));
    }
    match s.polarity {
        Polarity::CathodeNegative if sv >= 0.0 => {
            return Err(c.fail(
                "supply.volts",
                format!(
                    "polarity is CathodeNegative, so expected a negative voltage such as \"-{} V\", found {}",
                    sv.abs(),
                    s.volts
                ),
            ));
        }
        Polarity::AnodePositive if sv <= 0.0 => {
            return Err(c.fail(
                "supply.volts",
                format!(
                    "polarity is AnodePositive, so expected a positive voltage such as \"{} V\", found {}",
                    sv.abs(),
                    s.volts
                ),
            ));
        }
        _ => {}
    }
    if sv.abs() > max_supply {
        return Err(c.fail(
            "supply.volts",
            format!(
                "expected at most the tube's maximum supply (tube.limits.max_supply = {}), found {} in magnitude",
                units::format_eng(max_supply, "V"),
                units::format_eng(sv.abs(), "V")
            ),
        ));
    }
    let current_limit = match &s.current_limit {
        None => None,
        Some(v) => Some(c.within("supply.current_limit", v, &limits::SUPPLY_CURRENT_LIMIT)?),
    };
    let supply_resistance = match &s.output_resistance {
        None => None,
        Some(v) => Some(c.ranged("supply.output_resistance", v, Kind::Resistance, 1e-3, 1e9)?),
    };
    let supply_capacitance = match &s.output_capacitance {
        None => None,
        Some(v) => Some(c.ranged(
            "supply.output_capacitance",
            v,
            Kind::Capacitance,
            1e-15,
            1e-3,
        )?),
    };

    // Divider
    let d = &raw.divider;
    if d.gaps.len() != n + 1 {
        return Err(c.fail(
            "divider.gaps",
            format!(
                "a {n}-dynode tube has {} gaps (K–D1, D1–D2, …, D{n}–return), so expected {} elements, found {}",
                n + 1,
                n + 1,
                d.gaps.len()
            ),
        ));
    }
    let mut elements = Vec::with_capacity(n + 1);
    let mut series_parts = Vec::with_capacity(n + 1);
    let mut zener_ratings = Vec::with_capacity(n + 1);
    for (i, e) in d.gaps.iter().enumerate() {
        let field = format!("divider.gaps[{i}]");
        series_parts.push(match e {
            RawElement::Series(count, _) => {
                if !(1..=20).contains(count) {
                    return Err(c.fail(
                        &field,
                        format!("expected 1 to 20 resistors in series, found {count}"),
                    ));
                }
                *count as usize
            }
            _ => 1,
        });
        if !matches!(e, RawElement::Zener { .. }) {
            zener_ratings.push(None);
        }
        elements.push(match e {
            RawElement::Series(count, v) => {
                let each = c.within(&field, v, &limits::RESISTOR)?;
                Element::Resistor(ElectricalResistance::new::<ohm>(each * *count as f64))
            }
            RawElement::R(v) => Element::Resistor(ElectricalResistance::new::<ohm>(c.within(
                &field,
                v,
                &limits::RESISTOR,
            )?)),
            RawElement::Zener {
                volts,
                dynamic,
                power,
                leakage,
            } => {
                let vz = c.within(&format!("{field}.volts"), volts, &limits::ZENER_VOLTS)?;
                let rz = c.ranged(
                    &format!("{field}.dynamic"),
                    dynamic,
                    Kind::Resistance,
                    1e-3,
                    1e7,
                )?;
                let watts = match power {
                    None => TYPICAL_ZENER_WATTS,
                    Some(v) => c.ranged(&format!("{field}.power"), v, Kind::Power, 1e-3, 1e3)?,
                };
                let leak = match leakage {
                    None => None,
                    Some(v) => Some(
                        c.ranged(&format!("{field}.leakage"), v, Kind::Current, 1e-15, 1e-2)? / vz,
                    ),
                };
                zener_ratings.push(Some((watts, leak)));
                Element::Zener(
                    ElectricPotential::new::<volt>(vz),
                    ElectricalResistance::new::<ohm>(rz),
                )
            }
        });
    }
    let zener_sum: f64 = elements
        .iter()
        .map(|e| match e {
            Element::Zener(v, _) => v.get::<volt>(),
            Element::Resistor(_) => 0.0,
        })
        .sum();
    if zener_sum >= sv.abs() {
        return Err(c.fail(
            "divider.gaps",
            format!(
                "the Zener voltages add up to {} V, at or above the supply's {} V: no divider current would flow",
                zener_sum,
                sv.abs()
            ),
        ));
    }
    let mut decoupling = Vec::new();
    for (i, cap) in d.decoupling.iter().enumerate() {
        let field = format!("divider.decoupling[{i}]");
        let (style, value, rating) = match cap {
            RawCapacitor::Across { gap, value, rating } => {
                if *gap < 1 || *gap as usize > n + 1 {
                    return Err(c.fail(
                        format!("{field}.gap"),
                        format!(
                            "expected a gap number from 1 (K–D1) to {} (D{n}–return), found {gap}",
                            n + 1
                        ),
                    ));
                }
                (CapStyle::Across(*gap as usize), value, rating)
            }
            RawCapacitor::ToReturn {
                dynode,
                value,
                rating,
            } => {
                if *dynode < 1 || *dynode as usize > n {
                    return Err(c.fail(
                        format!("{field}.dynode"),
                        format!("expected a dynode number from 1 to {n}, found {dynode}"),
                    ));
                }
                (CapStyle::ToReturn(*dynode as usize), value, rating)
            }
        };
        let value = c.within(&format!("{field}.value"), value, &limits::DECOUPLING)?;
        let rating = match rating {
            None => None,
            Some(r) => Some(ElectricPotential::new::<volt>(c.ranged(
                &format!("{field}.rating"),
                r,
                Kind::Voltage,
                1.0,
                1e5,
            )?)),
        };
        if decoupling.iter().any(|x: &Decoupling| x.style == style) {
            let place = match style {
                CapStyle::Across(g) => format!("across gap {g}"),
                CapStyle::ToReturn(k) => format!("from D{k} to the return"),
            };
            return Err(c.fail(
                &field,
                format!("a capacitor is already fitted {place}; give one entry per place"),
            ));
        }
        decoupling.push(Decoupling {
            style,
            value: Capacitance::new::<farad>(value),
            rating,
        });
    }
    let stray = match &d.stray {
        None => TYPICAL_STRAY_FARADS,
        Some(v) => c.within("divider.stray", v, &limits::STRAY)?,
    };
    let shield_resistor = match &d.shield_resistor {
        None => None,
        Some(v) => Some(c.ranged("divider.shield_resistor", v, Kind::Resistance, 1.0, 1e13)?),
    };

    // Load
    let l = &raw.load;
    let load_resistance = match &l.resistance {
        Value::Text(t) if t.trim().eq_ignore_ascii_case("open") => None,
        v => Some(c.within("load.resistance", v, &limits::LOAD_RESISTANCE)?),
    };
    let base_resistance = match &l.at_base {
        None => None,
        Some(v) => Some(c.ranged("load.at_base", v, Kind::Resistance, 1.0, 1e9)?),
    };
    let load_capacitance = match &l.capacitance {
        None => 10e-12,
        Some(v) => c.within("load.capacitance", v, &limits::LOAD_CAPACITANCE)?,
    };
    let anode_resistor = match &l.anode_resistor {
        None => None,
        Some(v) => Some(c.within("load.anode_resistor", v, &limits::ANODE_RESISTOR)?),
    };
    let coupling = match &l.coupling {
        None => None,
        Some(v) => Some(c.within("load.coupling", v, &limits::COUPLING)?),
    };
    let coupling_rating = match &l.coupling_rating {
        None => None,
        Some(v) => Some(c.ranged("load.coupling_rating", v, Kind::Voltage, 1.0, 1e5)?),
    };
    if coupling_rating.is_some() && coupling.is_none() {
        return Err(c.fail(
            "load.coupling_rating",
            "a rating is given but no load.coupling capacitor",
        ));
    }
    match s.polarity {
        Polarity::AnodePositive => {
            if anode_resistor.is_none() {
                return Err(c.fail(
                    "load.anode_resistor",
                    "polarity AnodePositive puts the anode at +HV: expected an anode resistor to +HV (e.g. \"100k\")",
                ));
            }
            if coupling.is_none() {
                return Err(c.fail(
                    "load.coupling",
                    "polarity AnodePositive needs a coupling capacitor between the anode and the load, or the load sits at +HV",
                ));
            }
        }
        Polarity::CathodeNegative => {
            if coupling.is_some() && anode_resistor.is_none() {
                return Err(c.fail(
                    "load.anode_resistor",
                    "a coupling capacitor blocks the anode's DC path: expected an anode resistor to ground beside it",
                ));
            }
        }
    }

    // Resistor family
    let (resistor_power, resistor_wv, resistor_tol, resistors_assumed) = match &raw.resistors {
        None => (0.25, 250.0, 0.01, true),
        Some(r) => {
            let p = c.within("resistors.power", &r.power, &limits::RESISTOR_POWER)?;
            let wv = c.within(
                "resistors.working_voltage",
                &r.working_voltage,
                &limits::RESISTOR_WORKING_VOLTAGE,
            )?;
            let tol = match &r.tolerance {
                None => 0.01,
                Some(v) => c.quantity("resistors.tolerance", v, Kind::Ratio)?,
            };
            if !(tol > 0.0 && tol < 0.5) {
                return Err(c.fail(
                    "resistors.tolerance",
                    format!("expected a tolerance between 0 and 50 %, found {tol}"),
                ));
            }
            (p, wv, tol, false)
        }
    };

    let supply_quality = match &s.quality {
        None => None,
        Some(q) => {
            let frac = |name: &str, v: &Option<Value>| -> Result<Option<f64>, DesignError> {
                match v {
                    None => Ok(None),
                    Some(v) => {
                        let field = format!("supply.quality.{name}");
                        let x = c.quantity(&field, v, Kind::Ratio)?;
                        if !(x > 0.0 && x < 0.5) {
                            return Err(c.fail(
                                &field,
                                format!("expected a fraction between 0 and 50 %, such as \"0.1 %\", found {v}"),
                            ));
                        }
                        Ok(Some(x))
                    }
                }
            };
            let ripple_volts = match &q.ripple {
                None => None,
                Some(v) => Some(c.ranged("supply.quality.ripple", v, Kind::Voltage, 1e-9, 1e3)?),
            };
            Some(SupplyQuality {
                ripple_volts,
                drift: frac("drift", &q.drift)?,
                setting_accuracy: frac("setting_accuracy", &q.setting_accuracy)?,
                gain_stability: frac("gain_stability", &q.gain_stability)?,
            })
        }
    };

    let multiplier = match &s.multiplier {
        None => None,
        Some(m) => Some(check_multiplier(&c, m)?),
    };

    let anode_current = match &raw.operating {
        None => max_anode * 0.1,
        Some(o) => c.within(
            "operating.anode_current",
            &o.anode_current,
            &limits::ANODE_CURRENT,
        )?,
    };

    // Zero-current gap voltages against the gap rating.
    if let Some(max_gap) = max_gap
        && let Some((i, v)) = linear_gap_voltages(&elements, sv.abs())
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
    if let Ok(model) = crate::model::tube::TubeModel::from_spec(&tube) {
        let gaps = linear_gap_voltages(&elements, sv.abs());
        let g = model.gain_for_gaps(&gaps);
        if !(g.is_finite() && g <= limits::TUBE_GAIN.hi) {
            return Err(c.fail(
                "supply.volts",
                format!(
                    "the gain law (tube.gain) gives a gain of {} at {} under this divider, above the plausible {}; check tube.gain against the supply",
                    units::show_number(g),
                    units::format_eng(sv.abs(), "V"),
                    units::show_number(limits::TUBE_GAIN.hi)
                ),
            ));
        }
    }

    let mut signal = check_signal(&c, &raw)?;
    let train = match &raw.train {
        None => None,
        Some(t) => {
            let npe = signal.light.as_ref().map(|l| {
                crate::model::light::convert(
                    &l.spectrum,
                    l.photons,
                    l.coupling,
                    l.filter.as_ref(),
                    &signal.cathode,
                )
                .emitted
            });
            Some(crate::design::train::check(t, &c, npe)?)
        }
    };
    one_pulse_stream(&c, train.as_ref(), &mut signal)?;
    if anode_resistor.is_none()
        && load_resistance.is_none()
        && base_resistance.is_none()
        && signal.readout.is_none()
        && signal.front_end.is_none()
    {
        return Err(c.fail(
            "load.resistance",
            "\"open\" leaves the anode with no DC return: fit a resistor at the base (load.at_base), a termination, or describe the instrument's input in a readout block",
        ));
    }

    let followers = match &d.followers {
        None => None,
        Some(f) => Some(check_followers(&c, f, elements.len() - 1)?),
    };
    Ok(Design {
        source: file.to_string(),
        name: raw.name,
        notes: raw.notes,
        tube,
        supply_volts: ElectricPotential::new::<volt>(sv),
        polarity: s.polarity,
        current_limit: current_limit.map(ElectricCurrent::new::<ampere>),
        supply_capacitance: supply_capacitance.map(Capacitance::new::<farad>),
        elements,
        decoupling,
        stray: Capacitance::new::<farad>(stray),
        shield_resistor: shield_resistor.map(ElectricalResistance::new::<ohm>),
        load_resistance: load_resistance.map(ElectricalResistance::new::<ohm>),
        base_resistance: base_resistance.map(ElectricalResistance::new::<ohm>),
        load_capacitance: Capacitance::new::<farad>(load_capacitance),
        anode_resistor: anode_resistor.map(ElectricalResistance::new::<ohm>),
        coupling: coupling.map(|cc| {
            (
                Capacitance::new::<farad>(cc),
                coupling_rating.map(ElectricPotential::new::<volt>),
            )
        }),
        resistor_power: Power::new::<watt>(resistor_power),
        resistor_working_voltage: ElectricPotential::new::<volt>(resistor_wv),
        resistor_tolerance: resistor_tol,
        resistors_assumed,
        anode_current: ElectricCurrent::new::<ampere>(anode_current),
        operating_assumed: raw.operating.is_none(),
        series_parts,
        zener_ratings,
        supply_quality,
        supply_resistance: supply_resistance.map(ElectricalResistance::new::<ohm>),
        multiplier,
        followers,
        train,
        signal,
    })
}

/// Default small-signal output resistance of a follower, ohms (1/g_m of a small high-voltage
/// MOSFET at a few milliamperes is tens of ohms; an order of magnitude from memory).
pub const FOLLOWER_OUTPUT_OHMS: f64 = 100.0;

/// Checked followers (docs/physics.md §14).
#[derive(Debug, Clone, PartialEq)]
pub struct Followers {
    /// Dynodes held, 1-based, ascending.
    pub hold: Vec<usize>,
    /// Total string resistance, cathode to return rail.
    pub string: ElectricalResistance,
    /// Follower drop between tap and dynode.
    pub drop: ElectricPotential,
    /// Current limit of each follower.
    pub current_limit: ElectricCurrent,
    /// Small-signal output resistance of each follower.
    pub output_resistance: ElectricalResistance,
    /// Voltage rating of each transistor.
    pub volts_rating: ElectricPotential,
    /// Power rating of each transistor.
    pub power_rating: Power,
}

/// The `divider.followers` block.
fn check_followers(c: &Checker, f: &RawFollowers, stages: usize) -> Result<Followers, DesignError> {
    let field = "divider.followers.hold";
    if f.hold.is_empty() {
        return Err(c.fail(field, "expected at least one dynode number, found none"));
    }
    let mut hold = Vec::with_capacity(f.hold.len());
    for (i, &d) in f.hold.iter().enumerate() {
        if d < 1 || d > stages as i64 {
            return Err(c.fail(
                format!("{field}[{i}]"),
                format!("expected a dynode number from 1 to {stages}, found {d}"),
            ));
        }
        if hold.contains(&(d as usize)) {
            return Err(c.fail(
                format!("{field}[{i}]"),
                format!("dynode {d} is named twice"),
            ));
        }
        hold.push(d as usize);
    }
    hold.sort_unstable();
    let output_resistance = match &f.output_resistance {
        None => FOLLOWER_OUTPUT_OHMS,
        Some(v) => c.within(
            "divider.followers.output_resistance",
            v,
            &limits::FOLLOWER_OUTPUT_RESISTANCE,
        )?,
    };
    Ok(Followers {
        hold,
        string: ElectricalResistance::new::<ohm>(c.within(
            "divider.followers.string",
            &f.string,
            &limits::FOLLOWER_STRING,
        )?),
        drop: ElectricPotential::new::<volt>(c.within(
            "divider.followers.drop",
            &f.drop,
            &limits::FOLLOWER_DROP,
        )?),
        current_limit: ElectricCurrent::new::<ampere>(c.within(
            "divider.followers.current_limit",
            &f.current_limit,
            &limits::FOLLOWER_CURRENT_LIMIT,
        )?),
        output_resistance: ElectricalResistance::new::<ohm>(output_resistance),
        volts_rating: ElectricPotential::new::<volt>(c.within(
            "divider.followers.volts_rating",
            &f.volts_rating,
            &limits::FOLLOWER_VOLTS_RATING,
        )?),
        power_rating: Power::new::<watt>(c.within(
            "divider.followers.power_rating",
            &f.power_rating,
            &limits::FOLLOWER_POWER_RATING,
        )?),
    })
}

/// The `supply.multiplier` block, each quantity within its range in [`limits`].
fn check_multiplier(
    c: &Checker,
    m: &RawMultiplier,
) -> Result<crate::solve::multiplier::Multiplier, DesignError> {
    use uom::si::f64::Frequency;
    use uom::si::frequency::hertz;
    let (lo, hi) = limits::MULTIPLIER_STAGES;
    if m.stages < lo as i64 || m.stages > hi as i64 {
        return Err(c.fail(
            "supply.multiplier.stages",
            format!(
                "expected a whole number of stages from {lo} (a doubler) to {hi}, found {}",
                m.stages
            ),
        ));
    }
    let capacitance = c.within(
        "supply.multiplier.capacitance",
        &m.capacitance,
        &limits::MULTIPLIER_CAPACITANCE,
    )?;
    let frequency = c.within(
        "supply.multiplier.frequency",
        &m.frequency,
        &limits::MULTIPLIER_FREQUENCY,
    )?;
    let amplitude = c.within(
        "supply.multiplier.amplitude",
        &m.amplitude,
        &limits::MULTIPLIER_AMPLITUDE,
    )?;
    let filter = match &m.filter {
        None => None,
        Some(f) => Some((
            ElectricalResistance::new::<ohm>(c.within(
                "supply.multiplier.filter.resistance",
                &f.resistance,
                &limits::FILTER_RESISTANCE,
            )?),
            Capacitance::new::<farad>(c.within(
                "supply.multiplier.filter.capacitance",
                &f.capacitance,
                &limits::FILTER_CAPACITANCE,
            )?),
        )),
    };
    Ok(crate::solve::multiplier::Multiplier {
        stages: m.stages as usize,
        capacitance: Capacitance::new::<farad>(capacitance),
        frequency: Frequency::new::<hertz>(frequency),
        amplitude: ElectricPotential::new::<volt>(amplitude),
        filter,
        diode: crate::solve::multiplier::RECTIFIER,
    })
}

/// The light block and the train block describe the same pulses: the train's pattern sets the
/// average rate, the light's `rate` may restate it (within 1 %) or be left out (it is then
/// taken from the train), and a contradiction is refused where the light's rate is written.
fn one_pulse_stream(
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

/// Gap voltages with no tube current: resistors share what the Zeners leave, in proportion.
/// (Ohm's and Kirchhoff's laws; Zeners at their breakdown voltage plus I·r.)
pub fn linear_gap_voltages(elements: &[Element], supply: f64) -> Vec<f64> {
    let (vz, r): (f64, f64) = elements.iter().fold((0.0, 0.0), |(vz, r), e| match e {
        Element::Resistor(x) => (vz, r + x.get::<ohm>()),
        Element::Zener(v, rz) => (vz + v.get::<volt>(), r + rz.get::<ohm>()),
    });
    let i = (supply - vz) / r;
    elements
        .iter()
        .map(|e| match e {
            Element::Resistor(x) => i * x.get::<ohm>(),
            Element::Zener(v, rz) => v.get::<volt>() + i * rz.get::<ohm>(),
        })
        .collect()
}
