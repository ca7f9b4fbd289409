//! Light sources: how many photons of which wavelengths reach the cathode, and when.
//!
//! A source has a spectrum (a laser line, an LED's band, a scintillator's emission), a number of
//! photons per pulse, a pulse shape in time and a rate; the optical path adds a coupling fraction
//! and an optional filter. Steady background light is a separate photon flux.
//!
//! Equations (docs/physics.md §7):
//! - photons in a pulse of energy `E` at wavelength `λ`: `E λ / (h c)`; for a spectrum, `E`
//!   divided by the mean photon energy `Σ p(λ) h c / λ` of the photon distribution `p`;
//! - a pulse given as peak power × width carries `E = P_peak ∫ s(t) dt` with the shape's own
//!   integral (Gaussian of FWHM `w`: `P w √(π / (4 ln 2))` = 1.0645 `P w`; rectangle: `P w`;
//!   rise-and-decay: `P` times the area of the normalised shape);
//! - a scintillator gives `yield × E_dep` photons with the shape
//!   `(exp(-t/τ_d) − exp(-t/τ_r)) / (τ_d − τ_r)` (a single-exponential model, common practice);
//! - photoelectrons `N_pe = Σ_λ N_ph p(λ) · QE(λ) · T_filter(λ) · coupling · η_1`.
//!
//! An LED's band is taken as a Gaussian in wavelength of the given FWHM (an approximation: real
//! LED bands are skewed). Emission tables are read as relative photons per nm.

use crate::model::cathode::{self, Cathode, Curve, photon_energy};

/// Pulse shape in time (each normalised to unit area by the model).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Shape {
    /// Gaussian of the given FWHM, seconds.
    Gaussian {
        /// Full width at half maximum, s.
        fwhm: f64,
    },
    /// Rectangle of the given width, seconds.
    Rectangular {
        /// Width, s.
        width: f64,
    },
    /// Rise-and-decay `(exp(-t/τd) − exp(-t/τr))`; `rise` may be zero.
    Exponential {
        /// Rise time constant τ_r, s (0 allowed).
        rise: f64,
        /// Decay time constant τ_d, s.
        decay: f64,
    },
}

/// FWHM of a Gaussian over its standard deviation, `2 √(2 ln 2)`.
pub const FWHM_PER_SIGMA: f64 = 2.354_820_045_030_949;

impl Shape {
    /// Where the pulse starts and ends for sampling, seconds (covers all but ~1e-6 of its area).
    pub fn support(&self) -> (f64, f64) {
        match *self {
            Shape::Gaussian { fwhm } => {
                let s = fwhm / FWHM_PER_SIGMA;
                (0.0, 10.0 * s)
            }
            Shape::Rectangular { width } => (0.0, width),
            Shape::Exponential { rise, decay } => (0.0, 14.0 * decay.max(rise)),
        }
    }

    /// Unnormalised value at time `t` (the sampler normalises the area).
    pub fn value(&self, t: f64) -> f64 {
        match *self {
            Shape::Gaussian { fwhm } => {
                let s = fwhm / FWHM_PER_SIGMA;
                let x = (t - 5.0 * s) / s;
                (-0.5 * x * x).exp()
            }
            Shape::Rectangular { width } => {
                if (0.0..width).contains(&t) {
                    1.0
                } else {
                    0.0
                }
            }
            Shape::Exponential { rise, decay } => {
                if t < 0.0 {
                    0.0
                } else if rise <= 0.0 {
                    (-t / decay).exp()
                } else {
                    ((-t / decay).exp() - (-t / rise).exp()).max(0.0)
                }
            }
        }
    }

    /// Area of the shape scaled to a peak of 1, seconds: what multiplies a peak power to give
    /// the pulse energy.
    pub fn area_per_peak(&self) -> f64 {
        match *self {
            Shape::Gaussian { fwhm } => fwhm * (std::f64::consts::PI / (4.0 * 2f64.ln())).sqrt(),
            Shape::Rectangular { width } => width,
            Shape::Exponential { rise, decay } => {
                if rise <= 0.0 {
                    decay
                } else {
                    // Peak of exp(-t/d) - exp(-t/r) at t* = ln(d/r) r d / (d - r).
                    let tp = (decay / rise).ln() * rise * decay / (decay - rise);
                    let peak = (-tp / decay).exp() - (-tp / rise).exp();
                    (decay - rise) / peak
                }
            }
        }
    }

