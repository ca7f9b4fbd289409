//! What a pulse train does to a base: per-pulse gain, droop, recovery, pulse linearity,
//! capacitor sizing and the tapered-divider comparison (docs/physics.md §4–5).
//!
//! Everything here drives [`crate::solve::transient::Base::run`]; nothing does IO.
//! - **Gain of a pulse**: anode charge over cathode charge in the pulse's window (arrival to
//!   next arrival); the report gives it relative to the first pulse.
//! - **Droop** of a decoupling capacitor: the largest drop of its voltage below its value before
//!   the train. The *decoupled gap* of a capacitor is the gap it spans (across style) or the
//!   gap just above its dynode (stacked style, from a dynode to the return); the allowed droop is
//!   a fraction of that gap's voltage, since the gap voltages set the gain.
//! - **Recovery**: time from the end of the last pulse until the small-signal gain at the
//!   instantaneous gap voltages stays within 0.1 % of its value before the train.
//! - **Pulse-linearity limit**: single pulses of the train's shape, growing in size; the peak
//!   anode current at which the pulse's gain first deviates from the small-signal gain by 1 %
//!   and by 5 % (either sign), bracketed on a doubling scan and refined by bisection on the
//!   logarithm of the pulse charge (each point a full time-domain solve).
//! - **Sizing**: capacitor values scaled by their droop ratio (droop ∝ 1/C for a short pulse,
//!   `ΔV = Q/C`) until every decoupled gap just meets the allowed droop, then rounded up to the
//!   IEC 60063 E12 series and checked by one more run; voltage ratings to order are 2× the gap
//!   voltage (across) or 1.5× the tap voltage (stacked), rounded up to a common rating.
//! - **Taper**: the same train with the last gaps' resistors multiplied by the taper factors
//!   (the supply unchanged): the pulse-linearity limits and the small-signal gain of both.

use crate::budget::safety::{CHARGE_LIMIT_COULOMBS, ENERGY_LIMIT_JOULES};
use crate::design::train::{Pattern, PulseSize, Shape, TrainSpec};
use crate::design::{CapStyle, Design, Element};
use crate::model::constants::ELEMENTARY_CHARGE;
use crate::model::tube::TubeModel;
use crate::solve::transient::{Base, Run, RunOptions, Sample, TransientError};
use crate::units::format_eng as eng;
use crate::warning::{Code, Warning, warning};
use uom::si::capacitance::farad;
use uom::si::electric_current::ampere;

mod linearity;
mod sizing;
mod steady;

pub use linearity::PulseLinearity;
use linearity::pulse_linearity;
use sizing::size_caps;
pub use sizing::{SizedCap, Sizing};
pub use steady::{POISSON_PULSES, SteadyReport, steady_state};

/// Recovery band: the gain is recovered within 0.1 % of its value before the train.
pub const RECOVERY_BAND: f64 = 1e-3;
/// Largest number of points kept in the downsampled time series.
pub const SERIES_POINTS: usize = 1200;

/// Droop of one decoupling capacitor over the train.
#[derive(Debug, Clone, PartialEq)]
pub struct Droop {
    /// Where it sits, e.g. "across gap 11 (D10–GND)".
    pub label: String,
    /// The decoupled gap's label.
    pub gap: String,
    /// Capacitance, farads.
    pub farads: f64,
    /// Voltage across the capacitor before the train, volts.
    pub volts_before: f64,
    /// Voltage of the decoupled gap before the train, volts.
    pub gap_volts: f64,
    /// Largest drop, volts.
    pub droop_volts: f64,
    /// Pulse (0-based) in whose window it happened.
    pub pulse: Option<usize>,
    /// When, seconds.
    pub time: f64,
}

/// Tapered against as-built.
#[derive(Debug, Clone, PartialEq)]
pub struct TaperComparison {
    /// Pulses of the train the comparison ran (at most [`DERIVED_PULSES`]).
    pub pulses_compared: usize,
    /// Factors applied to the last gaps' resistors.
    pub factors: Vec<f64>,
    /// Whether the factors were the default.
    pub assumed: bool,
    /// Small-signal gain as built and tapered.
    pub gain: (f64, f64),
    /// Pulse-linearity limits as built and tapered (1 %, 5 %), amperes.
    pub pct1_amps: (Option<f64>, Option<f64>),
    /// … 5 %.
    pub pct5_amps: (Option<f64>, Option<f64>),
    /// Lowest per-pulse gain ratio of the train as built and tapered.
    pub worst_gain_ratio: (f64, f64),
    /// Voltage of the last gap before the train, as built and tapered, volts.
    pub last_gap_volts: (f64, f64),
}

