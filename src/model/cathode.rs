//! Photocathode spectral response: built-in generic curves, user tables, and quantum efficiency.
//!
//! Equations and sources:
//! - quantum efficiency from radiant sensitivity `QE = S · h c / (e λ)`, with the exact 2019-SI
//!   values of `h`, `c` and `e` (CODATA 2018), i.e. `QE = S[A/W] · 1239.84198… / λ[nm]`;
//! - the tube's response at a wavelength is the bare cathode's QE times the window's
//!   transmission; between table points the response is interpolated linearly; outside a table's
//!   range it is zero, and the caller is told so (a warning, never a crash).
//!
//! The built-in curves live in `data/` as small CSV files embedded at compile time. Each is an
//! *approximate typical curve, from memory*: no tube maker's data and no one tube. They serve to
//! compare materials and wavelengths; for a real budget load your tube's own table.

use std::sync::OnceLock;

use crate::model::constants::{ELEMENTARY_CHARGE, LIGHT_SPEED, PLANCK};

/// `h c / e` in nm·W/A (= 1239.8419843…).
pub fn hc_over_e_nm() -> f64 {
    PLANCK * LIGHT_SPEED / ELEMENTARY_CHARGE * 1e9
}

/// Quantum efficiency (fraction) from radiant sensitivity `s` (A/W) at `nm`.
pub fn qe_from_sensitivity(s_amps_per_watt: f64, nm: f64) -> f64 {
    s_amps_per_watt * hc_over_e_nm() / nm
}

/// Radiant sensitivity (A/W) from quantum efficiency (fraction) at `nm`.
pub fn sensitivity_from_qe(qe: f64, nm: f64) -> f64 {
    qe * nm / hc_over_e_nm()
}

/// Energy of one photon at `nm`, joules.
pub fn photon_energy(nm: f64) -> f64 {
    PLANCK * LIGHT_SPEED / (nm * 1e-9)
}

/// A tabulated curve: wavelength (nm, strictly rising) against a value, linear in between.
#[derive(Debug, Clone, PartialEq)]
pub struct Curve {
    /// (nm, value) points, wavelengths strictly rising.
    pub points: Vec<(f64, f64)>,
}

impl Curve {
    /// Build from points; `None` unless there are two or more with rising wavelengths and
    /// finite, non-negative values.
    pub fn new(points: Vec<(f64, f64)>) -> Option<Curve> {
        if points.len() < 2 {
            return None;
        }
        let ok = points
            .iter()
            .all(|(x, y)| x.is_finite() && y.is_finite() && *x > 0.0 && *y >= 0.0)
            && points.windows(2).all(|w| w[1].0 > w[0].0);
        ok.then_some(Curve { points })
    }

    /// Shortest and longest tabulated wavelength, nm.
    pub fn range(&self) -> (f64, f64) {
        (self.points[0].0, self.points[self.points.len() - 1].0)
    }

    /// Value at `nm`, or `None` outside the table.
    pub fn at(&self, nm: f64) -> Option<f64> {
        let (lo, hi) = self.range();
        if !(nm >= lo && nm <= hi) {
            return None;
        }
        let i = self.points.partition_point(|(x, _)| *x <= nm);
        if i >= self.points.len() {
            return Some(self.points[self.points.len() - 1].1);
        }
        let (x0, y0) = self.points[i - 1];
        let (x1, y1) = self.points[i];
        Some(y0 + (y1 - y0) * (nm - x0) / (x1 - x0))
    }

    /// Value at `nm`, zero outside the table.
    pub fn at_or_zero(&self, nm: f64) -> f64 {
        self.at(nm).unwrap_or(0.0)
    }

    /// The same curve with every value multiplied by `f`.
    pub fn scaled(&self, f: f64) -> Curve {
        Curve {
            points: self.points.iter().map(|(x, y)| (*x, y * f)).collect(),
        }
    }
}

/// A built-in curve read from one of the embedded data files.
#[derive(Debug, Clone, PartialEq)]
pub struct BuiltinCurve {
    /// Short key used in design files, e.g. `bialkali`.
    pub key: String,
    /// Label for reports.
    pub label: String,
    /// Where the numbers come from.
    pub provenance: String,
    /// Default window (cathodes only).
    pub window: Option<String>,
    /// What the value column means.
    pub columns: String,
    /// The curve as stored in the file (percent, or A/W for the photodiode).
    pub curve: Curve,
}

