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
use crate::model::cathode::{self, BOLTZMANN, Cathode, ELEMENTARY_CHARGE};
use crate::model::light::{self, FWHM_PER_SIGMA, Shape, Spectrum};
use crate::solve::waveform::{self, CurrentPulse, LoadCircuit, PulseFigures, Waveform};
use crate::units::format_eng as eng;
use crate::warning::{Code, Warning, warning};
use uom::si::capacitance::farad;
use uom::si::electrical_resistance::ohm;

/// Noise reference temperature, K (the standard 290 K of noise-figure definitions).
pub const NOISE_TEMPERATURE: f64 = 290.0;
/// 10–90 % leading edge of a Gaussian pulse over its σ: `√(2 ln 10) − √(2 ln (10/9))`.
pub const GAUSS_RISE_PER_SIGMA: f64 = 1.686_922_4;
/// Rise × bandwidth of a single pole, `ln 9 / 2π`.
pub const RISE_BW_SINGLE_POLE: f64 = 0.349_699;
/// Rise × bandwidth of a Gaussian response (computed; the value in the project's reference checks).
pub const RISE_BW_GAUSSIAN: f64 = 0.3396;
/// Discriminator threshold for photon counting as a fraction of the single-photoelectron
/// pulse, when the design gives none (a quarter of a photoelectron: common practice).
pub const COUNTING_THRESHOLD: f64 = 0.25;

/// Constant fraction of the pulse's own peak for the constant-fraction timing (a common
/// setting; a choice of this tool).
pub const CFD_FRACTION: f64 = 0.2;

/// Default timing threshold as a fraction of the mean pulse (a choice of this tool).
pub const DEFAULT_THRESHOLD_FRACTION: f64 = 0.2;
/// Photodiode capacitance assumed for the alternative (a small-area PIN diode under bias plus
/// the amplifier input, from memory).
pub const PHOTODIODE_CAPACITANCE: f64 = 10e-12;
/// Amplifier input voltage noise assumed for the alternative, V/√Hz (a fast low-noise op-amp,
/// from memory).
pub const AMPLIFIER_NOISE: f64 = 3e-9;
/// Largest gain-bandwidth product counted as practical for the alternative (fast op-amps reach a
/// few GHz; from memory).
pub const PRACTICAL_GBW: f64 = 5e9;
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

/// The verdict on a pulse at an instrument.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Verdict {
    /// Clearly readable.
    Readable,
    /// Readable with care.
    Marginal,
    /// Not readable on this instrument.
    NotReadable,
    /// Too large for the instrument.
    Overloads,
}

impl Verdict {
    /// Words for reports and JSON.
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Readable => "readable",
            Verdict::Marginal => "marginal",
            Verdict::NotReadable => "not readable",
            Verdict::Overloads => "overloads",
        }
    }
}

/// Noise at the instrument.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Noise {
    /// The range the pulse is read on: V/div for an oscilloscope, full scale for a digitiser.
    pub range: f64,
    /// Whether `range` is volts per division (an oscilloscope) or a full scale.
    pub per_division: bool,
    /// Instrument's own at that range, V rms.
    pub instrument: f64,
    /// Johnson–Nyquist of the load over the bandwidth, V rms (through the front end when one
    /// is fitted).
    pub johnson: f64,
    /// The front end's own noise at its output, V rms (0 without a front end).
    pub amplifier: f64,
    /// Baseline total, V rms.
    pub total: f64,
}

/// The verdict with its reasons.
#[derive(Debug, Clone, PartialEq)]
pub struct Readability {
    /// Worst of the rules.
    pub verdict: Verdict,
    /// Reasons in words, one per rule that was not plainly met (or the good news).
    pub reasons: Vec<String>,
    /// Peak over baseline noise.
    pub snr: f64,
    /// Rise as the instrument shows it (root-sum-of-squares estimate), s.
    pub displayed_rise: Option<f64>,
    /// Noise figures.
    pub noise: Noise,
    /// Photon counting: the fraction of single photoelectrons above the threshold.
    pub threshold_efficiency: Option<f64>,
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

/// The cable's reflections.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Echoes {
    /// Cable delay one way, s.
    pub delay: f64,
    /// Γ at the load end.
    pub gamma_load: f64,
    /// Γ at the base end.
    pub gamma_base: f64,
    /// Spacing of echoes at the load, s (`2 T`).
    pub spacing: f64,
    /// Relative size of the first echo at the instrument (signed): measured on the computed
    /// pulse, where the far end's Γ(ω) of R ∥ C and the base end's act at the pulse's own
    /// frequencies; the resistive product `Γ_load · Γ_base` when the pulse is longer than the
    /// round trip and its echo cannot be told apart.
    pub first_echo: f64,
    /// Whether `first_echo` was measured on the waveform (else the resistive product).
    pub measured: bool,
}

/// Energy resolution of a scintillation counter, FWHM as fractions of the peak's position:
/// `R² = R_stat² + R_intr²` with `R_stat = 2.355 √(F / N_pe)` (Poisson statistics of the
/// photoelectrons, widened by the chain's excess noise factor; docs/physics.md).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EnergyResolution {
    /// Statistical term.
    pub statistical: f64,
    /// The scintillator's own term, as the design gives it.
    pub intrinsic: Option<f64>,
    /// Both in quadrature.
    pub total: f64,
}

/// The energy resolution for `npe` photoelectrons, excess noise factor `f` and an intrinsic
/// term; `None` without photoelectrons.
pub fn energy_resolution(npe: f64, f: f64, intrinsic: Option<f64>) -> Option<EnergyResolution> {
    (npe > 0.0).then(|| {
        let statistical = FWHM_PER_SIGMA * (f / npe).sqrt();
        EnergyResolution {
            statistical,
            intrinsic,
            total: rss(&[statistical, intrinsic.unwrap_or(0.0)]),
        }
    })
}

/// Timing figures.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Timing {
    /// Threshold, V.
    pub threshold: f64,
    /// Noise-driven jitter `σ_v / slope`, s.
    pub noise_jitter: Option<f64>,
    /// Photon-statistics spread of the leading edge, s: the Monte Carlo of photoelectron
    /// arrivals ([`crate::budget::timing`]), or the centroid estimate where it could not run.
    pub photon_jitter: f64,
    /// The centroid estimate `√(σ_TTS² + σ_light²)/√N`, s (beside it for comparison).
    pub centroid_jitter: f64,
    /// Constant-fraction timing spread from the same Monte Carlo, with the noise, s.
    pub cfd_jitter: Option<f64>,
    /// Whether `photon_jitter` comes from the Monte Carlo.
    pub from_monte_carlo: bool,
    /// Both in quadrature, s.
    pub total_jitter: Option<f64>,
    /// Walk between the smallest and largest expected pulse, s.
    pub walk: Option<f64>,
    /// Smallest and largest expected pulse used, V.
    pub walk_range: (f64, f64),
    /// Leading-edge walk over the same range from the Monte Carlo, s.
    pub walk_leading_edge_mc: Option<f64>,
    /// Constant-fraction walk over the same range from the Monte Carlo, s.
    pub walk_constant_fraction_mc: Option<f64>,
    /// The timing-bench figures.
    pub bench: Bench,
}