    /// The shortest time scale of the shape, seconds (sets the sampling step).
    /// The time scale of the pulse's fastest edge, seconds: zero for the instantaneous edges of
    /// a rectangle or of a decay with no rise. The anode current's edge is this convolved with
    /// the tube's response, which is what the sampling must resolve.
    pub fn edge(&self) -> f64 {
        match *self {
            Shape::Gaussian { fwhm } => fwhm / FWHM_PER_SIGMA,
            Shape::Rectangular { .. } => 0.0,
            Shape::Exponential { rise, .. } => rise,
        }
    }

    /// The finest time scale of the light pulse itself (its width or its fastest constant), s.
    pub fn finest(&self) -> f64 {
        match *self {
            Shape::Gaussian { fwhm } => fwhm / FWHM_PER_SIGMA,
            Shape::Rectangular { width } => width,
            Shape::Exponential { rise, decay } => {
                if rise > 0.0 {
                    rise.min(decay)
                } else {
                    decay
                }
            }
        }
    }
}

/// The spectrum of a source as a photon distribution.
#[derive(Debug, Clone, PartialEq)]
pub enum Spectrum {
    /// One line, nm (vacuum or air as the design says; the tool treats it as given).
    Line(f64),
    /// A Gaussian band: centre and FWHM, nm.
    Band {
        /// Centre, nm.
        centre: f64,
        /// FWHM, nm.
        fwhm: f64,
    },
    /// A table of relative photons per nm.
    Table(Curve),
}

impl Spectrum {
    /// The spectrum as (nm, weight) with weights summing to 1: 1 nm steps for tables and bands.
    pub fn weights(&self) -> Vec<(f64, f64)> {
        let mut w: Vec<(f64, f64)> = match self {
            Spectrum::Line(nm) => return vec![(*nm, 1.0)],
            Spectrum::Band { centre, fwhm } => {
                let s = fwhm / FWHM_PER_SIGMA;
                let lo = (centre - 4.0 * s).max(1.0);
                let steps = ((8.0 * s) / 0.5).ceil().max(8.0) as usize;
                let h = (centre + 4.0 * s - lo) / steps as f64;
                (0..=steps)
                    .map(|i| {
                        let nm = lo + i as f64 * h;
                        let x = (nm - centre) / s;
                        (nm, (-0.5 * x * x).exp())
                    })
                    .collect()
            }
            Spectrum::Table(c) => {
                let (lo, hi) = c.range();
                let steps = ((hi - lo).ceil() as usize).max(2);
                let h = (hi - lo) / steps as f64;
                (0..=steps)
                    .map(|i| {
                        let nm = lo + i as f64 * h;
                        (nm, c.at_or_zero(nm))
                    })
                    .collect()
            }
        };
        let sum: f64 = w.iter().map(|(_, y)| y).sum();
        if sum > 0.0 {
            for p in &mut w {
                p.1 /= sum;
            }
        }
        w
    }

    /// Mean photon energy, joules.
    pub fn mean_photon_energy(&self) -> f64 {
        self.weights()
            .iter()
            .map(|(nm, p)| p * photon_energy(*nm))
            .sum()
    }

    /// Photon-weighted mean wavelength, nm.
    pub fn mean_nm(&self) -> f64 {
        self.weights().iter().map(|(nm, p)| p * nm).sum()
    }

    /// The wavelength of the largest weight, nm.
    pub fn peak_nm(&self) -> f64 {
        match self {
            Spectrum::Line(nm) => *nm,
            Spectrum::Band { centre, .. } => *centre,
            Spectrum::Table(_) => self
                .weights()
                .iter()
                .copied()
                .max_by(|a, b| a.1.total_cmp(&b.1))
                .map_or(0.0, |p| p.0),
        }
    }
}

/// What kind of source, for labels.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SourceKind {
    /// A laser line.
    Laser,
    /// An LED.
    Led,
    /// A scintillator hit by a particle.
    Scintillator,
}