/// The most pulses a comparison or a sizing that re-runs the train takes (the train's first
/// ones), so that a long train costs its own run and little more.
pub const DERIVED_PULSES: usize = 200;

/// Downsampled time series for plots and JSON.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Series {
    /// Time, seconds.
    pub t: Vec<f64>,
    /// Signal voltage against its value before the train, volts.
    pub signal_volts: Vec<f64>,
    /// Anode current, amperes.
    pub anode_amps: Vec<f64>,
    /// Small-signal gain ratio at the instantaneous gap voltages.
    pub gain_ratio: Vec<f64>,
    /// Voltage of each decoupling capacitor minus its value before the train, volts.
    pub cap_delta_volts: Vec<Vec<f64>>,
}

/// Everything the train section shows.
#[derive(Debug, Clone, PartialEq)]
pub struct TrainAnalysis {
    /// The train as given (pattern possibly overridden).
    pub spec: TrainSpec,
    /// Arrival count.
    pub count: usize,
    /// Cathode charge per pulse, coulombs.
    pub cathode_charge: f64,
    /// Anode charge per pulse at the small-signal gain, coulombs.
    pub nominal_anode_charge: f64,
    /// Small-signal gain before the train.
    pub initial_gain: f64,
    /// Gain of the first pulse.
    pub first_gain: f64,
    /// Per-pulse gain relative to the first.
    pub gain_ratio: Vec<f64>,
    /// Per-pulse peak signal voltage (signed), volts.
    pub peak_signal_volts: Vec<f64>,
    /// Per decoupling capacitor.
    pub droop: Vec<Droop>,
    /// Divider element voltages (K–D1 … Dn–return) at the end of the last pulse, volts.
    pub gap_volts_at_end: Vec<f64>,
    /// Recovery time after the train, seconds (`None`: not within `recovery_horizon`).
    pub recovery_s: Option<f64>,
    /// Horizon of the recovery search, seconds.
    pub recovery_horizon: f64,
    /// Average anode current over the train, amperes (`None` for a single pulse).
    pub average_anode_amps: Option<f64>,
    /// Peak anode current over the train, amperes.
    pub peak_anode_amps: f64,
    /// The tube's average anode-current rating, amperes.
    pub rated_average_amps: f64,
    /// The tube's pulse-linearity figure (peak current, deviation), or the assumed one.
    pub rated_pulse: (f64, f64),
    /// Pulse-linearity limits (None when only the train was asked for).
    pub pulse_linearity: Option<PulseLinearity>,
    /// Capacitor sizing (None when the design has no decoupling capacitors).
    pub sizing: Option<Sizing>,
    /// Taper comparison.
    pub taper: Option<TaperComparison>,
    /// The steady state of the train's rate (None for a single pulse, or when it failed).
    pub steady: Option<SteadyReport>,
    /// Downsampled series.
    pub series: Series,
    /// Accepted and rejected steps of the main run.
    pub steps: (usize, usize),
    /// Pulses of the main run taken through the pulse map.
    pub mapped_pulses: usize,
    /// Plausibility warnings.
    pub warnings: Vec<Warning>,
}

/// What to compute.
#[derive(Debug, Clone, Copy, Default)]
pub struct TrainOptions {
    /// Override the pulse count.
    pub pulses: Option<usize>,
    /// Only the train itself: no pulse-linearity scan, sizing or taper comparison.
    pub train_only: bool,
    /// Where the main run counts the pulses it has reached (a progress display).
    pub progress: Option<&'static std::sync::atomic::AtomicUsize>,
}

