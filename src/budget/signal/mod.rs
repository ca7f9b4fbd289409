//! The signal budget: light → photoelectrons → charge → the pulse at the load → readable or not.
//!
//! Equations and sources (docs/physics.md §6–8):
//! - photoelectrons collected at D1 per pulse `N_pe = Σ N_ph p(λ) QE(λ) T(λ) · coupling · η_1`;
//!   charge `Q = N_pe · M · e` with `M = G / η_1` the multiplication of the dynodes (S. N. Ahmed,
//!   *Physics and Engineering of Radiation Detection*, §6.5, for `Q = N G e`);
//! - Poisson statistics: `P(≥ 1 pe) = 1 − exp(−N_pe)`; relative amplitude spread `√(F / N_pe)`
//!   with the chain's excess noise factor `F = 1 + 1/δ1 + 1/(δ1 δ2) + …` from the actual stage
//!   voltages (textbook theory, from memory);
//! - anode current = light shape ⊗ transit-time spread ⊗ single-electron response; the last two
//!   are taken as Gaussians (the single-electron response's 10–90 % leading edge of a Gaussian
//!   pulse is 1.6869 σ; a FWHM is 2.3548 σ): a modelling choice of this tool;
//! - the pulse at the load is computed numerically in [`crate::solve::waveform`]; beside it the analytic
//!   *estimates*: `I_peak · R` (short-pulse limit), `Q / C` (integrating limit), `2.197 R C`
//!   (first-order rise, `RC ln 9`), and root-sum-of-squares of rise times (exact only for Gaussian
//!   cascades: an estimate), the instrument adding `0.3497 / BW` (single pole, `ln 9 / 2π`) or
//!   `0.3396 / BW` (Gaussian);
//! - noise: the instrument's own, Johnson–Nyquist `√(4 k T R B)` of the load integrated over the
//!   load pole and the instrument's response (T = 290 K, the standard reference temperature), and
//!   the photoelectron statistics of the amplitude;
//! - timing: leading-edge jitter `σ_v / (dv/dt)` at the threshold plus the photon-statistics
//!   spread `√(σ_TTS² + σ_light²) / √N_pe` (an estimate); walk between the smallest and largest
//!   expected pulse (mean ± 2 σ of the amplitude) measured on the computed waveform;
//! - a PIN photodiode with a transimpedance amplifier: closed-loop bandwidth
//!   `≈ √(GBW / (2π R_f C_in))` (docs/physics.md §8), so `GBW = 2π R_f C_in BW²`.
//!
//! No IO; every figure is finite or absent, never NaN.

use crate::budget::frontend::{FrontEnd, FrontNoise};
use crate::design::{Design, InstrumentResponse, ReadoutSpec};
use crate::model::cathode::{self, Cathode};
use crate::model::constants::{BOLTZMANN, ELEMENTARY_CHARGE};
use crate::model::light::{self, FWHM_PER_SIGMA, Shape, Spectrum};
use crate::solve::waveform::{self, CurrentPulse, LoadCircuit, PulseFigures, Waveform};
use crate::units::format_eng as eng;
use crate::warning::{Code, Warning, warning};
use uom::si::capacitance::farad;
use uom::si::electrical_resistance::ohm;

mod compare;
mod jitter;
mod noise;
mod path;
mod statistics;
mod sweep;
mod verdict;

use compare::photodiode_alternative;
pub use compare::{COMMON_LINES, MatchCell, MatchRow, Photodiode, light_match};
pub use jitter::{Bench, Timing};
pub use noise::{Noise, johnson_density, johnson_rms, rise_bandwidth};
use noise::{front_end_shunt, noise, range_for};
pub use path::{Echoes, FrontEndFigures, circuit, echoes, path_line};
use path::{at_instrument, circuit_with_termination, front_end_figures};
pub(crate) use statistics::upper_gamma_regularised;
pub use statistics::{EnergyResolution, energy_resolution, threshold_efficiency};
use statistics::{light_sigma, ser_sigma};
pub use sweep::{LoadSweep, SweepRow, load_sweep};
pub use verdict::{Readability, Verdict, judge};

