//! The design-file blocks of the signal budget: the tube's cathode and timing, `light`, `readout`.
//!
//! Raw serde types mirror the file (`deny_unknown_fields`); [`check_signal`] turns them into a
//! checked [`SignalSpec`] or a [`DesignError::Field`] naming the field and what was expected.
//! Wavelength tables are `(nm, value)` pairs of plain numbers, the way spectra are tabulated.

use serde::Deserialize;

use super::{Checker, DesignError, RawDesign, Value};
use crate::budget::counting::CountingSpec;
use crate::budget::frontend::{ChargePreamp, FrontEnd, VoltageAmplifier};
use crate::design::limits::{self, Range};
use crate::model::cathode::{self, Cathode, Curve};
use crate::model::light::{self, Background, LightSpec, Shape, SourceKind, Spectrum};
use crate::units::{self, Kind};

/// Single-electron rise time assumed when the tube gives none (10–90 %, from memory: a few ns
/// for a 2-inch linear-focused tube).
pub const TYPICAL_SER_RISE_S: f64 = 2e-9;
/// Transit-time spread (FWHM) assumed when the tube gives none (from memory).
pub const TYPICAL_TTS_FWHM_S: f64 = 1e-9;
/// Cable velocity factor assumed when none is given (solid polyethylene dielectric, common
/// practice).
pub const TYPICAL_VELOCITY_FACTOR: f64 = 0.66;
/// Divisions on the vertical axis assumed for an oscilloscope (common practice).
pub const TYPICAL_DIVISIONS: u32 = 8;
/// An oscilloscope's baseline noise on its coarser ranges, in divisions rms (from memory: a
/// trace about a third of a division thick; the front end's own floor dominates only on the
/// most sensitive ranges).
pub const TYPICAL_NOISE_PER_DIVISION: f64 = 0.04;

// ---------------------------------------------------------------------------------------------
// Raw layer
// ---------------------------------------------------------------------------------------------

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

/// The `light` block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawLight {
    /// The source.
    pub source: RawSource,
    /// Pulse rate.
    #[serde(default)]
    pub rate: Option<Value>,
    /// Fraction of the emitted photons that reach the cathode.
    #[serde(default)]
    pub coupling: Option<Value>,
    /// Filter transmission: (nm, percent) pairs.
    #[serde(default)]
    pub filter: Option<Vec<(f64, f64)>>,
    /// Steady background light on the cathode.
    #[serde(default)]
    pub background: Option<RawBackground>,
}

/// How much light one pulse carries.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawAmount {
    /// Optical energy per pulse.
    Energy(Value),
    /// Photons per pulse.
    Photons(f64),
    /// Peak optical power (the shape fixes the energy).
    PeakPower(Value),
}

/// Pulse shape in time; `width` means FWHM, full width, or decay constant respectively.
#[derive(Debug, Clone, Copy, Deserialize)]
pub enum RawShape {
    /// Gaussian, `width` = FWHM.
    Gaussian,
    /// Rectangle, `width` = full width.
    Rectangular,
    /// Instant rise and exponential decay, `width` = decay constant.
    Exponential,
}

/// The source of a `light` block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawSource {
    /// A pulsed laser line.
    Laser {
        /// Wavelength (say in a comment whether in air or vacuum).
        wavelength: Value,
        /// Energy, photons or peak power per pulse.
        pulse: RawAmount,
        /// Pulse width (see `shape`).
        width: Value,
        /// Pulse shape, default Gaussian.
        #[serde(default)]
        shape: Option<RawShape>,
    },
    /// A pulsed LED.
    Led {
        /// Centre wavelength.
        centre: Value,
        /// Spectral FWHM.
        fwhm: Value,
        /// Energy, photons or peak power per pulse.
        pulse: RawAmount,
        /// Pulse width (see `shape`).
        width: Value,
        /// Pulse shape, default Rectangular.
        #[serde(default)]
        shape: Option<RawShape>,
    },
    /// A scintillator hit by a particle.
    Scintillator {
        /// Emission spectrum.
        emission: RawEmission,
        /// Photons per MeV deposited.
        yield_per_mev: f64,
        /// Energy deposited per event, MeV.
        deposited_mev: f64,
        /// Decay time constant.
        decay: Value,
        /// Rise time constant (default 0).
        #[serde(default)]
        rise: Option<Value>,
        /// The scintillator's own energy resolution, FWHM (its intrinsic term; default none).
        #[serde(default)]
        resolution: Option<Value>,
    },
}