/// Label of a decoupling capacitor and its decoupled gap's element index (0-based).
pub fn cap_place(design: &Design, style: CapStyle) -> (String, usize) {
    let n = design.tube.stages;
    match style {
        CapStyle::Across(g) => (
            format!("across gap {g} ({})", design.gap_label(g - 1)),
            g - 1,
        ),
        CapStyle::ToReturn(k) => (
            format!("D{k} to the return"),
            k.min(n), // the gap just above dynode k
        ),
    }
}

/// Cathode charge per pulse for a pulse size, coulombs.
pub fn cathode_charge(size: PulseSize, shape: &Shape, gain: f64) -> f64 {
    match size {
        PulseSize::AnodeCharge(q) => q / gain,
        PulseSize::Photoelectrons(n) => n * ELEMENTARY_CHARGE,
        PulseSize::PeakAnodeCurrent(i) => i / (gain * shape.peak()),
    }
}

/// A design with the last gaps' resistors scaled by `factors` (the last factor for the last gap).
pub fn tapered(design: &Design, factors: &[f64]) -> Design {
    let mut d = design.clone();
    let m = d.elements.len();
    let k = factors.len().min(m);
    for (i, f) in factors[factors.len() - k..].iter().enumerate() {
        if let Element::Resistor(r) = d.elements[m - k + i] {
            d.elements[m - k + i] = Element::Resistor(r * *f);
        }
    }
    d
}

fn quiet() -> RunOptions {
    RunOptions {
        recovery_band: None,
        ..RunOptions::default()
    }
}

fn downsample(samples: &[Sample], signal0: f64, caps0: &[f64]) -> Series {
    let mut s = Series {
        cap_delta_volts: vec![Vec::new(); caps0.len()],
        ..Series::default()
    };
    let mut push = |x: &Sample| {
        s.t.push(x.t);
        s.signal_volts.push(x.signal_volts - signal0);
        s.anode_amps.push(x.anode_amps);
        s.gain_ratio.push(x.gain_ratio);
        for (k, v) in x.cap_volts.iter().enumerate() {
            s.cap_delta_volts[k].push(v - caps0[k]);
        }
    };
    if samples.len() <= SERIES_POINTS {
        samples.iter().for_each(&mut push);
        return s;
    }
    // Keep the extremes of the signal in each bucket, in time order, so peaks survive.
    let bucket = samples.len().div_ceil(SERIES_POINTS / 2);
    for chunk in samples.chunks(bucket) {
        let (mut lo, mut hi) = (0, 0);
        for (i, x) in chunk.iter().enumerate() {
            if x.signal_volts < chunk[lo].signal_volts {
                lo = i;
            }
            if x.signal_volts > chunk[hi].signal_volts {
                hi = i;
            }
        }
        let (a, b) = (lo.min(hi), lo.max(hi));
        push(&chunk[a]);
        if b != a {
            push(&chunk[b]);
        }
    }
    s
}

fn run_train(
    base: &Base,
    spec: &TrainSpec,
    qk: f64,
    opts: &RunOptions,
) -> Result<Run, TransientError> {
    base.run(&spec.pattern.arrivals(), &spec.shape, qk, opts)
}

fn worst_ratio(run: &Run) -> f64 {
    let g1 = run.pulses[0].gain();
    run.pulses
        .iter()
        .map(|p| p.gain() / g1)
        .fold(f64::INFINITY, f64::min)
}