/// Noise reference temperature, K (the standard 290 K of noise-figure definitions).
pub const NOISE_TEMPERATURE: f64 = 290.0;
/// 10–90 % leading edge of a Gaussian pulse over its σ: `√(2 ln 10) − √(2 ln (10/9))`.
pub(crate) const GAUSS_RISE_PER_SIGMA: f64 = 1.686_922_4;
/// Rise × bandwidth of a single pole, `ln 9 / 2π`.
pub(crate) const RISE_BW_SINGLE_POLE: f64 = 0.349_699;
/// Rise × bandwidth of a Gaussian response (computed; the value in the project's reference checks).
pub(crate) const RISE_BW_GAUSSIAN: f64 = 0.3396;
/// Discriminator threshold for photon counting as a fraction of the single-photoelectron
/// pulse, when the design gives none (a quarter of a photoelectron: common practice).
pub(crate) const COUNTING_THRESHOLD: f64 = 0.25;

/// Constant fraction of the pulse's own peak for the constant-fraction timing (a common
/// setting; a choice of this tool).
pub const CFD_FRACTION: f64 = 0.2;

/// Default timing threshold as a fraction of the mean pulse (a choice of this tool).
pub(crate) const DEFAULT_THRESHOLD_FRACTION: f64 = 0.2;
/// Photodiode capacitance assumed for the alternative (a small-area PIN diode under bias plus
/// the amplifier input, from memory).
pub const PHOTODIODE_CAPACITANCE: f64 = 10e-12;
/// Amplifier input voltage noise assumed for the alternative, V/√Hz (a fast low-noise op-amp,
/// from memory).
pub const AMPLIFIER_NOISE: f64 = 3e-9;
/// Largest gain-bandwidth product counted as practical for the alternative (fast op-amps reach a
/// few GHz; from memory).
pub(crate) const PRACTICAL_GBW: f64 = 5e9;
/// Points of the load sweep in reports.
pub const SWEEP_POINTS: usize = 19;

/// What the multiplier chain contributes, from the solved operating point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Chain {
    /// Gain at the operating point, anode electrons per photoelectron leaving the cathode.
    pub gain: f64,
    /// Cathode–D1 collection efficiency.
    pub collection: f64,
    /// Excess noise factor of the dynode chain at the operating point.
    pub excess_noise: f64,
    /// Divider current with no tube current, A.
    pub divider_amps: f64,
    /// The tube's average anode current rating, A.
    pub max_anode_amps: f64,
    /// Gain of the first dynode δ1 at the operating point.
    pub first_stage_gain: f64,
}

/// Analytic estimates beside the computed pulse.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Estimates {
    /// Short-pulse limit `I_peak · R`, or with a cable `I_peak · (R_base ∥ Z0) · (1 + Γ)`, V.
    pub i_times_r: f64,
    /// The formula `i_times_r` used, in words for reports.
    pub short_pulse_formula: &'static str,
    /// Integrating limit `Q / C`, V.
    pub q_over_c: f64,
    /// First-order rise of the load `2.197 R C` (with a cable, each end's RC combined by
    /// root-sum-of-squares), s.
    pub rc_rise: f64,
    /// Rise of the anode current alone (measured on the current pulse), s.
    pub current_rise: Option<f64>,
    /// Root-sum-of-squares of the current's rise and the load's, s.
    pub rss_rise: f64,
    /// The instrument's own rise (0.3497/BW or 0.3396/BW), s.
    pub instrument_rise: Option<f64>,
    /// Which rise × bandwidth product was used.
    pub instrument_model: Option<&'static str>,
}

/// Steady light against the divider and the rating.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BackgroundFigures {
    /// Photons per second on the cathode.
    pub photons_per_second: f64,
    /// Wavelength, nm.
    pub nm: f64,
    /// Cathode current, A.
    pub cathode_amps: f64,
    /// Anode current the light asks for at this gain, A.
    pub anode_amps: f64,
    /// Over the divider current.
    pub over_divider: f64,
    /// Over the tube's average-current rating.
    pub over_rating: f64,
}