/// Parse one embedded data file: `# key: value` header lines, then `nm,value` rows.
pub fn parse_data_file(text: &str) -> Result<BuiltinCurve, String> {
    let mut meta = std::collections::BTreeMap::new();
    let mut points = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() {
            continue;
        }
        if let Some(rest) = line.strip_prefix('#') {
            if let Some((k, v)) = rest.split_once(':') {
                meta.insert(k.trim().to_string(), v.trim().to_string());
            }
            continue;
        }
        let (a, b) = line
            .split_once(',')
            .ok_or_else(|| format!("line {}: expected `nm,value`", i + 1))?;
        let x: f64 = a
            .trim()
            .parse()
            .map_err(|_| format!("line {}: `{a}` is not a number", i + 1))?;
        let y: f64 = b
            .trim()
            .parse()
            .map_err(|_| format!("line {}: `{b}` is not a number", i + 1))?;
        points.push((x, y));
    }
    let get = |k: &str| {
        meta.get(k)
            .cloned()
            .ok_or_else(|| format!("missing `# {k}:` line"))
    };
    Ok(BuiltinCurve {
        key: get("key")?,
        label: get("label")?,
        provenance: get("provenance")?,
        window: meta.get("window").cloned(),
        columns: get("columns")?,
        curve: Curve::new(points).ok_or("the points are not a valid curve")?,
    })
}

const CATHODE_FILES: [&str; 10] = [
    include_str!("../../data/cathodes/bialkali.csv"),
    include_str!("../../data/cathodes/bialkali-high-temperature.csv"),
    include_str!("../../data/cathodes/multialkali-s20.csv"),
    include_str!("../../data/cathodes/multialkali-extended-red.csv"),
    include_str!("../../data/cathodes/ag-o-cs-s1.csv"),
    include_str!("../../data/cathodes/cs-sb-s11.csv"),
    include_str!("../../data/cathodes/cs-sb-s4.csv"),
    include_str!("../../data/cathodes/cs-te.csv"),
    include_str!("../../data/cathodes/gaasp.csv"),
    include_str!("../../data/cathodes/gaas.csv"),
];
const WINDOW_FILES: [&str; 3] = [
    include_str!("../../data/windows/borosilicate.csv"),
    include_str!("../../data/windows/uv-glass.csv"),
    include_str!("../../data/windows/fused-silica.csv"),
];
/// Embedded emission spectra (read by [`crate::model::light`]).
pub(crate) const EMISSION_FILES: [&str; 2] = [
    include_str!("../../data/emission/plastic.csv"),
    include_str!("../../data/emission/nai.csv"),
];
const PHOTODIODE_FILE: &str = include_str!("../../data/photodiode/silicon-pin.csv");

fn parse_all(files: &[&str]) -> Vec<BuiltinCurve> {
    // The files are part of the crate; a unit test parses every one, so a failure here is a
    // defect caught before release, not bad user input.
    files
        .iter()
        .filter_map(|f| parse_data_file(f).ok())
        .collect()
}

/// The built-in cathode materials, in catalogue order.
pub fn builtin_cathodes() -> &'static [BuiltinCurve] {
    static CELL: OnceLock<Vec<BuiltinCurve>> = OnceLock::new();
    CELL.get_or_init(|| parse_all(&CATHODE_FILES))
}

/// The built-in window glasses.
pub fn builtin_windows() -> &'static [BuiltinCurve] {
    static CELL: OnceLock<Vec<BuiltinCurve>> = OnceLock::new();
    CELL.get_or_init(|| parse_all(&WINDOW_FILES))
}

/// The built-in emission spectra.
pub fn builtin_emissions() -> &'static [BuiltinCurve] {
    static CELL: OnceLock<Vec<BuiltinCurve>> = OnceLock::new();
    CELL.get_or_init(|| parse_all(&EMISSION_FILES))
}

/// The built-in silicon PIN photodiode responsivity (A/W).
pub fn silicon_photodiode() -> Option<&'static BuiltinCurve> {
    static CELL: OnceLock<Option<BuiltinCurve>> = OnceLock::new();
    CELL.get_or_init(|| parse_data_file(PHOTODIODE_FILE).ok())
        .as_ref()
}

/// Find a built-in by key in a list.
pub fn find<'a>(list: &'a [BuiltinCurve], key: &str) -> Option<&'a BuiltinCurve> {
    list.iter().find(|c| c.key.eq_ignore_ascii_case(key))
}

/// A tube's photocathode as the model uses it: QE (fraction) against wavelength, window included.
#[derive(Debug, Clone, PartialEq)]
pub struct Cathode {
    /// Label for reports, e.g. "bialkali (Sb-K-Cs) behind borosilicate glass".
    pub label: String,
    /// Short key (built-in key, or "table").
    pub key: String,
    /// Where the numbers come from.
    pub provenance: String,
    /// QE of the bare material (fraction), or of the whole tube for a user table.
    pub material: Curve,
    /// Window transmission (fraction), if a built-in window applies.
    pub window: Option<Curve>,
}

/// The answer of a QE lookup.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Response {
    /// Quantum efficiency, fraction (zero outside the curve).
    pub qe: f64,
    /// Whether the wavelength lies inside the tabulated range.
    pub in_range: bool,
}

