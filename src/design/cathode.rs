//! The tube's signal-budget fields: the photocathode (`tube.cathode`, a built-in curve or a
//! table), single-electron timing and transit time, raw and checked. Wavelength tables are
//! `(nm, value)` pairs of plain numbers, the way spectra are tabulated.

use serde::Deserialize;

use super::{Checker, DesignError, RawTube, Value, limits};
use crate::model::cathode::{self, Cathode, Curve};
use crate::units::Kind;

/// Single-electron rise time assumed when the tube gives none (10–90 %, from memory: a few ns
/// for a 2-inch linear-focused tube).
pub(crate) const TYPICAL_SER_RISE_S: f64 = 2e-9;
/// Transit-time spread (FWHM) assumed when the tube gives none (from memory).
pub(crate) const TYPICAL_TTS_FWHM_S: f64 = 1e-9;

/// The cathode's spectral response as written in `tube.cathode`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawCathode {
    /// A built-in material (see `dynode cathodes`) behind a built-in window.
    Builtin {
        /// Material key, e.g. "bialkali".
        name: String,
        /// Window key ("borosilicate", "uv-glass", "fused-silica"); default the material's usual.
        #[serde(default)]
        window: Option<String>,
    },
    /// The tube's own table, window included.
    Table {
        /// What the second column is.
        unit: TableUnit,
        /// (nm, value) pairs, wavelengths rising.
        points: Vec<(f64, f64)>,
    },
}

/// The unit of a cathode table's values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
pub enum TableUnit {
    /// Quantum efficiency in percent.
    QePercent,
    /// Radiant sensitivity in mA/W.
    MilliampsPerWatt,
}

/// The tube's transit time at a supply voltage.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawTransit {
    /// Transit time (cathode to anode pulse).
    pub time: Value,
    /// Supply voltage magnitude at which it holds (default the design's supply).
    #[serde(default)]
    pub volts: Option<Value>,
}

/// The tube's single-electron timing.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TubeTiming {
    /// 10–90 % rise of the single-electron response, s.
    pub ser_rise: f64,
    /// Transit-time spread, FWHM, s.
    pub tts_fwhm: f64,
    /// Whether the rise was assumed.
    pub rise_assumed: bool,
    /// Whether the spread was assumed.
    pub spread_assumed: bool,
    /// Transit time, s, and the supply magnitude it holds at (V; `None`: the design's supply).
    pub transit: Option<(f64, Option<f64>)>,
}

/// A wavelength table at `field`: at least two rising (nm, value) pairs, values up to
/// `max_value`.
pub(crate) fn table(
    c: &Checker,
    field: &str,
    points: &[(f64, f64)],
    max_value: f64,
) -> Result<Curve, DesignError> {
    if points.len() < 2 {
        return Err(c.fail(
            field,
            format!(
                "expected at least 2 (nm, value) pairs, found {}",
                points.len()
            ),
        ));
    }
    for (i, (nm, y)) in points.iter().enumerate() {
        if !(nm.is_finite() && (100.0..=2500.0).contains(nm)) {
            return Err(c.fail(
                format!("{field}[{i}]"),
                format!("expected a wavelength in nm between 100 and 2500, found {nm}"),
            ));
        }
        if !(y.is_finite() && *y >= 0.0 && *y <= max_value) {
            return Err(c.fail(
                format!("{field}[{i}]"),
                format!("expected a value from 0 to {max_value}, found {y}"),
            ));
        }
        if i > 0 && *nm <= points[i - 1].0 {
            return Err(c.fail(
                format!("{field}[{i}]"),
                format!(
                    "expected wavelengths in rising order, found {nm} nm after {} nm",
                    points[i - 1].0
                ),
            ));
        }
    }
    Curve::new(points.to_vec()).ok_or_else(|| c.fail(field, "not a valid table"))
}