/// Everything the signal sections show.
#[derive(Debug, Clone, PartialEq)]
pub struct SignalBudget {
    /// The cathode's label.
    pub cathode: String,
    /// The light's label.
    pub light: String,
    /// Photons reaching the cathode per pulse.
    pub photons_at_cathode: f64,
    /// Photon-weighted QE (window included).
    pub mean_qe: f64,
    /// Photoelectrons collected at D1 per pulse.
    pub photoelectrons: f64,
    /// Multiplication of the dynodes `G / η`.
    pub multiplication: f64,
    /// Charge per pulse, C.
    pub charge: f64,
    /// Peak anode current, A.
    pub peak_anode_amps: f64,
    /// Charge of one photoelectron's pulse, C.
    pub single_pe_charge: f64,
    /// Peak at the load of one photoelectron, V.
    pub single_pe_volts: f64,
    /// P(≥ 1 pe).
    pub p_at_least_one: f64,
    /// Excess noise factor used.
    pub excess_noise: f64,
    /// Relative amplitude spread `√(F / N_pe)`.
    pub amplitude_spread: f64,
    /// The circuit used.
    pub circuit: LoadCircuit,
    /// The anode current pulse.
    pub current: CurrentPulse,
    /// The pulse at the load.
    pub waveform: Waveform,
    /// Its figures.
    pub pulse: PulseFigures,
    /// Estimates beside them.
    pub estimates: Estimates,
    /// Cable echoes.
    pub echoes: Option<Echoes>,
    /// Readability (with a readout).
    pub readable: Option<Readability>,
    /// Timing.
    pub timing: Option<Timing>,
    /// Energy resolution of a scintillation counter (FWHM fractions), with a scintillator.
    pub energy_resolution: Option<EnergyResolution>,
    /// Average anode current from the pulses at the rate, A.
    pub average_anode_amps: Option<f64>,
    /// Background light.
    pub background: Option<BackgroundFigures>,
    /// The photodiode alternative.
    pub photodiode: Option<Photodiode>,
    /// The load sweep.
    pub sweep: LoadSweep,
    /// The front end's figures, when one is fitted.
    pub front_end: Option<FrontEndFigures>,
    /// Photon counting, with a counting block or below one photoelectron per pulse.
    pub counting: Option<crate::budget::counting::PhotonCounting>,
    /// Warnings for the report's list.
    pub warnings: Vec<Warning>,
    /// Assumptions.
    pub assumptions: Vec<String>,
}

fn rss(parts: &[f64]) -> f64 {
    parts.iter().map(|x| x * x).sum::<f64>().sqrt()
}

/// The pulse of a design at the instrument, with what judging and timing it need.
struct AtInstrument<'a> {
    circuit: LoadCircuit,
    front_end: Option<&'a FrontEnd>,
    /// The pulse at the far end of the path (the front end's input).
    far: Waveform,
    /// What the instrument receives.
    waveform: Waveform,
    pulse: PulseFigures,
    /// One photoelectron's pulse at the instrument, through the same circuit and front end.
    one: Waveform,
    single_volts: f64,
    photoelectrons: f64,
    excess_noise: f64,
    /// Relative amplitude spread from photoelectron statistics, `√(F / N_pe)`.
    spread: f64,
    displayed: Option<f64>,
    echoes: Option<Echoes>,
}