/// A delay measured on a timing bench (docs/physics.md §18): the tube's transit time moves
/// with its supply (`t ∝ V^(−1/2)`, from memory), averaging N pulses narrows the jitter by
/// √N until the supply's drift dominates.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bench {
    /// Transit time at the design's supply, s (`None` without `tube.transit_time`).
    pub transit: Option<f64>,
    /// Change of the transit time per volt of supply magnitude, s/V (negative).
    pub delay_per_volt: Option<f64>,
    /// Peak-to-peak delay shift from the supply's ripple, s.
    pub ripple_delay: Option<f64>,
    /// Delay shift from the supply's drift over the run, s.
    pub drift_delay: Option<f64>,
    /// Jitter of one pulse with the ripple's share, s rms.
    pub per_pulse: f64,
    /// Pulses averaged.
    pub pulses: u64,
    /// Resolution of the averaged delay, s: `√(σ²/N + drift²)`.
    pub averaged: f64,
    /// Pulses beyond which the drift dominates, `(σ/drift)²`.
    pub drift_dominates_after: Option<f64>,
}

/// What a front end did to the pulse.
#[derive(Debug, Clone, PartialEq)]
pub struct FrontEndFigures {
    /// `voltage_amplifier` or `charge_preamplifier`.
    pub kind: &'static str,
    /// In words.
    pub description: String,
    /// Peak at the front end's input, V.
    pub input_peak: f64,
    /// Peak at its output, V.
    pub peak: f64,
    /// Time of the output's peak, s.
    pub t_peak: f64,
    /// Peak over baseline noise at the instrument (with a readout).
    pub snr: Option<f64>,
    /// The front end's noise at its output.
    pub noise: FrontNoise,
    /// Charge into the preamplifier, C.
    pub charge_in: Option<f64>,
    /// Its step `Q / C_f`, V.
    pub step: Option<f64>,
    /// Output peak after the charge's centroid, s (measured).
    pub peaking_time: Option<f64>,
    /// Measured output peak over the step and shaper gain.
    pub peak_factor: Option<f64>,
    /// `n^n e^(−n)/n!` beside it.
    pub peak_factor_theory: Option<f64>,
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

/// The photodiode alternative.
#[derive(Debug, Clone, PartialEq)]
pub struct Photodiode {
    /// Photon-weighted responsivity, A/W.
    pub responsivity: f64,
    /// Charge per pulse, C.
    pub charge: f64,
    /// Peak photocurrent, A.
    pub peak_amps: f64,
    /// Feedback resistor for the same peak voltage, ohms.
    pub feedback: f64,
    /// Bandwidth needed for the same rise, Hz.
    pub bandwidth: f64,
    /// Gain-bandwidth product needed, Hz.
    pub gbw: f64,
    /// Output noise (feedback resistor + amplifier), V rms.
    pub noise: f64,
    /// Peak over noise.
    pub snr: f64,
    /// Whether it is practical, with the reason.
    pub practical: bool,
    /// The plain sentence.
    pub sentence: String,
}

/// One row of the load sweep.
#[derive(Debug, Clone, PartialEq)]
pub struct SweepRow {
    /// Load resistor, ohms.
    pub load: f64,
    /// Effective resistance at the load end (with the instrument input), ohms.
    pub effective: f64,
    /// Figures measured on the computed pulse.
    pub pulse: PulseFigures,
    /// Rise as shown by the instrument (estimate), s.
    pub displayed_rise: Option<f64>,
    /// Peak over baseline noise.
    pub snr: Option<f64>,
    /// Verdict.
    pub verdict: Option<Verdict>,
    /// Whether the rise meets the need.
    pub meets_rise: Option<bool>,
    /// Relative size of the first cable echo, `Γ_load · Γ_base`.
    pub echo: Option<f64>,
}

/// The load sweep and the window of good loads.
#[derive(Debug, Clone, PartialEq)]
pub struct LoadSweep {
    /// Rows, rising load.
    pub rows: Vec<SweepRow>,
    /// Loads that meet the rise need (and are readable when a readout is given): lowest and
    /// highest, ohms.
    pub window: Option<(f64, f64)>,
    /// The window in words.
    pub sentence: String,
    /// What the sweep assumed about the instrument input.
    pub note: Option<String>,
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

/// The cable's echoes for a load circuit, if it has a cable.
pub fn echoes(c: &LoadCircuit, w: &Waveform) -> Option<Echoes> {
    c.cable.map(|line| {
        let gl = c.load_reflection().unwrap_or(0.0);
        let gb = c.source_reflection().unwrap_or(1.0);
        let measured = w.first_echo(line.delay);
        Echoes {
            delay: line.delay,
            gamma_load: gl,
            gamma_base: gb,
            spacing: 2.0 * line.delay,
            first_echo: measured.unwrap_or(gl * gb),
            measured: measured.is_some(),
        }
    })
}

/// σ of the Gaussian standing for the single-electron response.
pub fn ser_sigma(rise: f64) -> f64 {
    rise / GAUSS_RISE_PER_SIGMA
}

/// Johnson–Nyquist noise density `√(4 k T R)`, V/√Hz.
pub fn johnson_density(r: f64, kelvin: f64) -> f64 {
    (4.0 * BOLTZMANN * kelvin * r).sqrt()
}

/// Johnson noise of `r` shunted by `c`, seen through the instrument's response of bandwidth
/// `bw`, V rms: `√(4kTR ∫ |H_RC|² |H_inst|² df)`, integrated numerically.
pub fn johnson_rms(r: f64, c: f64, bw: f64, response: InstrumentResponse) -> f64 {
    let fc = if c > 0.0 {
        1.0 / (2.0 * std::f64::consts::PI * r * c)
    } else {
        f64::INFINITY
    };
    // Integrate over ln f from bw·1e-6 to bw·1e3 (the rest is below 1e-6 of the total).
    let n = 2000;
    let (lo, hi) = ((bw * 1e-6).ln(), (bw * 1e3).ln());
    let h = (hi - lo) / n as f64;
    let mut s = 0.0;
    for i in 0..=n {
        let f = (lo + i as f64 * h).exp();
        let x = f / bw;
        let inst = match response {
            InstrumentResponse::SinglePole => 1.0 / (1.0 + x * x),
            InstrumentResponse::Gaussian => (-std::f64::consts::LN_2 * x * x).exp(),
        };
        let rc = 1.0 / (1.0 + (f / fc).powi(2));
        let w = if i == 0 || i == n { 0.5 } else { 1.0 };
        s += w * inst * rc * f * h;
    }
    // Add the tiny part below the lower limit (flat response there).
    s += bw * 1e-6;
    (4.0 * BOLTZMANN * NOISE_TEMPERATURE * r * s).sqrt()
}

/// Rise × bandwidth product of an instrument response and its name.
pub fn rise_bandwidth(response: InstrumentResponse) -> (f64, &'static str) {
    match response {
        InstrumentResponse::SinglePole => (
            RISE_BW_SINGLE_POLE,
            "single-pole response assumed: 0.35/BW (ln 9 / 2π)",
        ),
        InstrumentResponse::Gaussian => (RISE_BW_GAUSSIAN, "Gaussian response assumed: 0.34/BW"),
    }
}

/// The signal path of a design as wired: anode (capacitance, anode resistor), coupling
/// capacitor, resistor at the base, cable, termination at the instrument end ∥ the
/// instrument's input R ∥ C. The one description every solve of the pulse reads.
pub fn circuit(design: &Design) -> LoadCircuit {
    circuit_with_termination(design, design.load_resistance.map(|r| r.get::<ohm>()))
}

/// The signal path in one line, as wired from the anode to the instrument, e.g.
/// "anode ∥ 15 pF → 50 Ω at the base → 2 m of 50 Ω cable → 50 Ω ∥ 8 pF input".
pub fn path_line(design: &Design) -> String {
    let mut parts = vec![format!(
        "anode ∥ {}",
        eng(design.load_capacitance.get::<farad>(), "F")
    )];
    if let Some(ra) = design.anode_resistor {
        let to = match design.polarity {
            crate::design::Polarity::AnodePositive => "+HV",
            crate::design::Polarity::CathodeNegative => "ground",
        };
        parts[0] = format!("{}, {} to {to}", parts[0], eng(ra.get::<ohm>(), "Ω"));
    }
    if let Some((cc, _)) = design.coupling {
        parts.push(format!("coupling {}", eng(cc.get::<farad>(), "F")));
    }
    if let Some(rb) = design.base_resistance {
        parts.push(format!("{} at the base", eng(rb.get::<ohm>(), "Ω")));
    }
    let readout = design.signal.readout.as_ref();
    if let Some(c) = readout.and_then(|r| r.cable) {
        parts.push(format!(
            "{} of {} cable",
            eng(c.length, "m"),
            eng(c.impedance, "Ω")
        ));
    }
    // The far end: the termination and the instrument's input side by side.
    let mut far = Vec::new();
    if let Some(rl) = design.load_resistance {
        let what = if readout.is_some() {
            "termination"
        } else {
            "load"
        };
        far.push(format!("{} {what}", eng(rl.get::<ohm>(), "Ω")));
    }
    if let Some(f) = &design.signal.front_end {
        let (rf, cf) = f.input();
        let mut input = eng(rf, "Ω");
        if cf > 0.0 {
            input = format!("{input} ∥ {}", eng(cf, "F"));
        }
        far.push(format!("{input} front-end input"));
        parts.push(far.join(" ∥ "));
        far = Vec::new();
        parts.push(f.describe());
        if let Some(r) = readout {
            parts.push(format!("{} instrument", eng(r.bandwidth, "Hz")));
        }
    } else if let Some(r) = readout {
        let mut input = eng(r.input_resistance, "Ω");
        if r.input_capacitance > 0.0 {
            input = format!("{input} ∥ {}", eng(r.input_capacitance, "F"));
        }
        far.push(format!("{input} input"));
    }
    if !far.is_empty() {
        parts.push(far.join(" ∥ "));
    }
    parts.join(" → ")
}

/// [`circuit`] with another termination at the instrument end (`None`: open), as the load
/// sweep tries them.
pub fn circuit_with_termination(design: &Design, termination: Option<f64>) -> LoadCircuit {
    let r = design.signal.readout.as_ref();
    // The far end's input: a front end's when one is fitted (its input is the termination),
    // else the instrument's.
    let (rin, cin) = match &design.signal.front_end {
        Some(f) => {
            let (rf, cf) = f.input();
            (Some(rf), cf)
        }
        None => r.map_or((None, 0.0), |r| {
            (Some(r.input_resistance), r.input_capacitance)
        }),
    };
    LoadCircuit {
        anode_capacitance: design.load_capacitance.get::<farad>(),
        anode_resistance: design.anode_resistor.map(|x| x.get::<ohm>()),
        coupling: design.coupling.map(|c| c.0.get::<farad>()),
        base_resistance: design.base_resistance.map(|x| x.get::<ohm>()),
        cable: r.and_then(|r| r.cable).map(|c| waveform::Line {
            delay: c.delay(),
            impedance: c.impedance,
        }),
        load_resistance: waveform::parallel(&[termination, rin]),
        load_capacitance: cin,
    }
}

fn rss(parts: &[f64]) -> f64 {
    parts.iter().map(|x| x * x).sum::<f64>().sqrt()
}

/// Judge a pulse of `peak` volts with baseline noise `noise` on a readout.
pub fn judge(
    peak: f64,
    noise: Noise,
    displayed_rise: Option<f64>,
    r: &ReadoutSpec,
    photoelectrons: Option<f64>,
    echo: Option<Echoes>,
    single_pe_peak: Option<f64>,
) -> Readability {
    let mut worst = Verdict::Readable;
    let mut reasons = Vec::new();
    let mut bump = |v: Verdict, why: String, reasons: &mut Vec<String>| {
        worst = worst.max(v);
        reasons.push(why);
    };
    // Below one photoelectron per pulse, a pulse that appears is one photoelectron: judge that.
    let peak = match photoelectrons {
        Some(n) if n > 0.0 && n < 1.0 => {
            let one = single_pe_peak.unwrap_or(peak / n);
            reasons.push(format!(
                "with {n:.2} photoelectrons per pulse a pulse, when one appears, is a single photoelectron: judged on its height of {}",
                eng(one, "V")
            ));
            one
        }
        _ => peak,
    };
    let snr = if noise.total > 0.0 {
        peak / noise.total
    } else {
        f64::MAX
    };
    if peak > r.largest_full_scale {
        bump(
            Verdict::Overloads,
            format!(
                "peak {} exceeds the largest range's full scale of {}: attenuate or lower the gain",
                eng(peak, "V"),
                eng(r.largest_full_scale, "V")
            ),
            &mut reasons,
        );
    }
    match r.division_volts {
        Some(div) => {
            let n = peak / div;
            let words = format!(
                "peak {} is {n:.1} divisions at the most sensitive range ({}/div)",
                eng(peak, "V"),
                eng(div, "V")
            );
            if n < 0.5 {
                bump(
                    Verdict::NotReadable,
                    format!("{words}: below half a division"),
                    &mut reasons,
                );
            } else if n < 2.0 {
                bump(
                    Verdict::Marginal,
                    format!("{words}: below 2 divisions"),
                    &mut reasons,
                );
            } else if n > r.divisions as f64 && peak <= r.largest_full_scale {
                reasons.push(format!(
                    "{words}: off screen there, use {}/div",
                    eng(range_for(peak, r).0, "V")
                ));
            } else {
                reasons.push(words);
            }
        }
        None => {
            let f = peak / r.sensitive_full_scale;
            let words = format!(
                "peak {} is {:.1} % of the most sensitive full scale ({})",
                eng(peak, "V"),
                f * 100.0,
                eng(r.sensitive_full_scale, "V")
            );
            if f < 0.025 {
                bump(
                    Verdict::NotReadable,
                    format!("{words}: below 2.5 %"),
                    &mut reasons,
                );
            } else if f < 0.10 {
                bump(
                    Verdict::Marginal,
                    format!("{words}: below 10 %"),
                    &mut reasons,
                );
            } else if f > 1.0 && peak <= r.largest_full_scale {
                reasons.push(format!(
                    "{words}: use the {} full-scale range",
                    eng(range_for(peak, r).0, "V")
                ));
            } else {
                reasons.push(words);
            }
        }
    }
    let snr_words = format!(
        "peak over baseline noise {:.1} at the {} range it needs (noise {} rms: instrument {}, load resistor {}{})",
        snr.min(1e9),
        if noise.per_division {
            format!("{}/div", eng(noise.range, "V"))
        } else {
            format!("{} full-scale", eng(noise.range, "V"))
        },
        eng(noise.total, "V"),
        eng(noise.instrument, "V"),
        eng(noise.johnson, "V"),
        if noise.amplifier > 0.0 {
            format!(", front end {}", eng(noise.amplifier, "V"))
        } else {
            String::new()
        }
    );
    if snr < 3.0 {
        bump(
            Verdict::NotReadable,
            format!("{snr_words}: below 3"),
            &mut reasons,
        );
    } else if snr < 10.0 {
        bump(
            Verdict::Marginal,
            format!("{snr_words}: below 10"),
            &mut reasons,
        );
    } else {
        reasons.push(snr_words);
    }
    if let (Some(need), Some(rise)) = (r.rise_need, displayed_rise) {
        if rise > need {
            bump(
                Verdict::Marginal,
                format!(
                    "rise {} as displayed (estimate) is slower than the {} needed",
                    eng(rise, "s"),
                    eng(need, "s")
                ),
                &mut reasons,
            );
        } else {
            reasons.push(format!(
                "rise {} as displayed (estimate) meets the {} needed",
                eng(rise, "s"),
                eng(need, "s")
            ));
        }
    }
    if let Some(e) = echo
        && e.first_echo.abs() > 0.1
    {
        bump(
            Verdict::Marginal,
            format!(
                "the cable is mismatched (resistive Γ = {:+.2} at the load, {:+.2} at the base): echoes of {:.0} % every {} follow each pulse; terminate the cable in its impedance at one end",
                e.gamma_load,
                e.gamma_base,
                e.first_echo.abs() * 100.0,
                eng(e.spacing, "s")
            ),
            &mut reasons,
        );
    }
    if let Some(n) = photoelectrons {
        let p0 = (-n).exp();
        if p0 > 0.5 {
            // Photon counting: the job is to see single photoelectrons, judged on the
            // single-photoelectron pulse above (and its threshold efficiency, added by the
            // caller that knows the chain's statistics), not on the mean pulse.
            reasons.push(format!(
                "with {n:.2} photoelectrons per pulse, {:.0} % of pulses give none: this is photon counting, judged on the single-photoelectron pulse",
                p0 * 100.0
            ));
        }
    }
    Readability {
        verdict: worst,
        reasons,
        snr: snr.min(1e12),
        displayed_rise,
        noise,
        threshold_efficiency: None,
    }
}

/// Fraction of single photoelectrons whose charge exceeds `fraction` of the mean, for a gamma
/// (Polya) distribution of relative variance `f − 1` (the chain's excess noise factor; the
/// model of docs/physics.md §11, from memory): `Q(k, k·fraction)` with
/// `k = 1/(f − 1)`, the regularised upper incomplete gamma function.
/// The reports use the fuller spectrum of [`crate::budget::counting`] (this gamma part, an
/// under-amplified exponential part and the baseline noise), built on the same function.
pub fn threshold_efficiency(fraction: f64, f: f64) -> f64 {
    let var = (f - 1.0).max(1e-6);
    let k = 1.0 / var;
    upper_gamma_regularised(k, k * fraction.max(0.0))
}

/// `Q(a, x) = Γ(a, x)/Γ(a)` by the power series of `P` below `x < a + 1` and the continued
/// fraction of `Q` above (the standard pair for the incomplete gamma function, with the
/// modified Lentz evaluation), to about 1e-14.
pub(crate) fn upper_gamma_regularised(a: f64, x: f64) -> f64 {
    if x <= 0.0 {
        return 1.0;
    }
    let ln_prefix = a * x.ln() - x - ln_gamma(a);
    if x < a + 1.0 {
        let (mut term, mut sum, mut ap) = (1.0 / a, 1.0 / a, a);
        for _ in 0..10_000 {
            ap += 1.0;
            term *= x / ap;
            sum += term;
            if term.abs() < sum.abs() * 1e-15 {
                break;
            }
        }
        (1.0 - sum * ln_prefix.exp()).clamp(0.0, 1.0)
    } else {
        let tiny = 1e-300;
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / tiny;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..10_000 {
            let an = -(i as f64) * (i as f64 - a);
            b += 2.0;
            d = an * d + b;
            if d.abs() < tiny {
                d = tiny;
            }
            c = b + an / c;
            if c.abs() < tiny {
                c = tiny;
            }
            d = 1.0 / d;
            let del = d * c;
            h *= del;
            if (del - 1.0).abs() < 1e-15 {
                break;
            }
        }
        (ln_prefix.exp() * h).clamp(0.0, 1.0)
    }
}

/// ln Γ(x) for x > 0 by the Lanczos approximation (g = 7, nine terms; about 1e-15).
fn ln_gamma(x: f64) -> f64 {
    const G: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        let pi = std::f64::consts::PI;
        return (pi / (pi * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let t = x + 7.5;
    let s = G[1..]
        .iter()
        .enumerate()
        .fold(G[0], |acc, (i, g)| acc + g / (x + i as f64 + 1.0));
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + s.ln()
}

/// Baseline noise at the instrument for a load circuit, through the front end when one is
/// fitted (its own noise and the path's resistors through it).
pub fn noise(c: &LoadCircuit, r: &ReadoutSpec, peak: f64, fe: Option<&FrontEnd>) -> Noise {
    let (johnson, amplifier) = match fe {
        None => (
            johnson_rms(
                c.pulse_resistance(),
                c.total_capacitance(),
                r.bandwidth,
                r.response,
            ),
            0.0,
        ),
        Some(f) => {
            let n = f.noise(front_end_shunt(c, f), c.total_capacitance());
            (n.johnson, n.amplifier)
        }
    };
    let (range, per_division) = range_for(peak, r);
    // An oscilloscope's noise grows with V/div above its front end's floor; a digitiser's is a
    // fixed fraction of its full scale (common practice, docs/physics.md §11).
    let instrument = match r.division_volts {
        Some(_) => r.noise_rms.max(r.noise_per_division * range),
        None => r.noise_rms * range / r.sensitive_full_scale,
    };
    Noise {
        range,
        per_division,
        instrument,
        johnson,
        amplifier,
        total: rss(&[instrument, johnson, amplifier]),
    }
}

/// The resistance whose Johnson noise a front end sees at its input, ohms: the whole path for
/// a voltage amplifier (its input resistor is a real, noisy termination); the path without the
/// preamplifier's own input for a charge preamplifier (its input is its transistor, whose noise
/// is the series noise).
pub fn front_end_shunt(c: &LoadCircuit, f: &FrontEnd) -> f64 {
    match f {
        FrontEnd::Voltage(_) => c.pulse_resistance(),
        FrontEnd::Charge(p) => {
            let g_term = (1.0 / c.load_resistance - 1.0 / p.input_resistance).max(0.0);
            let term = (g_term > 1e-15).then(|| 1.0 / g_term);
            waveform::parallel(&[c.anode_resistance, c.base_resistance, term])
        }
    }
}

/// The pulse at the far end of the path for `current`, and what the instrument receives: the
/// same, or the front end's output.
pub fn at_instrument(
    c: &LoadCircuit,
    fe: Option<&FrontEnd>,
    current: &CurrentPulse,
) -> (Waveform, Waveform) {
    let far = waveform::simulate(c, current, 0.0);
    let out = fe.map_or_else(|| far.clone(), |f| f.process(&far));
    (far, out)
}

/// The range a pulse of `peak` volts is read on: the most sensitive one that shows it within
/// three quarters of the screen or span, stepping 1–2–5 from the most sensitive range and
/// stopping at the largest. Returns the V/div (oscilloscope, `true`) or the full scale.
pub fn range_for(peak: f64, r: &ReadoutSpec) -> (f64, bool) {
    let (start, fit, top, per_div) = match r.division_volts {
        Some(div) => {
            let d = f64::from(r.divisions.max(1));
            (div, peak / (0.75 * d), r.largest_full_scale / d, true)
        }
        None => (
            r.sensitive_full_scale,
            peak / 0.75,
            r.largest_full_scale,
            false,
        ),
    };
    let mut range = start;
    let steps = [2.0, 2.5, 2.0];
    let mut i = 0;
    while range < fit && range * steps[i % 3] <= top * (1.0 + 1e-9) && i < 60 {
        range *= steps[i % 3];
        i += 1;
    }
    if range < fit {
        range = top.max(start);
    }
    (range, per_div)
}

/// The load sweep: `n` log-spaced loads from 50 Ω to 1 MΩ for a pulse of `current`.
pub fn load_sweep(
    design: &Design,
    current: &CurrentPulse,
    n: usize,
    photoelectrons: Option<f64>,
    single_pe: Option<&CurrentPulse>,
) -> LoadSweep {
    let r = design.signal.readout.as_ref();
    // A 50 ohm instrument input makes a high load meaningless: sweep with its high-impedance
    // setting instead, and say so.
    let mut note = None;
    let mut d2;
    let fe = design.signal.front_end.as_ref();
    let design = match r {
        Some(ro) if ro.input_resistance < 1e4 && fe.is_none() => {
            d2 = design.clone();
            if let Some(x) = d2.signal.readout.as_mut() {
                x.input_resistance = 1e6;
                if x.input_capacitance == 0.0 {
                    x.input_capacitance = 15e-12;
                }
            }
            note = Some(format!(
                "the instrument input is {}: the sweep assumes its high-impedance setting (1 MΩ with {})",
                eng(ro.input_resistance, "Ω"),
                eng(
                    d2.signal
                        .readout
                        .as_ref()
                        .map_or(15e-12, |x| x.input_capacitance),
                    "F"
                )
            ));
            &d2
        }
        _ => design,
    };
    let r = design.signal.readout.as_ref();
    let current_rise = current.as_waveform().measure().rise;
    let (lo, hi) = (50f64.ln(), 1e6f64.ln());
    // Loads are independent: spread them over the cores.
    use rayon::prelude::*;
    let rows: Vec<SweepRow> = (0..n)
        .into_par_iter()
        .map(|i| {
            let load = (lo + (hi - lo) * i as f64 / (n.max(2) - 1) as f64).exp();
            let c = circuit_with_termination(design, Some(load));
            let (far, w) = at_instrument(&c, fe, current);
            let f = w.measure_first(c.cable.map(|l| l.delay));
            let echo = echoes(&c, &far);
            let inst = r.map(|r| rise_bandwidth(r.response).0 / r.bandwidth);
            let displayed = f.rise.map(|x| rss(&[x, inst.unwrap_or(0.0)]));
            let (snr, verdict) = match r {
                Some(ro) => {
                    let one = single_pe
                        .filter(|_| photoelectrons.is_some_and(|x| x < 1.0))
                        .map(|p| at_instrument(&c, fe, p).1.measure().peak);
                    let j = judge(
                        f.peak,
                        noise(&c, ro, one.unwrap_or(f.peak), fe),
                        displayed,
                        ro,
                        photoelectrons,
                        echo,
                        one,
                    );
                    (Some(j.snr), Some(j.verdict))
                }
                None => (None, None),
            };
            let need = r.and_then(|r| r.rise_need);
            let _ = current_rise;
            SweepRow {
                load,
                effective: c.load_resistance,
                pulse: f,
                displayed_rise: displayed,
                snr,
                verdict,
                meets_rise: need.zip(displayed).map(|(n, d)| d <= n),
                echo: echo.map(|e| e.first_echo),
            }
        })
        .collect();
    let need = r.and_then(|r| r.rise_need);
    let good = |row: &SweepRow| {
        row.meets_rise.unwrap_or(true) && row.verdict.is_none_or(|v| v == Verdict::Readable)
    };
    let window = {
        let g: Vec<&SweepRow> = rows.iter().filter(|x| good(x)).collect();
        g.first().zip(g.last()).map(|(a, b)| (a.load, b.load))
    };
    let fast: Vec<&SweepRow> = rows
        .iter()
        .filter(|x| x.meets_rise.unwrap_or(false))
        .collect();
    let sentence = match (need, window) {
        (Some(n), Some((a, b))) if a == b => format!(
            "only {} of the loads tried gives a displayed rise within the {} needed and a readable pulse",
            eng(a, "Ω"),
            eng(n, "s")
        ),
        (Some(n), Some((a, b))) => format!(
            "loads from {} to {} give a displayed rise within the {} needed and a readable pulse",
            eng(a, "Ω"),
            eng(b, "Ω"),
            eng(n, "s")
        ),
        (Some(n), None) => match fast.last() {
            Some(f) => format!(
                "loads up to {} meet the {} rise need, but none of them gives a readable pulse (the best is {}): see the reasons under READOUT",
                eng(f.load, "Ω"),
                eng(n, "s"),
                rows.iter()
                    .filter_map(|x| x.verdict)
                    .min()
                    .map_or("not judged", Verdict::as_str)
            ),
            None => format!(
                "no load from 50 Ω to 1 MΩ meets the {} rise need: the tube, light pulse or instrument is too slow",
                eng(n, "s")
            ),
        },
        (None, Some((a, b))) => format!(
            "loads from {} to {} give a readable pulse (give readout.rise_need to narrow the window)",
            eng(a, "Ω"),
            eng(b, "Ω")
        ),
        (None, None) if r.is_some() => {
            "no load from 50 Ω to 1 MΩ gives a readable pulse".to_string()
        }
        (None, None) => "give a readout block to judge the loads".to_string(),
    };
    LoadSweep {
        rows,
        window,
        sentence,
        note,
    }
}

/// Photon-statistics spread of a light shape (σ), seconds: an estimate.
fn light_sigma(shape: &Shape) -> f64 {
    match *shape {
        Shape::Gaussian { fwhm } => fwhm / FWHM_PER_SIGMA,
        Shape::Rectangular { width } => width / 12f64.sqrt(),
        Shape::Exponential { rise, decay } => (rise * rise + decay * decay).sqrt(),
    }
}

/// Build the signal budget of a design; `None` when the design has no light block.
pub fn budget(design: &Design, chain: &Chain) -> Option<SignalBudget> {
    let s = &design.signal;
    let l = s.light.as_ref()?;
    let mut warnings = Vec::new();
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
    let c = circuit(design);
    let fe = s.front_end.as_ref();
    let (far, w) = at_instrument(&c, fe, &current);
    let mut pulse = w.measure_first(c.cable.map(|l| l.delay));
    if charge <= 0.0 {
        pulse.peak = 0.0;
    }
    let single = waveform::gaussian_pulse(sigma_ser, mult * ELEMENTARY_CHARGE);
    // One photoelectron's pulse at the instrument, through the same circuit and front end.
    let one = at_instrument(&c, fe, &single).1;
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
    let readable = r.map(|ro| {
        let mut j = judge(
            pulse.peak,
            noise(
                &c,
                ro,
                if npe > 0.0 && npe < 1.0 {
                    single_volts
                } else {
                    pulse.peak
                },
                fe,
            ),
            displayed,
            ro,
            Some(npe),
            echoes,
            Some(single_volts),
        );
        if npe > 0.0 && npe < 1.0 && single_volts > 0.0 {
            // The discriminator: the design's timing threshold, or a quarter of a
            // photoelectron (common practice for counting).
            let thr = ro.threshold.unwrap_or(COUNTING_THRESHOLD * single_volts);
            let model = crate::budget::counting::spe_model(
                s.counting.as_ref(),
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
        } else if spread > 0.3 {
            j.reasons.push(format!(
                "charge per pulse spreads ±{:.0} % rms from photoelectron statistics (√(F/N) with F = {f:.3})",
                spread * 100.0
            ));
        }
        j
    });
    // Timing.
    let timing = if pulse.peak > 0.0 {
        // Below one photoelectron a pulse is one photoelectron, whose height spreads with the
        // relative variance F − 1 of the multiplier (same cascade theory).
        let (base, s) = if npe < 1.0 {
            (single_volts, (f - 1.0).max(0.0).sqrt())
        } else {
            (pulse.peak, spread)
        };
        // The pulse is linear in the charge: a pulse of height A is the computed one × A/peak.
        let k = base / pulse.peak;
        let threshold = r
            .and_then(|r| r.threshold)
            .unwrap_or(DEFAULT_THRESHOLD_FRACTION * base);
        let noise_total = readable.as_ref().map(|x| x.noise.total);
        let slope = w.slope_at_first_crossing(threshold / k).map(|x| x * k);
        let noise_jitter = noise_total.zip(slope).map(|(n, s)| n / s);
        let centroid_jitter =
            (sigma_tts * sigma_tts + light_sigma(&l.shape).powi(2)).sqrt() / npe.max(1.0).sqrt();
        let mc = crate::budget::timing::monte_carlo(&crate::budget::timing::TimingInput {
            shape: &l.shape,
            photoelectrons: npe,
            sigma_tts,
            excess_noise: f,
            response: &one,
            response_delay: 6.0 * sigma_ser,
            threshold,
            fraction: CFD_FRACTION,
            trials: crate::budget::timing::TRIALS,
            seed: 1,
        });
        let photon_jitter = mc.map_or(centroid_jitter, |m| m.leading_edge);
        // The constant-fraction point's noise jitter: noise over the slope there.
        let cfd_noise = noise_total
            .zip(w.slope_at_first_crossing(CFD_FRACTION * pulse.peak))
            .map(|(n, s)| n / s);
        let cfd_jitter = mc.map(|m| rss(&[m.constant_fraction, cfd_noise.unwrap_or(0.0)]));
        let lo = base * (1.0 - 2.0 * s).max(0.25);
        let hi = base * (1.0 + 2.0 * s);
        // A pulse of height A crosses `th` where the computed pulse crosses `th · peak / A`.
        let cross = |a: f64| {
            let level = threshold * pulse.peak / a;
            (level < pulse.peak)
                .then(|| w.first_crossing(level))
                .flatten()
        };
        let walk = cross(lo).zip(cross(hi)).map(|(a, b)| a - b);
        let total_jitter = noise_jitter.map(|n| rss(&[n, photon_jitter]));
        let bench = bench(design, total_jitter.unwrap_or(photon_jitter));
        Some(Timing {
            threshold,
            noise_jitter,
            photon_jitter,
            centroid_jitter,
            cfd_jitter,
            from_monte_carlo: mc.is_some(),
            total_jitter,
            walk,
            walk_range: (lo, hi),
            // Over the same amplitude range, from the Monte Carlo's slopes of time against
            // each trial's peak (positive: small pulses come late).
            walk_leading_edge_mc: mc.map(|m| -m.leading_edge_walk * (hi - lo)),
            walk_constant_fraction_mc: mc.map(|m| -m.constant_fraction_walk * (hi - lo)),
            bench,
        })
    } else {
        None
    };
    if let Some((i_fig, dev, _)) = design.tube.pulse_linearity {
        let i_fig = i_fig.get::<uom::si::electric_current::ampere>();
        if current_fig.peak > 0.5 * i_fig {
            warnings.push(warning!(Code::PulsePeakNearLinearityLimit,
                "The peak anode current {} is {:.0} % of the tube's pulse-linearity figure ({} at {:.0} % deviation): expect the pulse gain to move; see the linearity section.",
                eng(current_fig.peak, "A"),
                current_fig.peak / i_fig * 100.0,
                eng(i_fig, "A"),
                dev * 100.0
            ));
        }
    }
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
    let background = l.background.map(|b| {
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
    });
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
    let noise_volts = readable.as_ref().map_or(0.0, |x| x.noise.total);
    let counting = (s.counting.is_some() || (r.is_some() && npe > 0.0 && npe < 1.0)).then(|| {
        let thr = r
            .and_then(|r| r.threshold)
            .unwrap_or(COUNTING_THRESHOLD * single_volts);
        let background_pe = background.map_or(0.0, |b| {
            b.cathode_amps / ELEMENTARY_CHARGE * chain.collection
        });
        crate::budget::counting::photon_counting(&crate::budget::counting::CountingInput {
            spec: s.counting.as_ref(),
            excess_noise: f,
            first_stage_gain: chain.first_stage_gain,
            single_volts,
            noise_volts,
            threshold_volts: thr,
            pulse_pair: crate::budget::counting::pulse_pair_resolution(&one, thr),
            signal_rate: l.rate.unwrap_or(0.0) * (1.0 - (-npe).exp()) + background_pe,
        })
    });
    let front_end = fe.map(|fe| front_end_figures(fe, &c, &far, &pulse, readable.as_ref()));
    let photodiode = photodiode_alternative(
        &l.spectrum,
        conv.photons_at_cathode,
        &l.shape,
        pulse.peak,
        displayed.or(pulse.rise).unwrap_or(1e-9),
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
        single_pe_volts: single_volts,
        p_at_least_one: 1.0 - (-npe).exp(),
        excess_noise: f,
        amplitude_spread: spread,
        circuit: c,
        current,
        waveform: w,
        pulse,
        estimates,
        echoes,
        readable,
        timing,
        energy_resolution: (l.kind == light::SourceKind::Scintillator)
            .then(|| energy_resolution(npe, f, l.intrinsic_resolution))
            .flatten(),
        average_anode_amps: average,
        background,
        photodiode,
        sweep,
        front_end,
        counting,
        warnings,
        assumptions,
    })
}

/// What the front end did to the pulse.
fn front_end_figures(
    fe: &FrontEnd,
    c: &LoadCircuit,
    far: &Waveform,
    pulse: &PulseFigures,
    readable: Option<&Readability>,
) -> FrontEndFigures {
    let noise = fe.noise(front_end_shunt(c, fe), c.total_capacitance());
    let mut fig = FrontEndFigures {
        kind: fe.kind(),
        description: fe.describe(),
        input_peak: far.measure().peak,
        peak: pulse.peak,
        t_peak: pulse.t_peak,
        snr: readable.map(|r| r.snr),
        noise,
        charge_in: None,
        step: None,
        peaking_time: None,
        peak_factor: None,
        peak_factor_theory: None,
    };
    if let FrontEnd::Charge(p) = fe {
        // The charge that entered the preamplifier and when (its centroid), by the trapezoid
        // rule on the computed input.
        let (mut q, mut qt) = (0.0, 0.0);
        for i in 1..far.t.len() {
            let h = far.t[i] - far.t[i - 1];
            let a = 0.5 * (far.v[i] + far.v[i - 1]) / p.input_resistance;
            q += a * h;
            qt += a * h * 0.5 * (far.t[i] + far.t[i - 1]);
        }
        let step = q / p.feedback_capacitance;
        fig.charge_in = Some(q);
        fig.step = Some(step);
        if q > 0.0 {
            fig.peaking_time = Some(pulse.t_peak - qt / q);
            fig.peak_factor = Some(pulse.peak / (step * p.shaper_gain));
        }
        fig.peak_factor_theory = Some(crate::budget::frontend::peak_factor(p.order));
    }
    fig
}

/// Pulses averaged for a delay when the design gives no number (a choice of this tool).
pub const DEFAULT_AVERAGE_PULSES: u64 = 1000;

/// The timing-bench figures for a per-pulse jitter `jitter` (docs/physics.md §18).
fn bench(design: &Design, jitter: f64) -> Bench {
    use uom::si::electric_potential::volt;
    use uom::si::f64::{ElectricPotential, Time};
    use uom::si::time::second;
    let v = design.supply_magnitude();
    let transit = design.signal.timing.transit.map(|(t0, v0)| {
        let (t, d) = crate::budget::timing::transit_at(
            Time::new::<second>(t0),
            ElectricPotential::new::<volt>(v0.unwrap_or(v)),
            ElectricPotential::new::<volt>(v),
        );
        (t.get::<second>(), d)
    });
    let per_volt = transit.map(|x| x.1);
    let q = design.supply_quality.as_ref();
    let ripple_delay = per_volt
        .zip(q.and_then(|q| q.ripple_volts))
        .map(|(d, r)| d.abs() * r);
    let drift_delay = per_volt
        .zip(q.and_then(|q| q.drift))
        .map(|(d, x)| d.abs() * x * v);
    // A ripple taken as a sine: rms = peak-to-peak / (2√2), uncorrelated with the pulses.
    let per_pulse = rss(&[
        jitter,
        ripple_delay.map_or(0.0, |r| r / (2.0 * std::f64::consts::SQRT_2)),
    ]);
    let pulses = design
        .signal
        .readout
        .as_ref()
        .and_then(|r| r.average_pulses)
        .unwrap_or(DEFAULT_AVERAGE_PULSES);
    let drift = drift_delay.unwrap_or(0.0);
    Bench {
        transit: transit.map(|x| x.0),
        delay_per_volt: per_volt,
        ripple_delay,
        drift_delay,
        per_pulse,
        pulses,
        averaged: (per_pulse * per_pulse / pulses as f64 + drift * drift).sqrt(),
        drift_dominates_after: (drift > 0.0).then(|| (per_pulse / drift).powi(2)),
    }
}

/// A PIN photodiode and transimpedance amplifier giving the same peak voltage and rise.
pub fn photodiode_alternative(
    spectrum: &Spectrum,
    photons_at_detector: f64,
    shape: &Shape,
    peak_volts: f64,
    rise: f64,
) -> Option<Photodiode> {
    let si = cathode::silicon_photodiode()?;
    let mut electrons = 0.0;
    let mut energy = 0.0;
    for (nm, p) in spectrum.weights() {
        let qe = cathode::qe_from_sensitivity(si.curve.at_or_zero(nm), nm);
        electrons += photons_at_detector * p * qe;
        energy += photons_at_detector * p * cathode::photon_energy(nm);
    }
    let charge = electrons * ELEMENTARY_CHARGE;
    if !(charge > 0.0 && peak_volts > 0.0) {
        return None;
    }
    let peak_amps = charge / shape.area_per_peak();
    let feedback = peak_volts / peak_amps;
    let bandwidth = RISE_BW_SINGLE_POLE / rise;
    let gbw =
        2.0 * std::f64::consts::PI * feedback * PHOTODIODE_CAPACITANCE * bandwidth * bandwidth;
    let enbw = std::f64::consts::FRAC_PI_2 * bandwidth;
    let v_rf = johnson_density(feedback, NOISE_TEMPERATURE) * enbw.sqrt();
    let cf = 1.0 / (2.0 * std::f64::consts::PI * feedback * bandwidth);
    let v_en = AMPLIFIER_NOISE * (1.0 + PHOTODIODE_CAPACITANCE / cf) * enbw.sqrt();
    let noise = rss(&[v_rf, v_en]);
    let snr = peak_volts / noise;
    let practical = gbw <= PRACTICAL_GBW && snr >= 10.0;
    let sentence = if practical {
        format!(
            "practical: a {} feedback resistor and an amplifier of {} gain-bandwidth give the same pulse with a peak-to-noise of {:.0}",
            eng(feedback, "Ω"),
            eng(gbw, "Hz"),
            snr
        )
    } else if gbw > PRACTICAL_GBW && snr < 10.0 {
        format!(
            "not practical: it would need {} of gain-bandwidth (fast amplifiers give a few GHz) and still reach only {:.1} peak-to-noise; the tube's gain is what makes this light readable",
            eng(gbw, "Hz"),
            snr
        )
    } else if gbw > PRACTICAL_GBW {
        format!(
            "not practical: the {} feedback resistor at this rise time needs {} of gain-bandwidth (fast amplifiers give a few GHz)",
            eng(feedback, "Ω"),
            eng(gbw, "Hz")
        )
    } else {
        format!(
            "not practical: the photocurrent is too small; peak-to-noise would be {:.1}",
            snr
        )
    };
    let _ = energy;
    Some(Photodiode {
        responsivity: charge / (energy.max(1e-300)),
        charge,
        peak_amps,
        feedback,
        bandwidth,
        gbw,
        noise,
        snr,
        practical,
        sentence,
    })
}

/// One cell of the light-and-cathode comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct MatchCell {
    /// Cathode key.
    pub cathode: String,
    /// QE at the wavelength (window included).
    pub qe: f64,
    /// Photoelectrons per pulse.
    pub photoelectrons: f64,
    /// Peak at the load, V.
    pub peak_volts: f64,
    /// Verdict with the design's readout.
    pub verdict: Option<Verdict>,
}

/// One wavelength of the comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct MatchRow {
    /// Wavelength, nm.
    pub nm: f64,
    /// Label, e.g. "632.8 nm He-Ne (in air)".
    pub label: String,
    /// One cell per cathode.
    pub cells: Vec<MatchCell>,
}

/// Common laser and LED lines for the comparison (nm, label). He-Ne is given in air; its
/// vacuum wavelength is 632.9908 nm (CIPM 2007).
pub const COMMON_LINES: [(f64, &str); 12] = [
    (266.0, "Nd:YAG 4th harmonic"),
    (355.0, "Nd:YAG 3rd harmonic"),
    (405.0, "violet diode"),
    (450.0, "blue diode"),
    (520.0, "green diode"),
    (532.0, "Nd:YAG 2nd harmonic"),
    (632.8, "He-Ne, in air (632.99 nm in vacuum)"),
    (650.0, "red diode"),
    (780.0, "near-infrared diode"),
    (850.0, "near-infrared diode"),
    (905.0, "pulsed infrared diode"),
    (1064.0, "Nd:YAG fundamental"),
];

/// Compare wavelengths × cathodes for `photons` at the cathode per pulse, with the design's
/// gain, load and readout. The pulse shape is the design's light shape (or a 2 ns Gaussian).
pub fn light_match(
    design: &Design,
    chain: &Chain,
    lines: &[(f64, String)],
    cathodes: &[Cathode],
    photons: f64,
) -> Vec<MatchRow> {
    let s = &design.signal;
    let shape = s
        .light
        .as_ref()
        .map_or(Shape::Gaussian { fwhm: 2e-9 }, |l| l.shape);
    let sigma_ser = ser_sigma(s.timing.ser_rise);
    let sigma_tts = s.timing.tts_fwhm / FWHM_PER_SIGMA;
    let sigma = (sigma_ser * sigma_ser + sigma_tts * sigma_tts).sqrt();
    let mult = chain.gain / chain.collection;
    // The pulse is linear in the charge: one waveform per coulomb serves every cell.
    let unit = waveform::convolved_pulse(&shape, sigma, 1.0);
    let c = circuit(design);
    let fe = s.front_end.as_ref();
    let (far, w) = at_instrument(&c, fe, &unit);
    let f = w.measure_first(c.cable.map(|l| l.delay));
    let echo = echoes(&c, &far);
    let r = s.readout.as_ref();
    let displayed = f.rise.map(|x| {
        rss(&[
            x,
            r.map_or(0.0, |r| rise_bandwidth(r.response).0 / r.bandwidth),
        ])
    });
    let one_pe = at_instrument(
        &c,
        fe,
        &waveform::gaussian_pulse(sigma_ser, mult * ELEMENTARY_CHARGE),
    )
    .1
    .measure()
    .peak;
    lines
        .iter()
        .map(|(nm, label)| MatchRow {
            nm: *nm,
            label: label.clone(),
            cells: cathodes
                .iter()
                .map(|k| {
                    let qe = k.qe(*nm);
                    let npe = photons * qe * chain.collection;
                    let peak = f.peak * npe * mult * ELEMENTARY_CHARGE;
                    MatchCell {
                        cathode: k.key.clone(),
                        qe,
                        photoelectrons: npe,
                        peak_volts: peak,
                        verdict: r.map(|ro| {
                            let n = noise(&c, ro, peak, fe);
                            judge(peak, n, displayed, ro, Some(npe), echo, Some(one_pe)).verdict
                        }),
                    }
                })
                .collect(),
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gaussian_rise_constant() {
        // 10–90 % of the leading edge of exp(-x²/2): √(2 ln 10) − √(2 ln(10/9)).
        let k = (2.0 * 10f64.ln()).sqrt() - (2.0 * (10.0f64 / 9.0).ln()).sqrt();
        assert!((k - GAUSS_RISE_PER_SIGMA).abs() < 1e-6, "{k}");
    }

    #[test]
    fn johnson_over_a_single_pole_matches_the_closed_form() {
        // ENBW of a single pole is π/2 · BW (standard result); with no shunt capacitance the
        // integral must give it.
        let v = johnson_rms(1e3, 0.0, 1e8, InstrumentResponse::SinglePole);
        let expect =
            johnson_density(1e3, NOISE_TEMPERATURE) * (std::f64::consts::FRAC_PI_2 * 1e8).sqrt();
        assert!((v / expect - 1.0).abs() < 2e-3, "{v} {expect}");
    }
}
