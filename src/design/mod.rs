//! The design file: a RON document describing one tube, its divider, supply, load and parts.
//!
//! Two layers live here. The *raw* layer mirrors the file exactly (serde, `deny_unknown_fields`,
//! quantities still as typed text). The *checked* layer ([`Design`]) holds uom quantities and is
//! built only after every field has been read and every physical-sense rule has passed; errors
//! name the file and either the `line:col` that ron reports or the field path
//! (`divider.gaps[3]`) with what was expected. Nothing downstream sees raw text.
//!
//! The schema is documented field by field in docs/design-file.md and by the commented demo designs.
//!
//! Each block has its own module holding its raw type, its checked type and its check; the
//! checks take the field path prefix (`tube`, `load`, …), so a requirements file reuses the
//! tube, load, resistor-family and supply-extras checks as they are. [`parse_str`] checks a
//! parsed design block by block in the file's order.

use std::fmt;
use std::path::Path;

use serde::de::{self, Visitor};
use serde::{Deserialize, Deserializer};

use crate::units::{
    self, Capacitance, ElectricCurrent, ElectricPotential, ElectricalResistance, Power,
};
use uom::si::capacitance::farad;
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;

mod cathode;
mod checker;
mod divider;
mod front_end;
mod light;
pub mod limits;
mod load;
mod operating;
mod readout;
mod signal_fields;
pub mod starter;
mod supply;
mod syntax;
pub mod train;
mod tube;

pub use cathode::*;
pub(crate) use checker::*;
pub use divider::*;
pub use front_end::*;
pub use light::*;
pub use load::*;
pub use operating::*;
pub use readout::*;
pub use signal_fields::*;
pub use supply::*;
pub(crate) use syntax::syntax_error;
pub use tube::*;

/// Largest design file read, in bytes: a design is a page of text, not a data dump.
pub(crate) const MAX_FILE_BYTES: u64 = 1 << 20;

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
        gap_label(self.tube.stages, self.polarity, i)
    }
}

/// The label of gap `i` (0-based) of an `n`-dynode tube: "K–D1", "D1–D2", …, and "Dn–GND"
/// (cathode negative) or "Dn–HV" (anode positive) for the last.
pub(crate) fn gap_label(n: usize, polarity: Polarity, i: usize) -> String {
    if i == 0 {
        "K–D1".to_string()
    } else if i < n {
        format!("D{}–D{}", i, i + 1)
    } else {
        match polarity {
            Polarity::CathodeNegative => format!("D{n}–GND"),
            Polarity::AnodePositive => format!("D{n}–HV"),
        }
    }
}
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
/// Check a parsed design block by block, in the file's order, each error naming its field.
fn check(raw: RawDesign, file: &str) -> Result<Design, DesignError> {
    let c = Checker::new(file);
    check_free_text(&c, &raw.name, raw.notes.as_deref())?;
    let tube = check_tube(&c, "tube", &raw.tube)?;
    let n = tube.stages;
    let s = &raw.supply;
    let supply = check_supply(&c, "supply", s, tube.max_supply.get::<volt>())?;
    let sv = supply.volts;
    let divider = check_divider(&c, "divider", &raw.divider, n, sv.abs())?;
    let load = check_load(&c, "load", &raw.load, s.polarity)?;
    let resistors = check_resistors(&c, "resistors", raw.resistors.as_ref())?;
    let supply_quality = check_quality(&c, "supply", s.quality.as_ref())?;
    let multiplier = match &s.multiplier {
        None => None,
        Some(m) => Some(check_multiplier(&c, "supply", m)?),
    };
    let max_anode = tube.max_anode_current.get::<ampere>();
    let anode_current = check_operating(&c, raw.operating.as_ref(), max_anode)?;
    check_divider_on_tube(&c, &tube, &divider.elements, sv.abs())?;
    let mut signal = check_signal(&c, &raw)?;
    let train = check_train(&c, raw.train.as_ref(), &signal)?;
    one_pulse_stream(&c, train.as_ref(), &mut signal)?;
    let input = signal.readout.is_some() || signal.front_end.is_some();
    check_dc_return(&c, "load", &load, input)?;
    let followers = match &raw.divider.followers {
        None => None,
        Some(f) => Some(check_followers(
            &c,
            "divider",
            f,
            divider.elements.len() - 1,
        )?),
    };
    Ok(Design {
        source: file.to_string(),
        name: raw.name,
        notes: raw.notes,
        tube,
        supply_volts: ElectricPotential::new::<volt>(sv),
        polarity: s.polarity,
        current_limit: supply.current_limit.map(ElectricCurrent::new::<ampere>),
        supply_capacitance: supply.capacitance.map(Capacitance::new::<farad>),
        elements: divider.elements,
        decoupling: divider.decoupling,
        stray: Capacitance::new::<farad>(divider.stray),
        shield_resistor: divider
            .shield_resistor
            .map(ElectricalResistance::new::<ohm>),
        load_resistance: load.resistance,
        base_resistance: load.at_base,
        load_capacitance: load.capacitance,
        anode_resistor: load.anode_resistor,
        coupling: load.coupling,
        resistor_power: resistors.power,
        resistor_working_voltage: resistors.working_voltage,
        resistor_tolerance: resistors.tolerance,
        resistors_assumed: resistors.assumed,
        anode_current: ElectricCurrent::new::<ampere>(anode_current),
        operating_assumed: raw.operating.is_none(),
        series_parts: divider.series_parts,
        zener_ratings: divider.zener_ratings,
        supply_quality,
        supply_resistance: supply.resistance.map(ElectricalResistance::new::<ohm>),
        multiplier,
        followers,
        train,
        signal,
    })
}

/// Free text goes to terminals and documents: no control characters in `name` (an escape
/// sequence in a title could rewrite the terminal that shows the report); `notes` may hold
/// line breaks and tabs. Shared with requirements files, which carry both into the design.
pub(crate) fn check_free_text(
    c: &Checker,
    name: &str,
    notes: Option<&str>,
) -> Result<(), DesignError> {
    // Free text goes to terminals and documents: no control characters (an escape sequence in a
    // title could rewrite the terminal that shows the report); notes may hold line breaks.
    for (field, text, allowed) in [
        ("name", Some(name), &[][..]),
        ("notes", notes, &['\n', '\t'][..]),
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
    Ok(())
}

/// The train block, its pulse size in photoelectrons taken from the light when one is given.
fn check_train(
    c: &Checker,
    raw: Option<&train::RawTrain>,
    signal: &SignalSpec,
) -> Result<Option<train::TrainSpec>, DesignError> {
    let Some(t) = raw else {
        return Ok(None);
    };
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
    Ok(Some(train::check(t, c, npe)?))
}