/// Build the signal budget of a design; `None` when the design has no light block.
pub fn budget(design: &Design, chain: &Chain) -> Option<SignalBudget> {
    let s = &design.signal;
    let l = s.light.as_ref()?;
    let mut warnings = Vec::new();
    let conv = light::convert(
        &l.spectrum,
        l.photons,
        l.coupling,
        l.filter.as_ref(),
        &s.cathode,
    );
    if conv.out_of_range > 0.0 {
        warnings.push(warning!(Code::LightOutsideCathodeRange,
            "{:.0} % of the light lies outside the cathode curve's wavelength range ({:.0}–{:.0} nm): counted as zero response.",
            conv.out_of_range * 100.0,
            s.cathode.range().0,
            s.cathode.range().1
        ));
    }
    let npe = conv.emitted * chain.collection;
    let mult = chain.gain / chain.collection;
    let charge = npe * mult * ELEMENTARY_CHARGE;
    let sigma_ser = ser_sigma(s.timing.ser_rise);
    let sigma_tts = s.timing.tts_fwhm / FWHM_PER_SIGMA;
    let sigma = (sigma_ser * sigma_ser + sigma_tts * sigma_tts).sqrt();
    let current = waveform::convolved_pulse(&l.shape, sigma, charge.max(1e-30));
    let single = waveform::gaussian_pulse(sigma_ser, mult * ELEMENTARY_CHARGE);
    let current_fig = current.as_waveform().measure();
    let r = s.readout.as_ref();
    let (at, estimates) = pulse_at_instrument(design, chain, &current, &single, npe, charge);
    let readable = r.map(|ro| readability(&at, ro, design, chain));
    let timing = jitter::timing(
        design,
        &at,
        readable.as_ref(),
        &l.shape,
        sigma_ser,
        sigma_tts,
    );
    warnings.extend(linearity_warning(design, current_fig.peak));
    let average = l.rate.map(|rate| charge * rate);
    // With a train block these are the train's pulses: the train section judges their
    // average as solved, so the same figure is not judged twice.
    if let Some(avg) = average
        && avg > chain.max_anode_amps
        && design.train.is_none()
    {
        warnings.push(warning!(
            Code::LightAverageAboveRating,
            "The pulses at {} average {} of anode current, above the tube's rating of {}.",
            eng(l.rate.unwrap_or(0.0), "Hz"),
            eng(avg, "A"),
            eng(chain.max_anode_amps, "A")
        ));
    }
    let background = background(design, chain);
    if let Some(b) = background
        && b.over_rating > 1.0
    {
        warnings.push(warning!(Code::BackgroundLightAboveRating,
                "Steady light on this energised tube would ask for {} of anode current, {:.0}× its limit and {:.1}× the divider current: the gain collapses and the cathode can be damaged. Keep light off the tube while the high voltage is on.",
                eng(b.anode_amps, "A"),
                b.over_rating,
                b.over_divider
            ));
    }
    let counting = counting(&at, design, chain, readable.as_ref(), background);
    let front_end = at
        .front_end
        .map(|fe| front_end_figures(fe, &at.circuit, &at.far, &at.pulse, readable.as_ref()));
    let photodiode = photodiode_alternative(
        &l.spectrum,
        conv.photons_at_cathode,
        &l.shape,
        at.pulse.peak,
        at.displayed.or(at.pulse.rise).unwrap_or(1e-9),
    );
    let sweep = load_sweep(design, &current, SWEEP_POINTS, Some(npe), Some(&single));
    Some(SignalBudget {
        cathode: s.cathode.label.clone(),
        light: l.label.clone(),
        photons_at_cathode: conv.photons_at_cathode,
        mean_qe: conv.mean_qe,
        photoelectrons: npe,
        multiplication: mult,
        charge,
        peak_anode_amps: current_fig.peak,
        single_pe_charge: mult * ELEMENTARY_CHARGE,
        single_pe_volts: at.single_volts,
        p_at_least_one: 1.0 - (-npe).exp(),
        excess_noise: at.excess_noise,
        amplitude_spread: at.spread,
        circuit: at.circuit,
        current,
        waveform: at.waveform,
        pulse: at.pulse,
        estimates,
        echoes: at.echoes,
        readable,
        timing,
        energy_resolution: (l.kind == light::SourceKind::Scintillator)
            .then(|| energy_resolution(npe, at.excess_noise, l.intrinsic_resolution))
            .flatten(),
        average_anode_amps: average,
        background,
        photodiode,
        sweep,
        front_end,
        counting,
        warnings,
        assumptions: assumptions(design),
    })
}

