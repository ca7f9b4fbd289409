//! Engineering notation for quantities typed by people, and the uom types the model speaks.
//!
//! A design file is written the way a practitioner writes on a schematic: `"1.25 kV"`,
//! `"-1100 V"`, `"4.7 nF"`, `"1M"`, `"470k"`, `"4k7"`, `"50 ohm"`, `"2 %"`, or a plain SI number.
//! This module turns such text into a number in SI base units for one expected kind of quantity,
//! and refuses text whose unit belongs to another kind ("4.7 uV" where a capacitance belongs).
//! Only this edge knows about text; everything inward receives uom quantities or checked f64.
//!
//! Prefixes follow the SI brochure (BIPM, 9th edition, with the 2022 additions) from q to Q;
//! c, d, da and h only before a unit symbol ("500 cm"). `K` is accepted for kilo as resistor
//! markings commonly use it (common practice), SPICE's `Meg` for mega, spelled-out names
//! ("kilovolt", "nanofarads"), and the marking style "4k7", "4n7" (the prefix standing for the
//! decimal point, IEC 60062); `R` is an ohm sign for resistances ("4R7", "100R"). The ohm sign
//! U+2126 reads as the Greek capital omega; an invisible character (a byte-order mark, a
//! zero-width space) is refused and named.

use std::fmt;

pub use uom::si::f64::{
    Capacitance, ElectricCharge, ElectricCurrent, ElectricPotential, ElectricalResistance, Energy,
    Frequency, Length, Power, Time,
};

/// The kind of quantity a field expects; it fixes which unit symbols are accepted.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// Volts.
    Voltage,
    /// Ohms.
    Resistance,
    /// Farads.
    Capacitance,
    /// Amperes.
    Current,
    /// Watts.
    Power,
    /// Seconds.
    Time,
    /// Hertz.
    Frequency,
    /// Coulombs.
    Charge,
    /// Joules.
    Energy,
    /// Metres (wavelengths are usually written in nm).
    Length,
    /// A pure number; `%` divides by 100 and `ppm` by 1e6.
    Ratio,
}

impl Kind {
    /// Human name used in error messages.
    pub fn name(self) -> &'static str {
        match self {
            Kind::Voltage => "a voltage",
            Kind::Resistance => "a resistance",
            Kind::Capacitance => "a capacitance",
            Kind::Current => "a current",
            Kind::Power => "a power",
            Kind::Time => "a time",
            Kind::Frequency => "a frequency",
            Kind::Charge => "a charge",
            Kind::Energy => "an energy",
            Kind::Length => "a length",
            Kind::Ratio => "a plain number or percentage",
        }
    }

    /// The bare noun, for messages: "voltage", "capacitance".
    pub fn noun(self) -> &'static str {
        let name = self.name();
        name.strip_prefix("an ")
            .or_else(|| name.strip_prefix("a "))
            .unwrap_or(name)
    }

    /// Whether text of this kind must carry a unit symbol or an SI prefix.
    ///
    /// Voltages and resistances may be bare numbers (volts, ohms), as on a schematic ("1100",
    /// "470k"); ratios are plain numbers. Every other kind lives far from 1 in its base unit
    /// (microamperes, nanofarads, nanoseconds), so a bare "2" is far more likely a forgotten
    /// "2 uA" than two amperes: it is refused and the unit asked for.
    pub fn needs_unit(self) -> bool {
        !matches!(self, Kind::Voltage | Kind::Resistance | Kind::Ratio)
    }

    /// A typical way to write `number` with a unit of this kind, for messages ("2 uA").
    pub fn typical(self, number: &str) -> String {
        let unit = match self {
            Kind::Current => "uA",
            Kind::Capacitance => "nF",
            Kind::Time => "ns",
            Kind::Frequency => "kHz",
            Kind::Charge => "pC",
            Kind::Energy => "nJ",
            Kind::Length => "nm",
            Kind::Power => "W",
            Kind::Voltage => "V",
            Kind::Resistance => "k",
            Kind::Ratio => "%",
        };
        format!("\"{number} {unit}\"")
    }

    /// The canonical unit symbol, for messages.
    pub fn symbol(self) -> &'static str {
        match self {
            Kind::Voltage => "V",
            Kind::Resistance => "ohm",
            Kind::Capacitance => "F",
            Kind::Current => "A",
            Kind::Power => "W",
            Kind::Time => "s",
            Kind::Frequency => "Hz",
            Kind::Charge => "C",
            Kind::Energy => "J",
            Kind::Length => "m",
            Kind::Ratio => "%",
        }
    }

    /// Example text for messages.
    pub fn example(self) -> &'static str {
        match self {
            Kind::Voltage => "\"-1100 V\" or \"1.25 kV\"",
            Kind::Resistance => "\"470k\", \"1M\", \"4k7\" or \"50 ohm\"",
            Kind::Capacitance => "\"4.7 nF\" or \"10n\"",
            Kind::Current => "\"100 uA\"",
            Kind::Power => "\"0.25 W\"",
            Kind::Time => "\"5 ns\"",
            Kind::Frequency => "\"1 MHz\"",
            Kind::Charge => "\"1.6 pC\"",
            Kind::Energy => "\"10 nJ\"",
            Kind::Length => "\"405 nm\"",
            Kind::Ratio => "0.9 or \"90 %\"",
        }
    }
}

