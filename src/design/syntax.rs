//! RON errors in the words of the file: the place, what was found and expected, the line with
//! a caret, and hints a newcomer needs (an unknown field's nearest name, a stray character).

use super::DesignError;

/// A RON error in the words of the file (see [`parse_str`]); for every RON input of the tool.
pub(crate) fn syntax_error(file: &str, text: &str, e: &ron::error::SpannedError) -> DesignError {
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