/// What the budget assumed because the design left it out.
fn assumptions(design: &Design) -> Vec<String> {
    let s = &design.signal;
    let mut assumptions = Vec::new();
    if s.cathode_assumed {
        assumptions.push(
            "cathode: built-in bialkali behind borosilicate glass (approximate typical curve, from memory; give tube.cathode)".to_string(),
        );
    }
    if s.timing.rise_assumed {
        assumptions.push(format!(
            "single-electron rise {} 10–90 % (from memory; give tube.single_electron_rise)",
            eng(s.timing.ser_rise, "s")
        ));
    }
    if s.timing.spread_assumed {
        assumptions.push(format!(
            "transit-time spread {} FWHM (from memory; give tube.transit_spread)",
            eng(s.timing.tts_fwhm, "s")
        ));
    }
    assumptions
}

/// The pulse of `current` (and of one photoelectron, `single`) through the design's signal
/// path to the instrument, and the analytic estimates beside it.
fn pulse_at_instrument<'a>(
    design: &'a Design,
    chain: &Chain,
    current: &CurrentPulse,
    single: &CurrentPulse,
    npe: f64,
    charge: f64,
) -> (AtInstrument<'a>, Estimates) {
    let s = &design.signal;
    let c = circuit(design);
    let fe = s.front_end.as_ref();
    let (far, w) = at_instrument(&c, fe, current);
    let mut pulse = w.measure_first(c.cable.map(|l| l.delay));
    if charge <= 0.0 {
        pulse.peak = 0.0;
    }
    let one = at_instrument(&c, fe, single).1;
    let single_volts = one.measure().peak;
    let r = s.readout.as_ref();
    let current_fig = current.as_waveform().measure();
    let rc_rise = 9f64.ln() * rss(&c.edge_time_constants());
    let inst = r.map(|r| rise_bandwidth(r.response));
    let estimates = Estimates {
        i_times_r: current_fig.peak * c.short_pulse_ohms(),
        short_pulse_formula: if c.cable.is_some() {
            "I·(R_base ∥ Z0)·(1 + Γ)"
        } else {
            "I·R"
        },
        q_over_c: charge / c.total_capacitance(),
        rc_rise,
        current_rise: current_fig.rise,
        rss_rise: rss(&[current_fig.rise.unwrap_or(0.0), rc_rise]),
        instrument_rise: inst.zip(r).map(|((k, _), r)| k / r.bandwidth),
        instrument_model: inst.map(|(_, m)| m),
    };
    let echoes = echoes(&c, &far);
    let f = chain.excess_noise;
    let spread = if npe > 0.0 { (f / npe).sqrt() } else { 0.0 };
    let displayed = pulse
        .rise
        .map(|x| rss(&[x, estimates.instrument_rise.unwrap_or(0.0)]));
    let at = AtInstrument {
        circuit: c,
        front_end: fe,
        far,
        waveform: w,
        pulse,
        one,
        single_volts,
        photoelectrons: npe,
        excess_noise: f,
        spread,
        displayed,
        echoes,
    };
    (at, estimates)
}