/// Why a piece of text is not a quantity of the expected kind.
#[derive(Debug, Clone, PartialEq)]
pub struct QuantityError {
    /// What was expected, e.g. "a capacitance".
    pub expected: Kind,
    /// What went wrong, in words.
    pub reason: String,
}

impl fmt::Display for QuantityError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "expected {} such as {}: {}",
            self.expected.name(),
            self.expected.example(),
            self.reason
        )
    }
}

fn unit_kind(symbol: &str) -> Option<Kind> {
    Some(match symbol {
        "V" | "v" => Kind::Voltage,
        "ohm" | "ohms" | "Ohm" | "Ω" | "\u{2126}" | "R" | "Ohms" => Kind::Resistance,
        "F" => Kind::Capacitance,
        "A" => Kind::Current,
        "W" => Kind::Power,
        "s" => Kind::Time,
        "Hz" => Kind::Frequency,
        "C" => Kind::Charge,
        "J" => Kind::Energy,
        "m" => Kind::Length,
        _ => return None,
    })
}

/// SI prefixes (BIPM, 9th edition, with the 2022 additions), `u`/`µ`/`μ` for micro and `K` for
/// kilo (resistor markings). `R` is ronna only where it cannot be the ohm sign; the prefixes
/// for small powers of ten (c, d, h) stand only before a unit symbol ([`bare_prefix`]).
fn prefix_factor(c: char) -> Option<f64> {
    Some(match c {
        'q' => 1e-30,
        'r' => 1e-27,
        'y' => 1e-24,
        'z' => 1e-21,
        'a' => 1e-18,
        'f' => 1e-15,
        'p' => 1e-12,
        'n' => 1e-9,
        'u' | 'µ' | 'μ' => 1e-6,
        'm' => 1e-3,
        'c' => 1e-2,
        'd' => 1e-1,
        'h' => 1e2,
        'k' | 'K' => 1e3,
        'M' => 1e6,
        'G' => 1e9,
        'T' => 1e12,
        'P' => 1e15,
        'E' => 1e18,
        'Z' => 1e21,
        'Y' => 1e24,
        'R' => 1e27,
        'Q' => 1e30,
        _ => return None,
    })
}

/// Whether prefix `c` may stand alone after a number ("10n", "470k"). Centi, deci and hecto
/// may not: "2 h" and "1 d" read as hours and days, "5 c" as nothing.
fn bare_prefix(c: char) -> bool {
    !matches!(c, 'c' | 'd' | 'h')
}

/// The prefixes listed in messages.
const PREFIXES: &str = "q r y z a f p n u/µ m c d (da) h k M G T P E Z Y R Q, or Meg";

