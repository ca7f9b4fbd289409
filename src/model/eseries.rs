//! Preferred numbers for resistors and capacitors: the IEC 60063 E6, E12, E24, E48 and E96 series.
//!
//! The tables are the published lists typed in, not the rounded geometric series
//! `round(10^(i/N))`: for E24 that formula gives 2.6, 2.9, 3.2, 3.5, 3.8, 4.2, 4.6 and 8.3 where
//! the standard has 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and 8.2 (the older, coarser series were kept
//! as subsets). E48 and E96 do follow the three-digit rounded formula; they are typed in all the
//! same, and a test compares them with it.
//!
//! Values are mantissas in [1, 10); [`snap`] and friends work across decades on any positive value
//! (ohms, farads, anything). The API is deliberately small and plain f64 so that other modules
//! (divider sizing, decoupling capacitors) can use it directly.

/// One of the IEC 60063 series.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Deserialize, serde::Serialize)]
pub enum Series {
    /// 6 values per decade (±20 % parts).
    E6,
    /// 12 values per decade (±10 %).
    E12,
    /// 24 values per decade (±5 %, and commonly 1 % parts too).
    E24,
    /// 48 values per decade (±2 %).
    E48,
    /// 96 values per decade (±1 %).
    E96,
}

/// How to snap a value to the series.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Snap {
    /// The nearest preferred value on a logarithmic scale (the series is geometric).
    Nearest,
    /// The smallest preferred value at or above.
    Up,
    /// The largest preferred value at or below.
    Down,
}

/// E6, IEC 60063.
pub const E6: [f64; 6] = [1.0, 1.5, 2.2, 3.3, 4.7, 6.8];

/// E12, IEC 60063.
pub const E12: [f64; 12] = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2];

/// E24, IEC 60063 (note 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2: not the rounded formula).
pub const E24: [f64; 24] = [
    1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6,
    6.2, 6.8, 7.5, 8.2, 9.1,
];

/// E48, IEC 60063.
pub const E48: [f64; 48] = [
    1.00, 1.05, 1.10, 1.15, 1.21, 1.27, 1.33, 1.40, 1.47, 1.54, 1.62, 1.69, 1.78, 1.87, 1.96, 2.05,
    2.15, 2.26, 2.37, 2.49, 2.61, 2.74, 2.87, 3.01, 3.16, 3.32, 3.48, 3.65, 3.83, 4.02, 4.22, 4.42,
    4.64, 4.87, 5.11, 5.36, 5.62, 5.90, 6.19, 6.49, 6.81, 7.15, 7.50, 7.87, 8.25, 8.66, 9.09, 9.53,
];

/// E96, IEC 60063.
pub const E96: [f64; 96] = [
    1.00, 1.02, 1.05, 1.07, 1.10, 1.13, 1.15, 1.18, 1.21, 1.24, 1.27, 1.30, 1.33, 1.37, 1.40, 1.43,
    1.47, 1.50, 1.54, 1.58, 1.62, 1.65, 1.69, 1.74, 1.78, 1.82, 1.87, 1.91, 1.96, 2.00, 2.05, 2.10,
    2.15, 2.21, 2.26, 2.32, 2.37, 2.43, 2.49, 2.55, 2.61, 2.67, 2.74, 2.80, 2.87, 2.94, 3.01, 3.09,
    3.16, 3.24, 3.32, 3.40, 3.48, 3.57, 3.65, 3.74, 3.83, 3.92, 4.02, 4.12, 4.22, 4.32, 4.42, 4.53,
    4.64, 4.75, 4.87, 4.99, 5.11, 5.23, 5.36, 5.49, 5.62, 5.76, 5.90, 6.04, 6.19, 6.34, 6.49, 6.65,
    6.81, 6.98, 7.15, 7.32, 7.50, 7.68, 7.87, 8.06, 8.25, 8.45, 8.66, 8.87, 9.09, 9.31, 9.53, 9.76,
];

impl Series {
    /// Every series, coarsest first.
    pub const ALL: [Series; 5] = [
        Series::E6,
        Series::E12,
        Series::E24,
        Series::E48,
        Series::E96,
    ];