impl Cathode {
    /// A built-in material behind a built-in window (`None` = the material's usual window).
    /// Returns `None` if either key is unknown.
    pub fn builtin(key: &str, window: Option<&str>) -> Option<Cathode> {
        let m = find(builtin_cathodes(), key)?;
        let wkey = window.or(m.window.as_deref());
        let w = match wkey {
            Some(k) => Some(find(builtin_windows(), k)?),
            None => None,
        };
        Some(Cathode {
            label: match w {
                Some(w) => format!("{} behind {}", m.label, w.label),
                None => m.label.clone(),
            },
            key: m.key.clone(),
            provenance: m.provenance.clone(),
            material: m.curve.scaled(0.01),
            window: w.map(|w| w.curve.scaled(0.01)),
        })
    }

    /// A user table of QE (fraction) against nm, window included.
    pub fn table(label: &str, qe: Curve) -> Cathode {
        Cathode {
            label: label.to_string(),
            key: "table".to_string(),
            provenance: "the design's own table".to_string(),
            material: qe,
            window: None,
        }
    }

    /// Quantum efficiency at `nm` (window included).
    pub fn response(&self, nm: f64) -> Response {
        let m = self.material.at(nm);
        let w = match &self.window {
            Some(w) => w.at(nm),
            None => Some(1.0),
        };
        match (m, w) {
            (Some(m), Some(w)) => Response {
                qe: m * w,
                in_range: true,
            },
            _ => Response {
                qe: 0.0,
                in_range: false,
            },
        }
    }

    /// Quantum efficiency at `nm`, zero outside.
    pub fn qe(&self, nm: f64) -> f64 {
        self.response(nm).qe
    }

    /// The wavelength range over which both the material and window are tabulated, nm.
    pub fn range(&self) -> (f64, f64) {
        let (a, b) = self.material.range();
        match &self.window {
            Some(w) => {
                let (c, d) = w.range();
                (a.max(c), b.min(d))
            }
            None => (a, b),
        }
    }

    /// Peak QE and where, on a 1 nm scan.
    pub fn peak(&self) -> (f64, f64) {
        let (lo, hi) = self.range();
        let mut best = (lo, 0.0);
        let mut nm = lo.ceil();
        while nm <= hi {
            let q = self.qe(nm);
            if q > best.1 {
                best = (nm, q);
            }
            nm += 1.0;
        }
        best
    }

    /// Short- and long-wavelength cut-offs: where the QE falls to 1 % of its peak, nm
    /// (a convention of this tool; the edge of the table when the curve never falls that far).
    pub fn cutoffs(&self) -> (f64, f64) {
        let (peak_nm, peak) = self.peak();
        let level = 0.01 * peak;
        let (lo, hi) = self.range();
        let mut short = lo;
        let mut nm = peak_nm;
        while nm >= lo {
            if self.qe(nm) < level {
                short = nm;
                break;
            }
            nm -= 1.0;
        }
        let mut long = hi;
        let mut nm = peak_nm;
        while nm <= hi {
            if self.qe(nm) < level {
                long = nm;
                break;
            }
            nm += 1.0;
        }
        (short, long)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_data_file_parses() {
        for f in CATHODE_FILES
            .iter()
            .chain(&WINDOW_FILES)
            .chain(&EMISSION_FILES)
            .chain(std::iter::once(&PHOTODIODE_FILE))
        {
            let c = parse_data_file(f).unwrap();
            assert!(c.provenance.contains("from memory"), "{}", c.key);
        }
        assert_eq!(builtin_cathodes().len(), CATHODE_FILES.len());
        assert_eq!(builtin_windows().len(), WINDOW_FILES.len());
        for c in builtin_cathodes() {
            assert!(Cathode::builtin(&c.key, None).is_some(), "{}", c.key);
        }
    }

    #[test]
    fn interpolation_and_range() {
        let c = Curve::new(vec![(400.0, 10.0), (500.0, 20.0)]).unwrap();
        assert_eq!(c.at(450.0), Some(15.0));
        assert_eq!(c.at(500.0), Some(20.0));
        assert_eq!(c.at(399.0), None);
        assert_eq!(c.at_or_zero(600.0), 0.0);
        assert!(Curve::new(vec![(500.0, 1.0), (400.0, 1.0)]).is_none());
    }

    #[test]
    fn typical_cathodes_sit_where_the_texts_put_them() {
        // Typical photocathode curves in the trade literature (from memory): bialkali peaks at
        // 400–420 nm with 25–30 %.
        let b = Cathode::builtin("bialkali", None).unwrap();
        let (nm, qe) = b.peak();
        assert!(
            (370.0..=430.0).contains(&nm) && (0.24..=0.30).contains(&qe),
            "{nm} {qe}"
        );
        // Cs-Te is solar-blind: no response above about 320 nm (common practice, from memory).
        let t = Cathode::builtin("cs-te", None).unwrap();
        assert!(t.qe(350.0) < 0.01 * t.peak().1);
    }
}