/// Spelled-out prefixes and units ("kilovolt", "nanofarads", "megohm").
fn spelled(rest: &str, kind: Kind) -> Option<f64> {
    const PREFIX_NAMES: &[(&str, f64)] = &[
        ("quecto", 1e-30),
        ("ronto", 1e-27),
        ("yocto", 1e-24),
        ("zepto", 1e-21),
        ("atto", 1e-18),
        ("femto", 1e-15),
        ("pico", 1e-12),
        ("nano", 1e-9),
        ("micro", 1e-6),
        ("milli", 1e-3),
        ("centi", 1e-2),
        ("deci", 1e-1),
        ("deca", 1e1),
        ("deka", 1e1),
        ("hecto", 1e2),
        ("kilo", 1e3),
        ("mega", 1e6),
        ("meg", 1e6),
        ("giga", 1e9),
        ("tera", 1e12),
        ("peta", 1e15),
        ("exa", 1e18),
        ("zetta", 1e21),
        ("yotta", 1e24),
        ("ronna", 1e27),
        ("quetta", 1e30),
    ];
    let names: &[&str] = match kind {
        Kind::Voltage => &["volt"],
        Kind::Resistance => &["ohm"],
        Kind::Capacitance => &["farad"],
        Kind::Current => &["ampere", "amp"],
        Kind::Power => &["watt"],
        Kind::Time => &["second", "sec"],
        Kind::Frequency => &["hertz"],
        Kind::Charge => &["coulomb"],
        Kind::Energy => &["joule"],
        Kind::Length => &["metre", "meter"],
        Kind::Ratio => &["percent"],
    };
    let word = rest.to_lowercase();
    let word = word.strip_suffix('s').unwrap_or(&word);
    let unit = |w: &str| names.contains(&w) || (kind == Kind::Frequency && w == "hertz");
    if unit(word) {
        return Some(1.0);
    }
    PREFIX_NAMES.iter().find_map(|(p, f)| {
        let tail = word.strip_prefix(p)?;
        // "megohm": the prefix's last vowel merges with the unit's first.
        (unit(tail) || (kind == Kind::Resistance && tail == "hm")).then_some(*f)
    })
}

/// An invisible or look-alike character that a copy and paste may bring into a value,
/// named for the message: (code point, name).
fn invisible(text: &str) -> Option<(char, &'static str)> {
    text.chars().find_map(|c| {
        let name = match c {
            '\u{FEFF}' => "byte-order mark",
            '\u{200B}' => "zero-width space",
            '\u{200C}' => "zero-width non-joiner",
            '\u{200D}' => "zero-width joiner",
            '\u{200E}' | '\u{200F}' => "direction mark",
            '\u{2060}' => "word joiner",
            '\u{00AD}' => "soft hyphen",
            '\u{202A}'..='\u{202E}' | '\u{2066}'..='\u{2069}' => "direction control",
            '\n' | '\r' => "line break",
            c if c.is_control() && c != '\t' => "control character",
            _ => return None,
        };
        Some((c, name))
    })
}

/// A number for a message: as written for everyday sizes, in scientific notation otherwise
/// (never 1e300 digit by digit).
pub fn show_number(x: f64) -> String {
    let a = x.abs();
    if x == 0.0 || !x.is_finite() || (1e-4..1e7).contains(&a) {
        format!("{x}")
    } else {
        format!("{x:e}")
    }
}

/// Split the leading number (sign, digits, point, exponent) from the rest.
fn split_number(text: &str) -> (&str, &str) {
    let bytes = text.as_bytes();
    let mut i = 0;
    if i < bytes.len() && (bytes[i] == b'+' || bytes[i] == b'-') {
        i += 1;
    }
    while i < bytes.len() && (bytes[i].is_ascii_digit() || bytes[i] == b'.') {
        i += 1;
    }
    // An exponent only when followed by digits, so "1e" stays a number then a unit.
    if i < bytes.len() && (bytes[i] == b'e' || bytes[i] == b'E') {
        let mut j = i + 1;
        if j < bytes.len() && (bytes[j] == b'+' || bytes[j] == b'-') {
            j += 1;
        }
        if j < bytes.len() && bytes[j].is_ascii_digit() {
            while j < bytes.len() && bytes[j].is_ascii_digit() {
                j += 1;
            }
            i = j;
        }
    }
    (&text[..i], &text[i..])
}