/// Run the whole train analysis for a design that gives a `train` block.
pub fn analyse(
    design: &Design,
    tube: &TubeModel,
    opts: &TrainOptions,
) -> Result<Option<TrainAnalysis>, TransientError> {
    let Some(spec0) = &design.train else {
        return Ok(None);
    };
    let mut spec = spec0.clone();
    if let Some(n) = opts.pulses {
        spec.pattern = spec.pattern.with_count(n);
    }
    let base = Base::from_design(design, tube.clone());
    let (nv, _) = base.quiescent_state()?;
    let n = design.tube.stages;
    let gaps0: Vec<f64> = (1..=n + 1).map(|j| nv[j] - nv[j - 1]).collect();
    let g0 = tube.gain_for_gaps(&gaps0);
    let qk = cathode_charge(spec.size, &spec.shape, g0);
    let run = run_train(
        &base,
        &spec,
        qk,
        &RunOptions {
            record: true,
            recovery_band: Some(RECOVERY_BAND),
            progress: opts.progress,
            ..RunOptions::default()
        },
    )?;
    let first_gain = run.pulses[0].gain();
    let gain_ratio: Vec<f64> = run.pulses.iter().map(|p| p.gain() / first_gain).collect();
    let droop = droop_records(design, &run);
    let total_anode: f64 = run.pulses.iter().map(|p| p.anode_charge).sum();
    let average_anode_amps = spec.pattern.duration().map(|t| total_anode / t);
    let peak_anode_amps = run
        .pulses
        .iter()
        .map(|p| p.peak_anode_amps)
        .fold(0.0, f64::max);
    let rated_average_amps = design.tube.max_anode_current.get::<ampere>();
    let rated_pulse = match design.tube.pulse_linearity {
        Some((i, d, _)) => (i.get::<ampere>(), d),
        None => (
            crate::model::tube::ASSUMED_PULSE_LINEARITY.0,
            crate::model::tube::ASSUMED_PULSE_LINEARITY.1,
        ),
    };
    let caps0: Vec<f64> = run.caps.iter().map(|c| c.initial).collect();
    let series = downsample(&run.samples, run.signal_initial, &caps0);
    let (pulse_lin, sizing, taper) = if opts.train_only {
        (None, None, None)
    } else {
        let start_peak = 1e-3 * rated_pulse.0;
        let (pl, sizing, taper) = comparisons(design, tube, &base, &spec, qk, &run, start_peak)?;
        (Some(pl), sizing, Some(taper))
    };
    let mut warnings = Vec::new();
    let steady = match steady_state(design, &base, &spec, qk, first_gain) {
        Ok(s) => s,
        Err(e) => {
            warnings.push(warning!(
                Code::TrainSteadyStateNotFound,
                "The steady state of the train's rate was not found: {e}"
            ));
            None
        }
    };
    if let Some(avg) = average_anode_amps.filter(|a| *a > rated_average_amps) {
        warnings.push(warning!(
            Code::TrainAverageAboveRating,
            "The train's average anode current {} is above the tube's rating of {}.",
            eng(avg, "A"),
            eng(rated_average_amps, "A")
        ));
    }
    if peak_anode_amps > rated_pulse.0 {
        warnings.push(warning!(Code::TrainPeakAboveLinearityLimit,
            "The train's peak anode current {} is above the tube's pulse-linearity figure of {} ({:.0} % deviation).",
            eng(peak_anode_amps, "A"),
            eng(rated_pulse.0, "A"),
            rated_pulse.1 * 100.0
        ));
    }
    warnings.extend(run_warnings(design, &spec, &run, &droop));
    Ok(Some(TrainAnalysis {
        count: spec.pattern.count(),
        spec,
        cathode_charge: qk,
        nominal_anode_charge: qk * g0,
        initial_gain: g0,
        first_gain,
        gain_ratio,
        peak_signal_volts: run.pulses.iter().map(|p| p.peak_signal_volts).collect(),
        droop,
        gap_volts_at_end: run.elements_at_train_end.clone(),
        recovery_s: run.recovery,
        recovery_horizon: run.recovery_horizon,
        average_anode_amps,
        peak_anode_amps,
        rated_average_amps,
        rated_pulse,
        pulse_linearity: pulse_lin,
        sizing,
        taper,
        steady,
        series,
        steps: run.steps,
        mapped_pulses: run.mapped_pulses.0,
        warnings,
    }))
}

/// Each decoupling capacitor's droop over the train.
fn droop_records(design: &Design, run: &Run) -> Vec<Droop> {
    design
        .decoupling
        .iter()
        .zip(&run.caps)
        .map(|(d, rec)| {
            let (label, gap) = cap_place(design, d.style);
            Droop {
                label,
                gap: design.gap_label(gap),
                farads: d.value.get::<farad>(),
                volts_before: rec.initial,
                gap_volts: run.elements_initial[gap],
                droop_volts: rec.droop,
                pulse: rec.droop_pulse,
                time: rec.droop_time,
            }
        })
        .collect()
}