/// A scintillator's emission spectrum.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawEmission {
    /// Built-in generic plastic (peak 420 nm).
    Plastic,
    /// Built-in generic NaI(Tl)-class (peak 415 nm).
    NaIClass,
    /// (nm, relative photons per nm) pairs.
    Table(Vec<(f64, f64)>),
}

/// Steady background light reaching the cathode.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawBackground {
    /// Optical power on the cathode at one wavelength.
    Power {
        /// Power.
        power: Value,
        /// Wavelength.
        wavelength: Value,
    },
    /// Photon flux on the cathode at one wavelength.
    PhotonFlux {
        /// Photons per second.
        per_second: f64,
        /// Wavelength.
        wavelength: Value,
    },
}

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

// ---------------------------------------------------------------------------------------------
// Checked layer
// ---------------------------------------------------------------------------------------------

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

/// Everything the signal budget reads from a design.
#[derive(Debug, Clone, PartialEq)]
pub struct SignalSpec {
    /// The photocathode (window included).
    pub cathode: Cathode,
    /// Whether the cathode was assumed (none given).
    pub cathode_assumed: bool,
    /// Single-electron timing.
    pub timing: TubeTiming,
    /// The light, if given.
    pub light: Option<LightSpec>,
    /// The readout, if given.
    pub readout: Option<ReadoutSpec>,
    /// The front end, if given.
    pub front_end: Option<FrontEnd>,
    /// Photon counting, if given.
    pub counting: Option<CountingSpec>,
}

fn wavelength(c: &Checker, field: &str, v: &Value) -> Result<f64, DesignError> {
    // A length carries its unit ("405 nm"), as every quantity but volts and ohms does.
    let m = c.positive(field, v, Kind::Length)?;
    if !crate::design::limits::WAVELENGTH.contains(m) {
        return Err(c.fail(
            field,
            format!(
                "expected a wavelength from {} such as \"405 nm\", found {v}",
                crate::design::limits::WAVELENGTH.describe()
            ),
        ));
    }
    Ok(m * 1e9)
}

fn table(
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

fn check_cathode(c: &Checker, raw: &Option<RawCathode>) -> Result<(Cathode, bool), DesignError> {
    let keys = || {
        cathode::builtin_cathodes()
            .iter()
            .map(|m| m.key.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    };
    match raw {
        None => Ok((
            Cathode::builtin("bialkali", None)
                .ok_or_else(|| c.fail("tube.cathode", "the built-in bialkali curve is missing"))?,
            true,
        )),
        Some(RawCathode::Builtin { name, window }) => {
            if cathode::find(cathode::builtin_cathodes(), name).is_none() {
                return Err(c.fail(
                    "tube.cathode.name",
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
                    "tube.cathode.window",
                    format!("expected one of borosilicate, uv-glass, fused-silica, found \"{w}\""),
                ));
            }
            Cathode::builtin(name, window.as_deref())
                .map(|k| (k, false))
                .ok_or_else(|| c.fail("tube.cathode", "unknown built-in"))
        }
        Some(RawCathode::Table { unit, points }) => {
            let (max, label) = match unit {
                TableUnit::QePercent => (100.0, "the design's table (QE %)"),
                TableUnit::MilliampsPerWatt => (2000.0, "the design's table (mA/W)"),
            };
            let curve = table(c, "tube.cathode.points", points, max)?;
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
                    format!("tube.cathode.points[{i}]"),
                    format!(
                        "this sensitivity means a quantum efficiency of {:.0} % at {nm} nm (QE = S·hc/(eλ)), above 100 %: check the unit",
                        q * 100.0
                    ),
                ));
            }
            let curve =
                Curve::new(qe).ok_or_else(|| c.fail("tube.cathode.points", "not a valid table"))?;
            Ok((Cathode::table(label, curve), false))
        }
    }
}