/// Parse `text` as a quantity of `kind`, returning its value in SI base units.
///
/// Accepted shapes: `number`, `number unit`, `number prefix`, `number prefix unit`, with or
/// without a space, and for resistances the marking style `4k7` / `4R7`.
pub fn parse(text: &str, kind: Kind) -> Result<f64, QuantityError> {
    let err = |reason: String| QuantityError {
        expected: kind,
        reason,
    };
    if let Some((c, name)) = invisible(text) {
        return Err(err(format!(
            "the text holds an invisible character, U+{:04X} ({name}); delete it and type the value again",
            c as u32
        )));
    }
    // No-break spaces (copied from documents) are spaces; the ohm sign U+2126 is the letter Ω.
    let normalised: String = text
        .chars()
        .map(|c| match c {
            '\u{00A0}' | '\u{202F}' | '\u{2009}' | '\t' => ' ',
            '\u{2126}' => 'Ω',
            c => c,
        })
        .collect();
    let t = normalised.trim();
    if t.is_empty() {
        return Err(err("the text is empty".into()));
    }
    let lower = t.to_ascii_lowercase();
    let unsigned = lower.trim_start_matches(['+', '-']);
    if unsigned.starts_with("nan") || unsigned.starts_with("inf") {
        return Err(err(format!("\"{t}\" is not a finite number")));
    }
    let (num, rest) = split_number(t);
    if num.is_empty() || num == "+" || num == "-" || num == "." {
        return Err(err(format!("\"{t}\" does not start with a number")));
    }
    let mut value: f64 = num
        .parse()
        .map_err(|_| err(format!("\"{num}\" is not a number")))?;
    let mut rest = rest.trim_start();

    // Marking style "4k7", "4R7", "2M2", "4n7", "4n7F" (IEC 60062): a prefix (or R for ohms)
    // standing for the decimal point, an optional unit symbol after the second digit group.
    if !num.contains(['.', 'e', 'E']) && num.chars().any(|c| c.is_ascii_digit()) {
        let mut chars = rest.chars();
        if let Some(c) = chars.next() {
            let tail = chars.as_str();
            let digits = tail.len() - tail.trim_start_matches(|d: char| d.is_ascii_digit()).len();
            let (frac, unit) = tail.split_at(digits);
            let unit_ok = unit.is_empty() || unit_kind(unit.trim_start()) == Some(kind);
            let factor = if c == 'R' && kind == Kind::Resistance {
                Some(1.0)
            } else if c == 'R' || !bare_prefix(c) {
                None
            } else {
                prefix_factor(c)
            };
            if let (Some(f), false, true, false) =
                (factor, frac.is_empty(), unit_ok, kind == Kind::Ratio)
            {
                let frac: f64 = format!("0.{frac}").parse().unwrap_or(0.0);
                let v = (value.abs() + frac) * f * value.signum();
                return finite(v, t, kind);
            }
        }
    }

    if kind == Kind::Ratio {
        return match rest {
            "" => finite(value, t, kind),
            "%" => finite(value / 100.0, t, kind),
            "ppm" => finite(value * 1e-6, t, kind),
            other => Err(err(format!(
                "\"{other}\" is not understood here; write a plain number, a percentage or ppm"
            ))),
        };
    }
    if rest.is_empty() {
        if kind.needs_unit() {
            return Err(err(format!(
                "\"{t}\" has no unit; {} needs one (or at least an SI prefix), e.g. {}",
                kind.name(),
                kind.typical(num)
            )));
        }
        return finite(value, t, kind);
    }
    if rest.starts_with([',', '_', '\'']) && rest[1..].starts_with(|c: char| c.is_ascii_digit()) {
        return Err(err(format!(
            "\"{t}\": write numbers without a thousands separator and with a point for decimals, e.g. \"1100 V\" or \"4.7 nF\""
        )));
    }
    if rest == "%" {
        return Err(err(format!("\"{t}\" is a percentage, not {}", kind.name())));
    }

    // SPICE's "Meg" (SPICE reads "M" as milli; here "M" is mega as in SI, so both agree).
    for meg in ["Meg", "meg", "MEG"] {
        if let Some(after) = rest.strip_prefix(meg) {
            let after = after.trim_start();
            if after.is_empty() || unit_kind(after) == Some(kind) {
                return finite(value * 1e6, t, kind);
            }
        }
    }
    // Spelled out: "1.2 kilovolts", "470 kiloohm", "10 nanofarads".
    if rest.chars().count() > 2
        && rest.chars().all(char::is_alphabetic)
        && let Some(f) = spelled(rest, kind)
    {
        return finite(value * f, t, kind);
    }
    // Deca, the one two-letter prefix.
    if let Some(after) = rest.strip_prefix("da")
        && unit_kind(after.trim_start()) == Some(kind)
    {
        return finite(value * 10.0, t, kind);
    }
    // Whole rest a unit symbol?
    if let Some(k) = unit_kind(rest) {
        // "m" alone for a non-length kind means milli with no unit (e.g. "10m" ohm).
        if k == kind {
            return finite(value, t, kind);
        }
        if rest.chars().count() == 1
            && let Some(f) = prefix_factor(rest.chars().next().unwrap_or(' '))
            && bare_prefix(rest.chars().next().unwrap_or(' '))
            && !(rest == "R" && kind == Kind::Resistance)
        {
            return finite(value * f, t, kind);
        }
        return Err(err(format!(
            "the unit \"{rest}\" is {}, not {}",
            k.name(),
            kind.name()
        )));
    }
    // Prefix then (optional) unit.
    let mut chars = rest.chars();
    let first = chars.next().unwrap_or(' ');
    let after = chars.as_str();
    if let Some(f) = prefix_factor(first) {
        value *= f;
        rest = after.trim_start();
        if rest.is_empty() {
            if !bare_prefix(first) {
                return Err(err(format!(
                    "\"{first}\" alone is not read as a prefix (it could mean hours, days or a typing slip); write the unit after it, e.g. \"{first}{}\", or use a prefix from {PREFIXES}",
                    kind.symbol()
                )));
            }
            return finite(value, t, kind);
        }
        return match unit_kind(rest) {
            Some(k) if k == kind => finite(value, t, kind),
            Some(k) => Err(err(format!(
                "the unit \"{rest}\" is {}, not {}",
                k.name(),
                kind.name()
            ))),
            None => Err(err(format!(
                "\"{rest}\" is not a known unit; write {} with an optional SI prefix",
                kind.symbol()
            ))),
        };
    }
    if first.is_alphabetic() {
        if after.is_empty() || unit_kind(after.trim_start()) == Some(kind) {
            return Err(err(format!("\"{first}\" is not an SI prefix ({PREFIXES})")));
        }
        return Err(err(format!(
            "\"{rest}\" is not a unit of {}; write {} with an optional SI prefix ({PREFIXES}), or spelled out (\"kilovolt\")",
            kind.noun(),
            kind.symbol()
        )));
    }
    Err(err(format!("cannot read \"{rest}\" after the number")))
}