/// The sections that re-solve the base: pulse linearity, capacitor sizing and the tapered
/// divider compared with the built one (re-running at most the first [`DERIVED_PULSES`]).
fn comparisons(
    design: &Design,
    tube: &TubeModel,
    base: &Base,
    spec: &TrainSpec,
    qk: f64,
    run: &Run,
    start_peak: f64,
) -> Result<(PulseLinearity, Option<Sizing>, TaperComparison), TransientError> {
    let n = design.tube.stages;
    let pl = pulse_linearity(base, &spec.shape, start_peak, qk)?;
    // Comparisons that re-run the train take at most its first DERIVED_PULSES pulses.
    let count = spec.pattern.arrivals_len();
    let short = (count > DERIVED_PULSES).then(|| TrainSpec {
        pattern: spec.pattern.with_count(DERIVED_PULSES),
        ..spec.clone()
    });
    let derived = short.as_ref().unwrap_or(spec);
    let sizing = size_caps(design, tube, derived, qk, run)?;
    let td = tapered(design, &spec.taper);
    let tbase = Base::from_design(&td, tube.clone());
    let tpl = pulse_linearity(&tbase, &spec.shape, start_peak, qk)?;
    let trun = run_train(&tbase, derived, qk, &quiet())?;
    // The shorter train's pulses are the first ones of the train as solved when its
    // arrivals are a prefix (a train from rest does not know its future); else re-run.
    let built_worst = match &short {
        Some(sp) => {
            let a = sp.pattern.arrivals();
            if spec.pattern.arrivals().starts_with(&a) {
                let g1 = run.pulses[0].gain();
                run.pulses[..a.len()]
                    .iter()
                    .map(|p| p.gain() / g1)
                    .fold(f64::INFINITY, f64::min)
            } else {
                worst_ratio(&run_train(base, sp, qk, &quiet())?)
            }
        }
        None => worst_ratio(run),
    };
    let taper = TaperComparison {
        pulses_compared: derived.pattern.arrivals_len(),
        factors: spec.taper.clone(),
        assumed: spec.taper_assumed,
        gain: (run.initial_gain, trun.initial_gain),
        pct1_amps: (pl.pct1_amps, tpl.pct1_amps),
        pct5_amps: (pl.pct5_amps, tpl.pct5_amps),
        worst_gain_ratio: (built_worst, worst_ratio(&trun)),
        last_gap_volts: (run.elements_initial[n], trun.elements_initial[n]),
    };
    Ok((pl, sizing, taper))
}

/// Warnings on the run: capacitors drooping past the allowed fraction, a gain not recovered,
/// no decoupling at all.
fn run_warnings(design: &Design, spec: &TrainSpec, run: &Run, droop: &[Droop]) -> Vec<Warning> {
    let mut warnings = Vec::new();
    for d in droop {
        if d.droop_volts > spec.droop * d.gap_volts.abs() {
            warnings.push(warning!(Code::TrainCapacitorDroop,
                "The capacitor {} droops {} over the train, {:.2} % of its gap ({}): above the allowed {:.1} %; see the recommended values.",
                d.label,
                eng(d.droop_volts, "V"),
                100.0 * d.droop_volts / d.gap_volts.abs(),
                d.gap,
                spec.droop * 100.0
            ));
        }
    }
    if run.recovery.is_none() {
        warnings.push(warning!(
            Code::TrainGainNotRecovered,
            "The gain had not recovered within 0.1 % {} after the train.",
            eng(run.recovery_horizon, "s")
        ));
    }
    if design.decoupling.is_empty() {
        warnings.push(warning!(
            Code::TrainNoDecoupling,
            "The design has no decoupling capacitors: every pulse's charge comes through the divider resistors and strays."
        ));
    }
    warnings
}

/// The safety limits the sizing section compares against (IEC 61010-1, from memory).
pub fn limits() -> (f64, f64) {
    (CHARGE_LIMIT_COULOMBS, ENERGY_LIMIT_JOULES)
}

/// Words for the pattern in reports.
pub fn describe(spec: &TrainSpec) -> String {
    format!("{}; {}", spec.pattern.describe(), spec.shape.describe())
}

/// Whether a pattern is a single pulse.
pub fn is_single(p: &Pattern) -> bool {
    matches!(p, Pattern::Single)
}