/// Judge the pulse on the readout; below one photoelectron per pulse, with the share of single
/// photoelectrons that clear the discriminator.
fn readability(at: &AtInstrument, ro: &ReadoutSpec, design: &Design, chain: &Chain) -> Readability {
    let (npe, single_volts, f) = (at.photoelectrons, at.single_volts, at.excess_noise);
    let counting = npe > 0.0 && npe < 1.0;
    let mut j = judge(
        at.pulse.peak,
        noise(
            &at.circuit,
            ro,
            if counting {
                single_volts
            } else {
                at.pulse.peak
            },
            at.front_end,
        ),
        at.displayed,
        ro,
        Some(npe),
        at.echoes,
        Some(single_volts),
    );
    if counting && single_volts > 0.0 {
        // The discriminator: the design's timing threshold, or a quarter of a
        // photoelectron (common practice for counting).
        let thr = ro.threshold.unwrap_or(COUNTING_THRESHOLD * single_volts);
        let model = crate::budget::counting::spe_model(
            design.signal.counting.as_ref(),
            f,
            chain.first_stage_gain,
            j.noise.total / single_volts,
        );
        let eff = crate::budget::counting::spectrum(&model).above(thr / single_volts);
        j.threshold_efficiency = Some(eff);
        let words = format!(
            "{:.1} % of single photoelectrons clear a {} threshold ({:.2} of a photoelectron; the single-photoelectron spectrum of the photon-counting section, relative variance F − 1 = {:.3}, with the baseline noise)",
            eff * 100.0,
            eng(thr, "V"),
            thr / single_volts,
            f - 1.0
        );
        if eff < 0.5 {
            j.verdict = j.verdict.max(Verdict::NotReadable);
        } else if eff < 0.9 {
            j.verdict = j.verdict.max(Verdict::Marginal);
        }
        j.reasons.push(words);
    } else if at.spread > 0.3 {
        j.reasons.push(format!(
            "charge per pulse spreads ±{:.0} % rms from photoelectron statistics (√(F/N) with F = {f:.3})",
            at.spread * 100.0
        ));
    }
    j
}

/// A warning when the peak anode current nears the tube's pulse-linearity figure.
fn linearity_warning(design: &Design, peak_amps: f64) -> Option<Warning> {
    let (i_fig, dev, _) = design.tube.pulse_linearity?;
    let i_fig = i_fig.get::<uom::si::electric_current::ampere>();
    (peak_amps > 0.5 * i_fig).then(|| {
        warning!(Code::PulsePeakNearLinearityLimit,
            "The peak anode current {} is {:.0} % of the tube's pulse-linearity figure ({} at {:.0} % deviation): expect the pulse gain to move; see the linearity section.",
            eng(peak_amps, "A"),
            peak_amps / i_fig * 100.0,
            eng(i_fig, "A"),
            dev * 100.0
        )
    })
}

/// The anode current steady background light would ask for.
fn background(design: &Design, chain: &Chain) -> Option<BackgroundFigures> {
    let s = &design.signal;
    s.light.as_ref()?.background.map(|b| {
        let qe = s.cathode.qe(b.nm);
        let cathode_amps = b.photons_per_second * qe * ELEMENTARY_CHARGE;
        let anode = cathode_amps * chain.gain;
        BackgroundFigures {
            photons_per_second: b.photons_per_second,
            nm: b.nm,
            cathode_amps,
            anode_amps: anode,
            over_divider: anode / chain.divider_amps,
            over_rating: anode / chain.max_anode_amps,
        }
    })
}

/// The photon-counting figures, when the design counts or sees below one photoelectron a pulse.
fn counting(
    at: &AtInstrument,
    design: &Design,
    chain: &Chain,
    readable: Option<&Readability>,
    background: Option<BackgroundFigures>,
) -> Option<crate::budget::counting::PhotonCounting> {
    let s = &design.signal;
    let r = s.readout.as_ref();
    let npe = at.photoelectrons;
    if !(s.counting.is_some() || (r.is_some() && npe > 0.0 && npe < 1.0)) {
        return None;
    }
    let rate = s.light.as_ref().and_then(|l| l.rate);
    let noise_volts = readable.map_or(0.0, |x| x.noise.total);
    let thr = r
        .and_then(|r| r.threshold)
        .unwrap_or(COUNTING_THRESHOLD * at.single_volts);
    let background_pe = background.map_or(0.0, |b| {
        b.cathode_amps / ELEMENTARY_CHARGE * chain.collection
    });
    Some(crate::budget::counting::photon_counting(
        &crate::budget::counting::CountingInput {
            spec: s.counting.as_ref(),
            excess_noise: at.excess_noise,
            first_stage_gain: chain.first_stage_gain,
            single_volts: at.single_volts,
            noise_volts,
            threshold_volts: thr,
            pulse_pair: crate::budget::counting::pulse_pair_resolution(&at.one, thr),
            signal_rate: rate.unwrap_or(0.0) * (1.0 - (-npe).exp()) + background_pe,
        },
    ))
}