fn check_light(c: &Checker, l: &RawLight) -> Result<LightSpec, DesignError> {
    let amount = |field: &str,
                  a: &RawAmount,
                  spectrum: &Spectrum,
                  shape: &Shape|
     -> Result<(f64, String), DesignError> {
        let e_photon = spectrum.mean_photon_energy();
        match a {
            RawAmount::Energy(v) => {
                let e = c.ranged(&format!("{field}.Energy"), v, Kind::Energy, 1e-21, 10.0)?;
                Ok((
                    e / e_photon,
                    format!("{} per pulse", units::format_eng(e, "J")),
                ))
            }
            RawAmount::Photons(n) => {
                if !crate::design::limits::PHOTONS.contains(*n) {
                    return Err(c.fail(
                        format!("{field}.Photons"),
                        format!(
                            "expected a number of photons {}, found {}",
                            crate::design::limits::PHOTONS.describe(),
                            units::show_number(*n)
                        ),
                    ));
                }
                Ok((*n, format!("{n:.3e} photons per pulse")))
            }
            RawAmount::PeakPower(v) => {
                let p = c.ranged(&format!("{field}.PeakPower"), v, Kind::Power, 1e-15, 1e9)?;
                let e = p * shape.area_per_peak();
                Ok((
                    e / e_photon,
                    format!(
                        "{} peak ({} per pulse)",
                        units::format_eng(p, "W"),
                        units::format_eng(e, "J")
                    ),
                ))
            }
        }
    };
    let mut intrinsic = None;
    let shape_of = |field: &str, s: Option<RawShape>, default: RawShape, w: &Value| {
        let width = c.within(field, w, &crate::design::limits::LIGHT_PULSE_WIDTH)?;
        Ok::<Shape, DesignError>(match s.unwrap_or(default) {
            RawShape::Gaussian => Shape::Gaussian { fwhm: width },
            RawShape::Rectangular => Shape::Rectangular { width },
            RawShape::Exponential => Shape::Exponential {
                rise: 0.0,
                decay: width,
            },
        })
    };
    let (kind, spectrum, photons, shape, label) = match &l.source {
        RawSource::Laser {
            wavelength: wl,
            pulse,
            width,
            shape,
        } => {
            let nm = wavelength(c, "light.source.wavelength", wl)?;
            let spectrum = Spectrum::Line(nm);
            let shape = shape_of("light.source.width", *shape, RawShape::Gaussian, width)?;
            let (n, words) = amount("light.source.pulse", pulse, &spectrum, &shape)?;
            (
                SourceKind::Laser,
                spectrum,
                n,
                shape,
                format!("laser line at {nm:.1} nm, {words}"),
            )
        }
        RawSource::Led {
            centre,
            fwhm,
            pulse,
            width,
            shape,
        } => {
            let nm = wavelength(c, "light.source.centre", centre)?;
            let f = c.ranged("light.source.fwhm", fwhm, Kind::Length, 1e-10, 3e-7)? * 1e9;
            let spectrum = Spectrum::Band {
                centre: nm,
                fwhm: f,
            };
            let shape = shape_of("light.source.width", *shape, RawShape::Rectangular, width)?;
            let (n, words) = amount("light.source.pulse", pulse, &spectrum, &shape)?;
            (
                SourceKind::Led,
                spectrum,
                n,
                shape,
                format!("LED at {nm:.0} nm ({f:.0} nm FWHM, taken as Gaussian), {words}"),
            )
        }
        RawSource::Scintillator {
            emission,
            yield_per_mev,
            deposited_mev,
            decay,
            rise,
            resolution,
        } => {
            intrinsic = match resolution {
                None => None,
                Some(v) => {
                    let x = c.quantity("light.source.resolution", v, Kind::Ratio)?;
                    if !(x > 0.0 && x < 1.0) {
                        return Err(c.fail(
                            "light.source.resolution",
                            format!("expected a FWHM fraction between 0 and 100 % such as \"4 %\", found {v}"),
                        ));
                    }
                    Some(x)
                }
            };
            let (spectrum, name) = match emission {
                RawEmission::Plastic => {
                    let (s, label, _) = light::builtin_emission("plastic").ok_or_else(|| {
                        c.fail("light.source.emission", "built-in plastic emission missing")
                    })?;
                    (s, label)
                }
                RawEmission::NaIClass => {
                    let (s, label, _) = light::builtin_emission("nai").ok_or_else(|| {
                        c.fail(
                            "light.source.emission",
                            "built-in NaI-class emission missing",
                        )
                    })?;
                    (s, label)
                }
                RawEmission::Table(points) => (
                    Spectrum::Table(table(c, "light.source.emission", points, 1e12)?),
                    "the design's emission table".to_string(),
                ),
            };
            if !(yield_per_mev.is_finite() && *yield_per_mev > 0.0 && *yield_per_mev < 2e5) {
                return Err(c.fail(
                    "light.source.yield_per_mev",
                    format!(
                        "expected photons per MeV between 0 and 200000 (plastics give about 1e4), found {yield_per_mev}"
                    ),
                ));
            }
            if !(deposited_mev.is_finite() && *deposited_mev > 0.0 && *deposited_mev < 1e5) {
                return Err(c.fail(
                    "light.source.deposited_mev",
                    format!("expected a positive energy in MeV, found {deposited_mev}"),
                ));
            }
            let decay = c.within(
                "light.source.decay",
                decay,
                &crate::design::limits::LIGHT_DECAY,
            )?;
            let rise = match rise {
                None => 0.0,
                Some(v) => c.within(
                    "light.source.rise",
                    v,
                    &crate::design::limits::LIGHT_PULSE_WIDTH,
                )?,
            };
            if rise >= decay {
                return Err(c.fail(
                    "light.source.rise",
                    "expected a rise time constant shorter than the decay",
                ));
            }
            (
                SourceKind::Scintillator,
                spectrum,
                yield_per_mev * deposited_mev,
                Shape::Exponential { rise, decay },
                format!(
                    "scintillator ({name}), {yield_per_mev:.0} photons/MeV × {deposited_mev} MeV, decay {}",
                    units::format_eng(decay, "s")
                ),
            )
        }
    };
    let rate = match &l.rate {
        None => None,
        Some(v) => Some(c.ranged("light.rate", v, Kind::Frequency, 1e-6, 1e10)?),
    };
    let coupling = match &l.coupling {
        None => 1.0,
        Some(v) => {
            let x = c.quantity("light.coupling", v, Kind::Ratio)?;
            if !crate::design::limits::LIGHT_COUPLING.contains(x) {
                return Err(c.fail(
                    "light.coupling",
                    format!(
                        "expected a fraction from {} such as \"30 %\", found {v}",
                        crate::design::limits::LIGHT_COUPLING.describe()
                    ),
                ));
            }
            x
        }
    };
    let filter = match &l.filter {
        None => None,
        Some(p) => Some(table(c, "light.filter", p, 100.0)?.scaled(0.01)),
    };
    let background = match &l.background {
        None => None,
        Some(RawBackground::Power {
            power,
            wavelength: w,
        }) => {
            let nm = wavelength(c, "light.background.wavelength", w)?;
            let p = c.ranged("light.background.power", power, Kind::Power, 1e-18, 10.0)?;
            Some(Background {
                photons_per_second: p / cathode::photon_energy(nm),
                nm,
            })
        }
        Some(RawBackground::PhotonFlux {
            per_second,
            wavelength: w,
        }) => {
            let nm = wavelength(c, "light.background.wavelength", w)?;
            if !(per_second.is_finite() && *per_second > 0.0 && *per_second < 1e25) {
                return Err(c.fail(
                    "light.background.per_second",
                    format!("expected a positive photon flux, found {per_second}"),
                ));
            }
            Some(Background {
                photons_per_second: *per_second,
                nm,
            })
        }
    };
    Ok(LightSpec {
        intrinsic_resolution: intrinsic,
        kind,
        label,
        spectrum,
        photons,
        shape,
        rate,
        coupling,
        filter,
        background,
    })
}