/// The cathode at `at.cathode`: a built-in curve (and window) or a table in QE % or mA/W;
/// the built-in bialkali curve when none is given.
pub(crate) fn check_cathode(
    c: &Checker,
    at: &str,
    raw: Option<&RawCathode>,
) -> Result<(Cathode, bool), DesignError> {
    let keys = || {
        cathode::builtin_cathodes()
            .iter()
            .map(|m| m.key.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    };
    match raw {
        None => Ok((
            Cathode::builtin("bialkali", None).ok_or_else(|| {
                c.fail(
                    format!("{at}.cathode"),
                    "the built-in bialkali curve is missing",
                )
            })?,
            true,
        )),
        Some(RawCathode::Builtin { name, window }) => {
            if cathode::find(cathode::builtin_cathodes(), name).is_none() {
                return Err(c.fail(
                    format!("{at}.cathode.name"),
                    format!(
                        "expected one of {} (see `dynode cathodes`), found \"{name}\"",
                        keys()
                    ),
                ));
            }
            if let Some(w) = window
                && cathode::find(cathode::builtin_windows(), w).is_none()
            {
                return Err(c.fail(
                    format!("{at}.cathode.window"),
                    format!("expected one of borosilicate, uv-glass, fused-silica, found \"{w}\""),
                ));
            }
            Cathode::builtin(name, window.as_deref())
                .map(|k| (k, false))
                .ok_or_else(|| c.fail(format!("{at}.cathode"), "unknown built-in"))
        }
        Some(RawCathode::Table { unit, points }) => {
            let (max, label) = match unit {
                TableUnit::QePercent => (100.0, "the design's table (QE %)"),
                TableUnit::MilliampsPerWatt => (2000.0, "the design's table (mA/W)"),
            };
            let curve = table(c, &format!("{at}.cathode.points"), points, max)?;
            let to_qe = |(nm, y): &(f64, f64)| match unit {
                TableUnit::QePercent => (*nm, y / 100.0),
                TableUnit::MilliampsPerWatt => (*nm, cathode::qe_from_sensitivity(y / 1000.0, *nm)),
            };
            // A table in mA/W is interpolated in mA/W, as given: it is resampled every
            // nanometre (linear in sensitivity) before the conversion to quantum efficiency,
            // whose own linear interpolation then follows the sensitivity's to within rounding.
            let resampled: Vec<(f64, f64)> = match unit {
                TableUnit::QePercent => curve.points.clone(),
                TableUnit::MilliampsPerWatt => {
                    let mut v = Vec::new();
                    for w in curve.points.windows(2) {
                        let ((a, ya), (b, yb)) = (w[0], w[1]);
                        let steps = ((b - a).ceil() as usize).clamp(1, 2000);
                        for i in 0..steps {
                            let f = i as f64 / steps as f64;
                            v.push((a + f * (b - a), ya + f * (yb - ya)));
                        }
                    }
                    v.extend(curve.points.last().copied());
                    v
                }
            };
            let qe: Vec<(f64, f64)> = resampled.iter().map(to_qe).collect();
            let at_points: Vec<(f64, f64)> = curve.points.iter().map(to_qe).collect();
            if let Some((i, (nm, q))) = at_points.iter().enumerate().find(|(_, (_, q))| *q > 1.0) {
                return Err(c.fail(
                    format!("{at}.cathode.points[{i}]"),
                    format!(
                        "this sensitivity means a quantum efficiency of {:.0} % at {nm} nm (QE = S·hc/(eλ)), above 100 %: check the unit",
                        q * 100.0
                    ),
                ));
            }
            let curve = Curve::new(qe)
                .ok_or_else(|| c.fail(format!("{at}.cathode.points"), "not a valid table"))?;
            Ok((Cathode::table(label, curve), false))
        }
    }
}

/// The tube's single-electron rise and transit-time spread at `at` (typical when not given);
/// the transit time is read by [`check_transit`].
pub(crate) fn check_tube_timing(
    c: &Checker,
    at: &str,
    t: &RawTube,
) -> Result<TubeTiming, DesignError> {
    let (ser_rise, rise_assumed) = match &t.single_electron_rise {
        None => (TYPICAL_SER_RISE_S, true),
        Some(v) => (
            c.ranged(
                &format!("{at}.single_electron_rise"),
                v,
                Kind::Time,
                1e-11,
                1e-6,
            )?,
            false,
        ),
    };
    let (tts_fwhm, spread_assumed) = match &t.transit_spread {
        None => (TYPICAL_TTS_FWHM_S, true),
        Some(v) => (
            c.ranged(&format!("{at}.transit_spread"), v, Kind::Time, 1e-12, 1e-6)?,
            false,
        ),
    };
    Ok(TubeTiming {
        ser_rise,
        tts_fwhm,
        rise_assumed,
        spread_assumed,
        transit: None,
    })
}

/// The tube's transit time at `at.transit_time`: seconds, and the supply magnitude it holds at.
pub(crate) fn check_transit(
    c: &Checker,
    at: &str,
    t: &RawTube,
) -> Result<Option<(f64, Option<f64>)>, DesignError> {
    let Some(tr) = &t.transit_time else {
        return Ok(None);
    };
    Ok(Some((
        c.within(
            &format!("{at}.transit_time.time"),
            &tr.time,
            &limits::TRANSIT_TIME,
        )?,
        tr.volts
            .as_ref()
            .map(|v| c.within(&format!("{at}.transit_time.volts"), v, &limits::TUBE_VOLTS))
            .transpose()?,
    )))
}

/// The signal-budget fields of the tube block at `at` (shared with requirements files):
/// cathode, single-electron timing and transit time.
pub(crate) fn check_tube_response(
    c: &Checker,
    at: &str,
    t: &RawTube,
) -> Result<(Cathode, bool, TubeTiming), DesignError> {
    let (cathode, assumed) = check_cathode(c, at, t.cathode.as_ref())?;
    let mut timing = check_tube_timing(c, at, t)?;
    timing.transit = check_transit(c, at, t)?;
    Ok((cathode, assumed, timing))
}
