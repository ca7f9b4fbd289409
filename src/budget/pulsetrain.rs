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

/// Recovery band: the gain is recovered within 0.1 % of its value before the train.
pub const RECOVERY_BAND: f64 = 1e-3;
/// Largest number of points kept in the downsampled time series.
pub const SERIES_POINTS: usize = 1200;

/// Preferred values for the recommended capacitors (IEC 60063, from [`crate::model::eseries`]).
pub const E12: &[f64] = &crate::model::eseries::E12;
/// The coarser series, for comparison.
pub const E6: &[f64] = &crate::model::eseries::E6;

/// Smallest value of a series (one decade's table) at or above `x` (> 0).
pub fn round_up_series(x: f64, series: &[f64]) -> f64 {
    let decade = 10f64.powf(x.log10().floor());
    for scale in [decade, decade * 10.0] {
        for v in series {
            let c = v * scale;
            // Tolerate rounding in the decade arithmetic.
            if c >= x * (1.0 - 1e-9) {
                return c;
            }
        }
    }
    series[0] * decade * 100.0
}

/// The next larger value of the series after `x`.
fn next_series(x: f64, series: &[f64]) -> f64 {
    round_up_series(x * 1.0001, series)
}

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

/// Pulse-linearity limits of single pulses.
#[derive(Debug, Clone, PartialEq)]
pub struct PulseLinearity {
    /// Peak anode current where a single pulse's gain first deviates by 1 %.
    pub pct1_amps: Option<f64>,
    /// Sign of that deviation (+1 over-linear, -1 saturating).
    pub pct1_sign: f64,
    /// … by 5 %.
    pub pct5_amps: Option<f64>,
    /// Sign of that deviation.
    pub pct5_sign: f64,
    /// Deviation of one pulse of the train's size.
    pub train_pulse_deviation: f64,
    /// Largest peak anode current tried.
    pub scanned_to_amps: f64,
}

/// One sized capacitor.
#[derive(Debug, Clone, PartialEq)]
pub struct SizedCap {
    /// Where it sits.
    pub label: String,
    /// Value fitted in the design, farads.
    pub fitted_farads: f64,
    /// Smallest value meeting the allowed droop (continuous), farads.
    pub needed_farads: f64,
    /// Recommended E12 value, farads.
    pub preferred_farads: f64,
    /// Voltage it holds, volts.
    pub holds_volts: f64,
    /// Voltage rating to order, volts.
    pub rating_volts: f64,
    /// Droop of its gap with the recommended values, as a fraction of the gap voltage.
    pub droop_fraction: f64,
    /// Stored energy at the recommended value, joules.
    pub joules: f64,
    /// Stored charge at the recommended value, coulombs.
    pub coulombs: f64,
}