    /// The mantissas of one decade, in [1, 10), rising.
    pub fn values(self) -> &'static [f64] {
        match self {
            Series::E6 => &E6,
            Series::E12 => &E12,
            Series::E24 => &E24,
            Series::E48 => &E48,
            Series::E96 => &E96,
        }
    }

    /// "E24" and so on.
    pub fn name(self) -> &'static str {
        match self {
            Series::E6 => "E6",
            Series::E12 => "E12",
            Series::E24 => "E24",
            Series::E48 => "E48",
            Series::E96 => "E96",
        }
    }

    /// Parse "E24" (case-insensitive).
    pub fn from_name(name: &str) -> Option<Series> {
        Series::ALL
            .into_iter()
            .find(|s| s.name().eq_ignore_ascii_case(name.trim()))
    }

    /// Values per decade.
    pub fn per_decade(self) -> usize {
        self.values().len()
    }

    /// The preferred values bracketing `x` (> 0): the largest at or below and the smallest at
    /// or above (equal when `x` is itself a preferred value, to within 1e-9 relative).
    /// Returns `None` for a value that is not finite and positive.
    pub fn bracket(self, x: f64) -> Option<(f64, f64)> {
        if !(x.is_finite() && x > 0.0) {
            return None;
        }
        let vals = self.values();
        let mut decade = 10f64.powi(x.log10().floor() as i32);
        // Guard the floor against rounding: keep the mantissa in [1, 10).
        if x / decade >= 10.0 * (1.0 - 1e-12) {
            decade *= 10.0;
        } else if x / decade < 1.0 - 1e-12 {
            decade /= 10.0;
        }
        let m = x / decade;
        let tol = 1e-9;
        if let Some(v) = vals.iter().find(|v| ((m - **v) / *v).abs() <= tol) {
            let exact = v * decade;
            return Some((exact, exact));
        }
        let above = vals.iter().position(|v| *v > m);
        Some(match above {
            Some(0) => (vals[vals.len() - 1] * decade / 10.0, vals[0] * decade),
            Some(i) => (vals[i - 1] * decade, vals[i] * decade),
            None => (vals[vals.len() - 1] * decade, 10.0 * decade),
        })
    }

    /// Snap `x` to the series. `None` for a value that is not finite and positive.
    pub fn snap(self, x: f64, how: Snap) -> Option<f64> {
        let (lo, hi) = self.bracket(x)?;
        Some(match how {
            Snap::Down => lo,
            Snap::Up => hi,
            Snap::Nearest => {
                if (x / lo).ln() <= (hi / x).ln() {
                    lo
                } else {
                    hi
                }
            }
        })
    }

    /// The nearest preferred value (log scale).
    pub fn nearest(self, x: f64) -> Option<f64> {
        self.snap(x, Snap::Nearest)
    }

    /// The smallest preferred value at or above `x`.
    pub fn up(self, x: f64) -> Option<f64> {
        self.snap(x, Snap::Up)
    }

    /// The largest preferred value at or below `x`.
    pub fn down(self, x: f64) -> Option<f64> {
        self.snap(x, Snap::Down)
    }

    /// Round a value to the digits the series prints (two for E6–E24, three for E48/E96), so that
    /// a snapped value shows as `470000` and not `469999.99999999994`.
    pub fn clean(self, x: f64) -> f64 {
        if !(x.is_finite() && x > 0.0) {
            return x;
        }
        let digits = if self.per_decade() <= 24 { 2 } else { 3 };
        let e = x.log10().floor() as i32 - (digits - 1);
        // Divide by a power of ten rather than multiply by its (inexact) reciprocal, so that
        // 0.82 comes out as 0.82 and not 0.8200000000000001.
        if e < 0 {
            let inv = 10f64.powi(-e);
            (x * inv).round() / inv
        } else {
            let scale = 10f64.powi(e);
            (x / scale).round() * scale
        }
    }
}

impl std::fmt::Display for Series {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// Voltage ratings capacitors are commonly sold in, volts (common practice, from memory).
pub const CAPACITOR_RATINGS: [f64; 20] = [
    50.0, 63.0, 100.0, 160.0, 200.0, 250.0, 400.0, 500.0, 630.0, 1000.0, 1500.0, 2000.0, 2500.0,
    3000.0, 4000.0, 5000.0, 6000.0, 8000.0, 10000.0, 15000.0,
];
/// Margin of a capacitor's rating over the voltage it holds (common practice: at least 1.5×).
pub const CAPACITOR_RATING_MARGIN: f64 = 1.5;

/// The rating to order for a capacitor holding `volts`: the smallest common rating at least
/// [`CAPACITOR_RATING_MARGIN`] times it (above the largest, that product rounded up). The one
/// rule for every place that recommends a capacitor (sizing, trains, parts list).
pub fn capacitor_rating(volts: f64) -> f64 {
    let need = CAPACITOR_RATING_MARGIN * volts.abs();
    CAPACITOR_RATINGS
        .iter()
        .copied()
        .find(|r| *r >= need * (1.0 - 1e-12))
        .unwrap_or(need.ceil())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn snapping_crosses_decades() {
        let s = Series::E12;
        assert_eq!(
            s.bracket(470e3).map(|(a, b)| (s.clean(a), s.clean(b))),
            Some((470e3, 470e3))
        );
        assert_eq!(s.up(9.0e5).map(|v| s.clean(v)), Some(1.0e6));
        assert_eq!(s.down(9.9e5).map(|v| s.clean(v)), Some(8.2e5));
        assert_eq!(s.down(1.05e6).map(|v| s.clean(v)), Some(1.0e6));
        assert_eq!(s.nearest(0.95).map(|v| s.clean(v)), Some(1.0));
        assert_eq!(s.nearest(0.9).map(|v| s.clean(v)), Some(0.82));
        assert_eq!(s.nearest(-1.0), None);
        assert_eq!(s.nearest(f64::NAN), None);
    }
}