/// Steady background light reaching the cathode.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Background {
    /// Photons per second on the cathode.
    pub photons_per_second: f64,
    /// Wavelength, nm.
    pub nm: f64,
}

/// A checked light block.
#[derive(Debug, Clone, PartialEq)]
pub struct LightSpec {
    /// Kind of source.
    pub kind: SourceKind,
    /// Words for reports, e.g. "laser line at 405 nm, 2.0 pJ per pulse".
    pub label: String,
    /// Photon distribution.
    pub spectrum: Spectrum,
    /// Photons emitted per pulse (before coupling and filter).
    pub photons: f64,
    /// Pulse shape.
    pub shape: Shape,
    /// Pulse rate, Hz.
    pub rate: Option<f64>,
    /// Fraction of the photons that reach the cathode (geometry, reflections).
    pub coupling: f64,
    /// Filter transmission (fraction) against nm.
    pub filter: Option<Curve>,
    /// Steady background.
    pub background: Option<Background>,
    /// A scintillator's own energy resolution (FWHM fraction), if given.
    pub intrinsic_resolution: Option<f64>,
}

/// The built-in emission spectra as photon distributions (key, spectrum, label, provenance).
pub fn builtin_emission(key: &str) -> Option<(Spectrum, String, String)> {
    let c = cathode::find(cathode::builtin_emissions(), key)?;
    Some((
        Spectrum::Table(c.curve.clone()),
        c.label.clone(),
        c.provenance.clone(),
    ))
}

/// How the photons of one pulse turn into photoelectrons on a cathode.
#[derive(Debug, Clone, PartialEq)]
pub struct Conversion {
    /// Photons reaching the cathode per pulse (after coupling and filter).
    pub photons_at_cathode: f64,
    /// Photoelectrons emitted per pulse (before D1 collection).
    pub emitted: f64,
    /// Photon-weighted QE over the spectrum at the cathode (fraction).
    pub mean_qe: f64,
    /// Share of the photons at wavelengths the cathode table does not cover (fraction).
    pub out_of_range: f64,
}

/// Photoelectrons from `photons` of a spectrum through a filter and coupling onto a cathode.
pub fn convert(
    spectrum: &Spectrum,
    photons: f64,
    coupling: f64,
    filter: Option<&Curve>,
    cathode: &Cathode,
) -> Conversion {
    let mut at_cathode = 0.0;
    let mut emitted = 0.0;
    let mut outside = 0.0;
    for (nm, p) in spectrum.weights() {
        let t = filter.map_or(1.0, |f| f.at_or_zero(nm));
        let n = photons * p * coupling * t;
        let r = cathode.response(nm);
        if !r.in_range {
            outside += p;
        }
        at_cathode += n;
        emitted += n * r.qe;
    }
    Conversion {
        photons_at_cathode: at_cathode,
        emitted,
        mean_qe: if at_cathode > 0.0 {
            emitted / at_cathode
        } else {
            0.0
        },
        out_of_range: outside,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shape_areas() {
        // The peak-power factor of each shape against a direct sum of the normalised shape.
        for s in [
            Shape::Gaussian { fwhm: 2e-9 },
            Shape::Rectangular { width: 5e-9 },
            Shape::Exponential {
                rise: 0.5e-9,
                decay: 2.4e-9,
            },
        ] {
            let (a, b) = s.support();
            let n = 200_000;
            let h = (b - a) / n as f64;
            let vals: Vec<f64> = (0..n).map(|i| s.value(a + (i as f64 + 0.5) * h)).collect();
            let peak = vals.iter().copied().fold(0.0, f64::max);
            let area: f64 = vals.iter().sum::<f64>() * h / peak;
            assert!(
                (area / s.area_per_peak() - 1.0).abs() < 2e-3,
                "{s:?} {area}"
            );
        }
    }

    #[test]
    fn band_weights_sum_to_one_and_centre() {
        let b = Spectrum::Band {
            centre: 470.0,
            fwhm: 25.0,
        };
        let w = b.weights();
        let sum: f64 = w.iter().map(|p| p.1).sum();
        assert!((sum - 1.0).abs() < 1e-12);
        assert!((b.mean_nm() - 470.0).abs() < 0.05);
    }
}