fn check_readout(c: &Checker, r: &RawReadout) -> Result<ReadoutSpec, DesignError> {
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

fn integer(c: &Checker, field: &str, n: i64, (lo, hi): (i64, i64)) -> Result<i64, DesignError> {
    if (lo..=hi).contains(&n) {
        Ok(n)
    } else {
        Err(c.fail(
            field,
            format!("expected a whole number from {lo} to {hi}, found {n}"),
        ))
    }
}

fn plain(c: &Checker, field: &str, x: f64, range: &Range) -> Result<f64, DesignError> {
    if range.contains(x) {
        Ok(x)
    } else {
        Err(c.fail(
            field,
            format!(
                "expected a number from {}, found {}",
                range.describe(),
                units::show_number(x)
            ),
        ))
    }
}

/// A noise density: the quantity with an optional "/rtHz", "/√Hz" or "/sqrt(Hz)" after it.
fn density(c: &Checker, field: &str, v: &Value, range: &Range) -> Result<f64, DesignError> {
    let v = match v {
        Value::Text(t) => {
            let mut t = t.trim().to_string();
            for suffix in ["/rtHz", "/√Hz", "/sqrt(Hz)", "/sqrtHz"] {
                if let Some(stripped) = t.strip_suffix(suffix) {
                    t = stripped.trim_end().to_string();
                    break;
                }
            }
            Value::Text(t)
        }
        other => other.clone(),
    };
    c.within(field, &v, range).map_err(|e| match e {
        DesignError::Field {
            file,
            field,
            message,
        } => DesignError::Field {
            file,
            field,
            message: format!("{message} (a noise density, per √Hz)"),
        },
        other => other,
    })
}

fn check_front_end(c: &Checker, f: &RawFrontEnd) -> Result<FrontEnd, DesignError> {
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

fn check_counting(c: &Checker, k: &RawCounting) -> Result<CountingSpec, DesignError> {
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

/// Check the signal-budget fields of a raw design.
pub(super) fn check_signal(c: &Checker, raw: &RawDesign) -> Result<SignalSpec, DesignError> {
    let t = &raw.tube;
    let (cathode, cathode_assumed) = check_cathode(c, &t.cathode)?;
    let (ser_rise, rise_assumed) = match &t.single_electron_rise {
        None => (TYPICAL_SER_RISE_S, true),
        Some(v) => (
            c.ranged("tube.single_electron_rise", v, Kind::Time, 1e-11, 1e-6)?,
            false,
        ),
    };
    let (tts_fwhm, spread_assumed) = match &t.transit_spread {
        None => (TYPICAL_TTS_FWHM_S, true),
        Some(v) => (
            c.ranged("tube.transit_spread", v, Kind::Time, 1e-12, 1e-6)?,
            false,
        ),
    };
    let light = match &raw.light {
        None => None,
        Some(l) => Some(check_light(c, l)?),
    };
    let readout = match &raw.readout {
        None => None,
        Some(r) => Some(check_readout(c, r)?),
    };
    let transit = match &t.transit_time {
        None => None,
        Some(tr) => Some((
            c.within("tube.transit_time.time", &tr.time, &limits::TRANSIT_TIME)?,
            tr.volts
                .as_ref()
                .map(|v| c.within("tube.transit_time.volts", v, &limits::TUBE_VOLTS))
                .transpose()?,
        )),
    };
    let front_end = raw
        .front_end
        .as_ref()
        .map(|f| check_front_end(c, f))
        .transpose()?;
    let counting = raw
        .counting
        .as_ref()
        .map(|k| check_counting(c, k))
        .transpose()?;
    Ok(SignalSpec {
        cathode,
        cathode_assumed,
        timing: TubeTiming {
            ser_rise,
            tts_fwhm,
            rise_assumed,
            spread_assumed,
            transit,
        },
        light,
        readout,
        front_end,
        counting,
    })
}