fn finite(v: f64, text: &str, kind: Kind) -> Result<f64, QuantityError> {
    if v.is_finite() {
        Ok(v)
    } else {
        Err(QuantityError {
            expected: kind,
            reason: format!("\"{text}\" is too large to be a finite number"),
        })
    }
}

/// The engineering prefix for a magnitude `a`: (scale, symbol), from T down to f. A value is
/// given a prefix once it reaches `slack` × the prefix's scale (so that rounding to three digits
/// does not print "1000 V"); `micro` is the symbol used for 1e-6 ("µ" for reports, "u" for text
/// a design file reads back).
pub fn engineering_prefix(a: f64, micro: &'static str, slack: f64) -> (f64, &'static str) {
    [
        (1e12, "T"),
        (1e9, "G"),
        (1e6, "M"),
        (1e3, "k"),
        (1.0, ""),
        (1e-3, "m"),
        (1e-6, micro),
        (1e-9, "n"),
        (1e-12, "p"),
        (1e-15, "f"),
    ]
    .into_iter()
    .find(|(s, _)| a >= *s * slack)
    .unwrap_or((1e-18, "a"))
}

/// Format a value in SI base units with an engineering prefix and the unit symbol,
/// three significant digits: `format_eng(4.7e-9, "F")` gives `"4.70 nF"`.
pub fn format_eng(value: f64, unit: &str) -> String {
    if !value.is_finite() {
        return "n/a".to_string();
    }
    if value == 0.0 {
        return format!("0 {unit}");
    }
    // Beyond the prefixes from a to T, scientific notation where the atto prefix would show
    // "0.00": "386 aC" for 3.86e-19 C, never "0.00 aV" for 1e-300 V.
    if !(0.005e-18..999.5e12).contains(&value.abs()) {
        return format!("{value:.2e} {unit}");
    }
    let (scale, p) = engineering_prefix(value.abs(), "µ", 0.9995);
    let x = value / scale;
    let digits = if x.abs() >= 99.95 {
        0
    } else if x.abs() >= 9.995 {
        1
    } else {
        2
    };
    format!("{x:.digits$} {p}{unit}")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-12 * b.abs().max(1e-30)
    }

    #[test]
    fn practitioner_spellings() {
        assert!(close(parse("1.25 kV", Kind::Voltage).unwrap(), 1250.0));
        assert!(close(parse("-1100 V", Kind::Voltage).unwrap(), -1100.0));
        assert!(close(parse("4.7 nF", Kind::Capacitance).unwrap(), 4.7e-9));
        assert!(close(parse("10n", Kind::Capacitance).unwrap(), 1e-8));
        assert!(close(parse("1M", Kind::Resistance).unwrap(), 1e6));
        assert!(close(parse("470k", Kind::Resistance).unwrap(), 4.7e5));
        assert!(close(parse("4k7", Kind::Resistance).unwrap(), 4700.0));
        assert!(close(parse("4R7", Kind::Resistance).unwrap(), 4.7));
        assert!(close(parse("50 ohm", Kind::Resistance).unwrap(), 50.0));
        assert!(close(parse("2.2 MΩ", Kind::Resistance).unwrap(), 2.2e6));
        assert!(close(parse("100 uA", Kind::Current).unwrap(), 1e-4));
        assert!(close(parse("100µA", Kind::Current).unwrap(), 1e-4));
        assert!(close(parse("1e-3 A", Kind::Current).unwrap(), 1e-3));
        assert!(close(parse("1100", Kind::Voltage).unwrap(), 1100.0));
        assert!(close(parse("2 %", Kind::Ratio).unwrap(), 0.02));
        assert!(close(parse("405 nm", Kind::Length).unwrap(), 4.05e-7));
        assert!(close(parse("1 MHz", Kind::Frequency).unwrap(), 1e6));
    }

    #[test]
    fn wrong_kind_is_named() {
        let e = parse("4.7 uV", Kind::Capacitance).unwrap_err();
        assert!(
            e.to_string().contains("a voltage, not a capacitance"),
            "{e}"
        );
        let e = parse("3 xF", Kind::Capacitance).unwrap_err();
        assert!(e.to_string().contains("not an SI prefix"), "{e}");
        assert!(parse("NaN V", Kind::Voltage).is_err());
        assert!(parse("inf", Kind::Voltage).is_err());
        assert!(parse("", Kind::Voltage).is_err());
        assert!(parse("V", Kind::Voltage).is_err());
        assert!(parse("1e999 V", Kind::Voltage).is_err());
        // Decision documented in docs/design-file.md: currents, capacitances, times… need a unit.
        let e = parse("100", Kind::Current).unwrap_err();
        assert!(e.to_string().contains("has no unit"), "{e}");
        assert!(parse("100u", Kind::Current).is_ok());
        let e = parse("1,100 V", Kind::Voltage).unwrap_err();
        assert!(e.to_string().contains("thousands separator"), "{e}");
        let e = parse("1500 Vlt", Kind::Voltage).unwrap_err();
        assert!(
            e.to_string().contains("\"Vlt\" is not a unit of voltage"),
            "{e}"
        );
        assert_eq!(Kind::Energy.noun(), "energy");
    }

    #[test]
    fn every_si_prefix_and_common_spellings() {
        // SI brochure, 9th edition (2019) and the 2022 additions (ronna, quetta, ronto, quecto).
        assert!(close(parse("500 cm", Kind::Length).unwrap(), 5.0));
        assert!(close(parse("3 dam", Kind::Length).unwrap(), 30.0));
        assert!(close(parse("2 aC", Kind::Charge).unwrap(), 2e-18));
        assert!(close(parse("1 PHz", Kind::Frequency).unwrap(), 1e15));
        assert!(close(parse("1 qC", Kind::Charge).unwrap(), 1e-30));
        assert!(close(parse("4n7", Kind::Capacitance).unwrap(), 4.7e-9));
        assert!(close(parse("4n7F", Kind::Capacitance).unwrap(), 4.7e-9));
        assert!(close(parse("0.47Meg", Kind::Resistance).unwrap(), 4.7e5));
        assert!(close(parse("1meg", Kind::Resistance).unwrap(), 1e6));
        assert!(close(
            parse("1.2 kilovolts", Kind::Voltage).unwrap(),
            1200.0
        ));
        assert!(close(
            parse("10 nanofarad", Kind::Capacitance).unwrap(),
            1e-8
        ));
        assert!(close(parse("2 megohm", Kind::Resistance).unwrap(), 2e6));
        assert!(close(parse("100R", Kind::Resistance).unwrap(), 100.0));
        // The ohm sign U+2126 and the Greek capital omega U+03A9 alike.
        assert!(close(
            parse("4.7 k\u{2126}", Kind::Resistance).unwrap(),
            4700.0
        ));
        assert!(close(
            parse("4.7 k\u{03A9}", Kind::Resistance).unwrap(),
            4700.0
        ));
        // Centi, deci and hecto never alone: "2 h" is not 200 s.
        let e = parse("2 h", Kind::Time).unwrap_err();
        assert!(
            e.to_string().contains("alone is not read as a prefix"),
            "{e}"
        );
        // An invisible character is named.
        let e = parse("\u{FEFF}100 V", Kind::Voltage).unwrap_err();
        assert!(e.to_string().contains("U+FEFF (byte-order mark)"), "{e}");
        let e = parse("10\u{200B}0 V", Kind::Voltage).unwrap_err();
        assert!(e.to_string().contains("zero-width space"), "{e}");
        assert!(close(
            parse("1100\u{00A0}V", Kind::Voltage).unwrap(),
            1100.0
        ));
    }

    #[test]
    fn numbers_in_messages_stay_short() {
        assert_eq!(show_number(1e300), "1e300");
        assert_eq!(show_number(250.0), "250");
        assert_eq!(format_eng(1e-300, "V"), "1.00e-300 V");
        assert_eq!(format_eng(1e300, "V"), "1.00e300 V");
    }

    #[test]
    fn engineering_format() {
        assert_eq!(format_eng(4.7e-9, "F"), "4.70 nF");
        assert_eq!(format_eng(1100.0, "V"), "1.10 kV");
        assert_eq!(format_eng(-1100.0, "V"), "-1.10 kV");
        assert_eq!(format_eng(100.0, "V"), "100 V");
        assert_eq!(format_eng(0.0, "A"), "0 A");
        assert_eq!(format_eng(f64::NAN, "A"), "n/a");
    }
}
