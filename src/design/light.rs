//! The `light` block: a laser, an LED or a scintillator, the light per pulse, rate, coupling,
//! filter and background, raw and checked.

use serde::Deserialize;

use super::{Checker, DesignError, Value, table};
use crate::model::cathode;
use crate::model::light::{self, Background, LightSpec, Shape, SourceKind, Spectrum};
use crate::units::{self, Kind};

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

/// The `light` block: source, rate, coupling, filter and background.
pub(crate) fn check_light(c: &Checker, l: &RawLight) -> Result<LightSpec, DesignError> {
    let ((kind, spectrum, photons, shape, label), intrinsic) = check_source(c, &l.source)?;
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
    let background = check_background(c, l.background.as_ref())?;
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

/// A checked source: kind, spectrum, photons per pulse, pulse shape and a label.
type Source = (SourceKind, Spectrum, f64, Shape, String);

/// `light.source`, with a scintillator's intrinsic resolution when given.
fn check_source(c: &Checker, s: &RawSource) -> Result<(Source, Option<f64>), DesignError> {
    let laser_or_led = match s {
        RawSource::Laser {
            wavelength: wl,
            pulse,
            width,
            shape,
        } => {
            let nm = wavelength(c, "light.source.wavelength", wl)?;
            let spectrum = Spectrum::Line(nm);
            let shape = shape_of(c, "light.source.width", *shape, RawShape::Gaussian, width)?;
            let (n, words) = amount(c, "light.source.pulse", pulse, &spectrum, &shape)?;
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
            let shape = shape_of(
                c,
                "light.source.width",
                *shape,
                RawShape::Rectangular,
                width,
            )?;
            let (n, words) = amount(c, "light.source.pulse", pulse, &spectrum, &shape)?;
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
            return check_scintillator(
                c,
                emission,
                (*yield_per_mev, *deposited_mev),
                decay,
                rise.as_ref(),
                resolution.as_ref(),
            );
        }
    };
    Ok((laser_or_led, None))
}

/// How much light one pulse carries at `field`, as photons and in words.
fn amount(
    c: &Checker,
    field: &str,
    a: &RawAmount,
    spectrum: &Spectrum,
    shape: &Shape,
) -> Result<(f64, String), DesignError> {
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
}

/// A pulse shape of width `w` at `field` (`default` when the design names none).
fn shape_of(
    c: &Checker,
    field: &str,
    s: Option<RawShape>,
    default: RawShape,
    w: &Value,
) -> Result<Shape, DesignError> {
    let width = c.within(field, w, &crate::design::limits::LIGHT_PULSE_WIDTH)?;
    Ok(match s.unwrap_or(default) {
        RawShape::Gaussian => Shape::Gaussian { fwhm: width },
        RawShape::Rectangular => Shape::Rectangular { width },
        RawShape::Exponential => Shape::Exponential {
            rise: 0.0,
            decay: width,
        },
    })
}

/// A scintillator source: emission, light yield × deposited energy, decay and rise, and its
/// intrinsic resolution.
fn check_scintillator(
    c: &Checker,
    emission: &RawEmission,
    (yield_per_mev, deposited_mev): (f64, f64),
    decay: &Value,
    rise: Option<&Value>,
    resolution: Option<&Value>,
) -> Result<(Source, Option<f64>), DesignError> {
    let intrinsic = match resolution {
        None => None,
        Some(v) => {
            let x = c.quantity("light.source.resolution", v, Kind::Ratio)?;
            if !(x > 0.0 && x < 1.0) {
                return Err(c.fail(
                    "light.source.resolution",
                    format!(
                        "expected a FWHM fraction between 0 and 100 % such as \"4 %\", found {v}"
                    ),
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
    if !(yield_per_mev.is_finite() && yield_per_mev > 0.0 && yield_per_mev < 2e5) {
        return Err(c.fail(
            "light.source.yield_per_mev",
            format!(
                "expected photons per MeV between 0 and 200000 (plastics give about 1e4), found {yield_per_mev}"
            ),
        ));
    }
    if !(deposited_mev.is_finite() && deposited_mev > 0.0 && deposited_mev < 1e5) {
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
    let source = (
        SourceKind::Scintillator,
        spectrum,
        yield_per_mev * deposited_mev,
        Shape::Exponential { rise, decay },
        format!(
            "scintillator ({name}), {yield_per_mev:.0} photons/MeV × {deposited_mev} MeV, decay {}",
            units::format_eng(decay, "s")
        ),
    );
    Ok((source, intrinsic))
}

/// `light.background`: steady light as a power or a photon flux at a wavelength.
fn check_background(
    c: &Checker,
    b: Option<&RawBackground>,
) -> Result<Option<Background>, DesignError> {
    Ok(match b {
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
    })
}