/// Capacitor sizing for an allowed droop.
#[derive(Debug, Clone, PartialEq)]
pub struct Sizing {
    /// Pulses of the train the sizing ran when not sized for ever (at most [`DERIVED_PULSES`]).
    pub pulses_sized: usize,
    /// Whether the values hold the pattern continuing for ever (its steady state), rather than
    /// the train as given from rest (a single pulse, or a rate the base cannot sustain).
    pub for_ever: bool,
    /// Allowed droop, fraction of each decoupled gap's voltage.
    pub allowed: f64,
    /// One row per decoupling capacitor.
    pub caps: Vec<SizedCap>,
    /// Energy the recommended capacitors store minus what the fitted ones store, joules.
    pub added_joules: f64,
    /// Total energy of the recommended decoupling capacitors, joules.
    pub total_joules: f64,
    /// Whether the check run with the recommended values meets the allowed droop.
    pub verified: bool,
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

/// The state a continuous rate settles to (the train's pattern repeated for ever).
#[derive(Debug, Clone, PartialEq)]
pub struct SteadyReport {
    /// "periodic", "bursts" (the burst pattern repeated) or "poisson" (the mean rate).
    pub kind: &'static str,
    /// Period of the repeated pattern, seconds (the mean interval for Poisson arrivals).
    pub period_s: f64,
    /// Lowest gain of a pulse in the steady state over the first pulse's gain.
    pub gain_ratio: f64,
    /// Divider element voltages (K–D1 … Dn–return) just before a period's first pulse, volts.
    pub gap_volts: Vec<f64>,
    /// Per decoupling capacitor: its largest drop in the steady state below its value before
    /// the train, as a fraction of the decoupled gap's voltage.
    pub droop_fraction: Vec<f64>,
    /// Per capacitor: the part of that drop present before a pulse arrives (the shift the
    /// average current gives through the divider), fraction of the gap.
    pub shift_fraction: Vec<f64>,
    /// Per capacitor: what the pulses of a period add to it (set by the capacitor), fraction.
    pub pulse_droop_fraction: Vec<f64>,
    /// Poisson arrivals: per capacitor, the drop exceeded by 1 % of pulses, fraction.
    pub droop_quantile_99: Option<Vec<f64>>,
    /// One-period solves the shooting took.
    pub periods_solved: usize,
}

/// The most pulses a comparison or a sizing that re-runs the train takes (the train's first
/// ones), so that a long train costs its own run and little more.
pub const DERIVED_PULSES: usize = 200;

/// Pulses the Poisson statistics draw.
pub const POISSON_PULSES: usize = 200_000;

/// The periodic steady state of a train's pattern repeated for ever, and for Poisson arrivals
/// the 99th percentile of each capacitor's drop; `None` for a single pulse.
pub fn steady_state(
    design: &Design,
    base: &Base,
    spec: &TrainSpec,
    qk: f64,
    first_gain: f64,
) -> Result<Option<SteadyReport>, TransientError> {
    let (kind, offsets, period) = match spec.pattern {
        Pattern::Single => return Ok(None),
        Pattern::Periodic(_, r) | Pattern::Poisson(r, _, _) => (
            if matches!(spec.pattern, Pattern::Periodic(..)) {
                "periodic"
            } else {
                "poisson"
            },
            vec![0.0],
            1.0 / r,
        ),
        Pattern::Bursts(n, r, p, _) => (
            "bursts",
            (0..n).map(|i| i as f64 / r).collect(),
            (n - 1) as f64 / r + p,
        ),
    };
    let ss = base.periodic_steady_state(&offsets, period, &spec.shape, qk)?;
    let run = &ss.run;
    let ncaps = run.caps.len();
    let gaps: Vec<f64> = design
        .decoupling
        .iter()
        .map(|d| {
            run.elements_initial[cap_place(design, d.style).1]
                .abs()
                .max(1e-9)
        })
        .collect();
    let lowest: Vec<f64> = (0..ncaps)
        .map(|k| {
            run.window_cap_min
                .iter()
                .skip(k)
                .step_by(ncaps)
                .copied()
                .fold(f64::INFINITY, f64::min)
        })
        .collect();
    let droop: Vec<f64> = (0..ncaps)
        .map(|k| (run.caps[k].initial - lowest[k]) / gaps[k])
        .collect();
    let shift: Vec<f64> = (0..ncaps)
        .map(|k| (run.caps[k].initial - base.cap_volts(&ss.start, k)) / gaps[k])
        .collect();
    let quantile = match spec.pattern {
        Pattern::Poisson(r, _, seed) => {
            let (q, _) = base.poisson_droop(&ss, &spec.shape, qk, r, 0.99, seed, POISSON_PULSES)?;
            Some(q.iter().zip(&gaps).map(|(q, g)| q / g).collect())
        }
        _ => None,
    };
    Ok(Some(SteadyReport {
        kind,
        period_s: period,
        gain_ratio: run
            .pulses
            .iter()
            .map(|p| p.gain() / first_gain)
            .fold(f64::INFINITY, f64::min),
        gap_volts: base.element_volts(&ss.start),
        pulse_droop_fraction: droop.iter().zip(&shift).map(|(d, s)| d - s).collect(),
        droop_fraction: droop,
        shift_fraction: shift,
        droop_quantile_99: quantile,
        periods_solved: ss.iterations,
    }))
}

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

/// Pulse-linearity limits for single pulses of `shape` on `base`.
pub fn pulse_linearity(
    base: &Base,
    shape: &Shape,
    start_peak_amps: f64,
    train_qk: f64,
) -> Result<PulseLinearity, TransientError> {
    let single = |qk: f64| -> Result<(f64, f64), TransientError> {
        let run = base.run(&[0.0], shape, qk, &quiet())?;
        let p = run.pulses[0];
        Ok((p.gain() / run.initial_gain - 1.0, p.peak_anode_amps))
    };
    let g0 = {
        let (nv, _) = base.quiescent_state()?;
        let gaps: Vec<f64> = (1..=base.stages() + 1).map(|j| nv[j] - nv[j - 1]).collect();
        base.tube.gain_for_gaps(&gaps)
    };
    let q_of_peak = |i: f64| i / (g0 * shape.peak());
    let train_pulse_deviation = single(train_qk)?.0;
    // Doubling scan from a small pulse.
    let mut scan: Vec<(f64, f64, f64)> = Vec::new(); // (ln q, deviation, peak)
    let mut q = q_of_peak(start_peak_amps);
    let mut max_peak: f64 = 0.0;
    for _ in 0..40 {
        let (dev, peak) = single(q)?;
        max_peak = max_peak.max(peak);
        scan.push((q.ln(), dev, peak));
        if dev.abs() >= 0.05 {
            break;
        }
        q *= 2.0;
    }
    let find = |target: f64| -> Result<(Option<f64>, f64), TransientError> {
        let Some(idx) = scan.iter().position(|s| s.1.abs() >= target) else {
            return Ok((None, 0.0));
        };
        if idx == 0 {
            return Ok((Some(scan[0].2), scan[0].1.signum()));
        }
        let (mut a, mut b) = (scan[idx - 1].0, scan[idx].0);
        let (mut best_peak, mut sign) = (scan[idx].2, scan[idx].1.signum());
        for _ in 0..24 {
            let mid = 0.5 * (a + b);
            let (dev, peak) = single(mid.exp())?;
            if dev.abs() >= target {
                b = mid;
                best_peak = peak;
                sign = dev.signum();
            } else {
                a = mid;
            }
            if b - a < 1e-4 {
                break;
            }
        }
        Ok((Some(best_peak), sign))
    };
    let (pct1_amps, pct1_sign) = find(0.01)?;
    let (pct5_amps, pct5_sign) = find(0.05)?;
    Ok(PulseLinearity {
        pct1_amps,
        pct1_sign,
        pct5_amps,
        pct5_sign,
        train_pulse_deviation,
        scanned_to_amps: max_peak,
    })
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

/// Droop fraction of each decoupled gap for a run.
fn droop_fractions(design: &Design, run: &Run) -> Vec<f64> {
    design
        .decoupling
        .iter()
        .zip(&run.caps)
        .map(|(d, rec)| {
            let (_, gap) = cap_place(design, d.style);
            rec.droop / run.elements_initial[gap].abs().max(1e-9)
        })
        .collect()
}

/// What the capacitors alone let each decoupled gap droop, as a fraction of its voltage, for
/// the train's pattern continuing for ever (docs/physics.md §13): one pulse from rest (a single
/// pulse); the drop the pulses of a period add in the periodic steady state (periodic trains
/// and bursts); for Poisson arrivals, the drop exceeded by 1 % of pulses beyond the mean DC
/// shift. The DC shift at the average current is the divider's and is left out: no capacitor
/// removes it. Each costs one short solve, not a run of the whole train. Without `steady`
/// (a rate whose steady state does not exist: the base saturates at its average current), the
/// drop over the train as given, from rest.
fn capacitor_droop(
    design: &Design,
    tube: &TubeModel,
    spec: &TrainSpec,
    qk: f64,
    steady: bool,
) -> Result<Vec<f64>, TransientError> {
    let base = Base::from_design(design, tube.clone());
    if !steady || matches!(spec.pattern, Pattern::Single) {
        let run = run_train(&base, spec, qk, &quiet())?;
        return Ok(droop_fractions(design, &run));
    }
    let steady =
        steady_state(design, &base, spec, qk, 1.0)?.ok_or_else(|| TransientError::Failed {
            time: 0.0,
            reason: "no steady state for the pattern".into(),
        })?;
    Ok(match &steady.droop_quantile_99 {
        Some(q) => q
            .iter()
            .zip(&steady.shift_fraction)
            .map(|(q, s)| (q - s).max(0.0))
            .collect(),
        None => steady.pulse_droop_fraction.clone(),
    })
}

/// Capacitors sized for the allowed droop of [`capacitor_droop`]: the needed values by fixed
/// point on ΔV ∝ 1/C (within 2 %), then E12 values checked and stepped up until they hold.
/// `run` is the train as solved (the voltages each capacitor holds before it).
fn size_caps(
    design: &Design,
    tube: &TubeModel,
    spec: &TrainSpec,
    qk: f64,
    run: &Run,
) -> Result<Option<Sizing>, TransientError> {
    if design.decoupling.is_empty() {
        return Ok(None);
    }
    let allowed = spec.droop;
    let stray = design.stray.get::<farad>();
    let floor = 10.0 * stray;
    // For ever when the base as built has a steady state at the rate, else the train as given.
    let steady = capacitor_droop(design, tube, spec, qk, true).is_ok();
    let droop_with = |vals: &[f64]| -> Result<Vec<f64>, TransientError> {
        let mut d = design.clone();
        for (c, v) in d.decoupling.iter_mut().zip(vals) {
            c.value = uom::si::f64::Capacitance::new::<farad>(*v);
        }
        capacitor_droop(&d, tube, spec, qk, steady)
    };
    let mut vals: Vec<f64> = design
        .decoupling
        .iter()
        .map(|c| c.value.get::<farad>())
        .collect();
    // A base whose capacitors are far too small for the pulses may not solve at all: back off
    // to twice the values and go on (at most six times in all).
    let mut failures = 0;
    let mut tried = |vals: &mut Vec<f64>| -> Result<Option<Vec<f64>>, TransientError> {
        match droop_with(vals) {
            Ok(fr) => Ok(Some(fr)),
            Err(_) if failures < 6 => {
                failures += 1;
                vals.iter_mut().for_each(|v| *v *= 2.0);
                Ok(None)
            }
            Err(e) => Err(e),
        }
    };
    for _ in 0..16 {
        let Some(fr) = tried(&mut vals)? else {
            continue;
        };
        let mut done = true;
        for (v, f) in vals.iter_mut().zip(&fr) {
            // ΔV ∝ 1/C: scale by the excess, at most 4× down or 30× up a round.
            let r = (f / allowed).clamp(0.25, 30.0);
            if (r - 1.0).abs() > 0.02 && !(r < 1.0 && *v <= floor) {
                done = false;
            }
            *v = (*v * r).max(floor);
        }
        if done {
            break;
        }
    }
    let needed = vals.clone();
    let mut preferred: Vec<f64> = needed.iter().map(|v| round_up_series(*v, E12)).collect();
    let mut verified = false;
    let mut final_fr = Vec::new();
    for _ in 0..6 {
        let Some(fr) = tried(&mut preferred)? else {
            continue;
        };
        let over: Vec<usize> = (0..fr.len()).filter(|i| fr[*i] > allowed).collect();
        final_fr = fr;
        if over.is_empty() {
            verified = true;
            break;
        }
        for i in over {
            preferred[i] = next_series(preferred[i], E12);
        }
    }
    let mut caps = Vec::new();
    let (mut added, mut total) = (0.0, 0.0);
    for (i, d) in design.decoupling.iter().enumerate() {
        let (label, _) = cap_place(design, d.style);
        let holds = run.caps[i].initial.abs();
        let rating = crate::model::eseries::capacitor_rating(holds);
        let c = preferred[i];
        let joules = 0.5 * c * holds * holds;
        added += joules - 0.5 * d.value.get::<farad>() * holds * holds;
        total += joules;
        caps.push(SizedCap {
            label,
            fitted_farads: d.value.get::<farad>(),
            needed_farads: needed[i],
            preferred_farads: c,
            holds_volts: holds,
            rating_volts: rating,
            droop_fraction: final_fr[i],
            joules,
            coulombs: c * holds,
        });
    }
    Ok(Some(Sizing {
        pulses_sized: spec.pattern.arrivals_len(),
        for_ever: steady && !matches!(spec.pattern, Pattern::Single),
        allowed,
        caps,
        added_joules: added,
        total_joules: total,
        verified,
    }))
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
    let droop: Vec<Droop> = design
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
        .collect();
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

    let start_peak = 1e-3 * rated_pulse.0;
    let (pulse_lin, sizing, taper) = if opts.train_only {
        (None, None, None)
    } else {
        let pl = pulse_linearity(&base, &spec.shape, start_peak, qk)?;
        // Comparisons that re-run the train take at most its first DERIVED_PULSES pulses.
        let count = spec.pattern.arrivals_len();
        let short = (count > DERIVED_PULSES).then(|| TrainSpec {
            pattern: spec.pattern.with_count(DERIVED_PULSES),
            ..spec.clone()
        });
        let derived = short.as_ref().unwrap_or(&spec);
        let sizing = size_caps(design, tube, derived, qk, &run)?;
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
                    worst_ratio(&run_train(&base, sp, qk, &quiet())?)
                }
            }
            None => worst_ratio(&run),
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
    for d in &droop {
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rounding_up_follows_the_e12_series() {
        // IEC 60063 E12: 4.7 then 5.6; 8.2 then 10 in the next decade.
        assert!((round_up_series(4.71e-9, E12) - 5.6e-9).abs() < 1e-18);
        assert!((round_up_series(4.7e-9, E12) - 4.7e-9).abs() < 1e-18);
        assert!((round_up_series(8.3e-9, E12) - 10e-9).abs() < 1e-18);
        assert!((round_up_series(1.6e-6, E6) - 2.2e-6).abs() < 1e-15);
    }
}
