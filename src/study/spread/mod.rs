//! Tolerance statistics (`dynode spread`): how a built base differs from its design when parts
//! are off by their tolerance and the tube is not the one on the datasheet.
//!
//! Each Monte Carlo sample draws, in a fixed order from its own random stream:
//! - every divider resistor `R_i (1 + σ_R z)`, with `σ_R` = tolerance / `sigmas` (default: the
//!   tolerance is read as 3 σ of a normal distribution, a common reading of a part's tolerance;
//!   settable); a Zener's voltage the same way with its own tolerance;
//! - the supply setting `(1 + σ_s z)` (setting accuracy as 3 σ) and its drift, uniform in
//!   `±drift` (a slow wander anywhere inside its bound);
//! - the tube's gain at its calibration point, log-normal: `G × exp(σ_G z)` (`σ_G` settable;
//!   default 0.35, about a factor 2 at 2 σ between tubes of one type, from memory);
//! - the secondary-emission exponent `k + σ_k z`, with `a` re-calibrated so that the gain at the
//!   calibration point is unchanged (the exponent moves the slope, the gain spread the level);
//! - each decoupling capacitor `C (1 + σ_C z)`;
//! - on a transistor-held base, each resistor of the followers' tap string `R_s,i (1 + σ_R z)`
//!   (drawn last, so a base without followers draws exactly as before). The string has one
//!   resistor from the cathode to the first tap, one between each pair of taps and one from the
//!   last tap to the return rail, each as long as the potential step between its ends; a tap
//!   sits at `V Σ_{i≤j} R_s,i / Σ R_s` and its dynode one follower drop above it. The followers
//!   hold the drawn potentials, and the divider's own (drawn) resistors no longer set them.
//!
//! Each sample is solved by the core ([`Network::solve_raw`], warm-started from the nominal
//! operating point) at the design's average anode current: small-signal gain, gain and DC deviation
//! at the operating point, every gap's voltage against its limit, dissipation, supply current,
//! droop per pulse when a pulse charge is given, the supply that brings the sample back to the
//! nominal (or target) gain. The linearity limits (±1 %) are found on the first
//! `linearity_samples` samples only ([`crate::solve::linearity::crossing`], about 40 solves each).
//!
//! Determinism: sample `i` uses a ChaCha8 stream keyed by the seed with stream number `i`, so the
//! result does not depend on how rayon splits the work or on the thread count.
//!
//! First-order propagation (`σ²_lnG ≈ Σ (∂lnG/∂p)² σ_p²`, standard error propagation) is computed
//! beside the Monte Carlo, by central differences with the core, to rank the parameters.

use crate::analysis::{self, Analysis, AnalysisError};
use crate::design::Design;

mod draw;
mod propagate;
mod sample;
mod yields;

use draw::{Model, TapString, effective, reference_ln_sum};
use sample::{LinearityLimits, Outcome, SampleOp, Sampler};
use yields::{GapLimits, gap_limits};

/// Default spread of ln(gain) between tubes of one type (from memory: a factor of about 2 at 2 σ).
pub const DEFAULT_TUBE_GAIN_SIGMA: f64 = 0.35;
/// Default standard deviation of the exponent k (from memory: k is quoted 0.7–0.8).
pub const DEFAULT_EXPONENT_SIGMA: f64 = 0.02;
/// Default capacitor tolerance (±10 %, common for film and ceramic parts; common practice).
pub(crate) const DEFAULT_CAPACITOR_TOLERANCE: f64 = 0.10;
/// Default Zener tolerance (±5 %, common practice).
pub(crate) const DEFAULT_ZENER_TOLERANCE: f64 = 0.05;
/// Default supply setting accuracy when the design gives none (±0.5 %, from memory for a
/// front-panel setting).
pub(crate) const DEFAULT_SUPPLY_SETTING: f64 = 0.005;
/// Samples run between two progress reports.
pub(crate) const CHUNK: usize = 4096;

/// What to vary and how much.
#[derive(Debug, Clone, PartialEq)]
pub struct SpreadConfig {
    /// Number of samples.
    pub samples: usize,
    /// Seed.
    pub seed: u64,
    /// Resistor tolerance (fraction); `None` = the design's.
    pub resistor_tolerance: Option<f64>,
    /// How many standard deviations a tolerance stands for.
    pub sigmas: f64,
    /// Zener voltage tolerance (fraction).
    pub zener_tolerance: f64,
    /// Capacitor tolerance (fraction).
    pub capacitor_tolerance: f64,
    /// Supply setting accuracy (fraction); `None` = the design's `supply.quality`, else the default.
    pub supply_setting: Option<f64>,
    /// Supply drift bound (fraction); `None` = the design's `supply.quality`, else none.
    pub supply_drift: Option<f64>,
    /// Standard deviation of ln(tube gain).
    pub tube_gain_sigma: f64,
    /// Standard deviation of the exponent k.
    pub exponent_sigma: f64,
    /// Charge per anode pulse for the droop figures, coulombs.
    pub pulse_charge: Option<f64>,
    /// Yield: largest |DC deviation| at the operating point.
    pub max_deviation: Option<f64>,
    /// Yield: gain window around the target, fraction.
    pub gain_window: Option<f64>,
    /// Target gain (default: the nominal small-signal gain).
    pub target_gain: Option<f64>,
    /// Yield: largest droop per pulse.
    pub max_droop: Option<f64>,
    /// Largest supply the user can set, volts (default the tube's maximum).
    pub supply_max_volts: Option<f64>,
    /// Samples on which the linearity curve is traced.
    pub linearity_samples: usize,
}

impl Default for SpreadConfig {
    fn default() -> Self {
        SpreadConfig {
            samples: 100_000,
            seed: 7,
            resistor_tolerance: None,
            sigmas: 3.0,
            zener_tolerance: DEFAULT_ZENER_TOLERANCE,
            capacitor_tolerance: DEFAULT_CAPACITOR_TOLERANCE,
            supply_setting: None,
            supply_drift: None,
            tube_gain_sigma: DEFAULT_TUBE_GAIN_SIGMA,
            exponent_sigma: DEFAULT_EXPONENT_SIGMA,
            pulse_charge: None,
            max_deviation: None,
            gain_window: None,
            target_gain: None,
            max_droop: None,
            supply_max_volts: None,
            linearity_samples: 200,
        }
    }
}

impl SpreadConfig {
    /// Only resistor tolerances vary (for checks against first-order propagation).
    pub fn resistors_only(samples: usize, seed: u64) -> SpreadConfig {
        SpreadConfig {
            samples,
            seed,
            zener_tolerance: 0.0,
            capacitor_tolerance: 0.0,
            supply_setting: Some(0.0),
            supply_drift: Some(0.0),
            tube_gain_sigma: 0.0,
            exponent_sigma: 0.0,
            linearity_samples: 0,
            ..SpreadConfig::default()
        }
    }
}

/// Percentiles 1 / 50 / 99 %.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Percentiles {
    /// 1 %.
    pub p1: f64,
    /// 50 %.
    pub p50: f64,
    /// 99 %.
    pub p99: f64,
}

/// One gap's voltage spread against its limit.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct GapSpread {
    /// 1-based gap number.
    pub number: usize,
    /// "K–D1" etc.
    pub label: String,
    /// Voltage at the operating point, volts.
    pub volts: Percentiles,
    /// Its limit: the lower of the part's rated voltage and the tube's gap limit, volts.
    pub limit_volts: Option<f64>,
    /// Fraction of samples over the limit.
    pub over_fraction: f64,
    /// Dissipation, watts.
    pub watts: Percentiles,
    /// Power rating of the gap (all its parts), watts.
    pub power_rating: Option<f64>,
}

/// One parameter's effect on the gain.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Influence {
    /// What varies.
    pub parameter: String,
    /// Its standard deviation in its own terms (fraction, or absolute for k).
    pub sigma: f64,
    /// First-order standard deviation of ln G it causes, `|∂lnG/∂p| σ_p`.
    pub first_order: f64,
    /// Share of the first-order variance of ln G.
    pub variance_share: f64,
    /// Correlation of its draw with ln G in the Monte Carlo.
    pub correlation: f64,
}

/// One yield figure.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct YieldFigure {
    /// What is required.
    pub requirement: String,
    /// Fraction of samples that meet it.
    pub fraction: f64,
}

/// A histogram of one output over the samples.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Histogram {
    /// Stable name (for figure files).
    pub name: String,
    /// What is counted.
    pub label: String,
    /// Unit of the values, if any.
    pub unit: Option<String>,
    /// Logarithmic bins?
    pub log: bool,
    /// Bin centres (geometric centres for log bins).
    pub centres: Vec<f64>,
    /// Fraction of the samples in each bin.
    pub fractions: Vec<f64>,
}

/// Number of histogram bins.
pub(crate) const BINS: usize = 60;

/// Histogram of `values` between their 0.1 % and 99.9 % points (the tails are left out of the
/// picture, not of the statistics).
pub(crate) fn histogram(
    name: &str,
    label: &str,
    unit: Option<&str>,
    log: bool,
    values: &[f64],
) -> Histogram {
    let mut v: Vec<f64> = values
        .iter()
        .copied()
        .filter(|x| x.is_finite() && (!log || *x > 0.0))
        .collect();
    v.sort_by(f64::total_cmp);
    let empty = Histogram {
        name: name.to_string(),
        label: label.to_string(),
        unit: unit.map(str::to_string),
        log,
        centres: Vec::new(),
        fractions: Vec::new(),
    };
    if v.len() < 2 {
        return empty;
    }
    let at = |p: f64| v[((v.len() - 1) as f64 * p).round() as usize];
    let t = |x: f64| if log { x.ln() } else { x };
    let (lo, hi) = (t(at(0.001)), t(at(0.999)));
    if !hi.is_finite() || !lo.is_finite() || hi <= lo {
        return empty;
    }
    let w = (hi - lo) / BINS as f64;
    let mut counts = vec![0usize; BINS];
    for x in &v {
        let b = ((t(*x) - lo) / w).floor();
        if b >= 0.0 && (b as usize) < BINS {
            counts[b as usize] += 1;
        }
    }
    let n = v.len() as f64;
    Histogram {
        centres: (0..BINS)
            .map(|i| {
                let c = lo + (i as f64 + 0.5) * w;
                if log { c.exp() } else { c }
            })
            .collect(),
        fractions: counts.iter().map(|c| *c as f64 / n).collect(),
        ..empty
    }
}

/// The result.
#[derive(Debug, Clone, PartialEq)]
pub struct Spread {
    /// The configuration used (with the design's defaults filled in).
    pub config: SpreadConfig,
    /// Effective resistor tolerance, supply setting and drift.
    pub resistor_tolerance: f64,
    /// Supply setting accuracy used.
    pub supply_setting: f64,
    /// Supply drift bound used.
    pub supply_drift: f64,
    /// Samples whose operating point could not be solved.
    pub failed: usize,
    /// Small-signal gain.
    pub small_signal_gain: Percentiles,
    /// Gain at the operating point.
    pub gain: Percentiles,
    /// Relative standard deviation of the small-signal gain (Monte Carlo).
    pub gain_rel_sd: f64,
    /// First-order relative standard deviation of the gain, `sqrt(Σ (∂lnG/∂p)² σ_p²)`.
    pub gain_rel_sd_first_order: f64,
    /// DC deviation at the operating point.
    pub deviation: Percentiles,
    /// Per gap.
    pub gaps: Vec<GapSpread>,
    /// Base dissipation, watts.
    pub dissipation: Percentiles,
    /// Supply current, amperes.
    pub supply_current: Percentiles,
    /// Supply that brings each sample to the target gain, volts.
    pub supply_for_target: Percentiles,
    /// Droop per pulse, per decoupled gap (gap number, percentiles).
    pub droop: Vec<(usize, Percentiles)>,
    /// Anode current where the deviation reaches −1 % (on the linearity subsample), and the
    /// fraction of that subsample where it is reached.
    pub minus_1pct: Option<(Percentiles, f64)>,
    /// … +1 %.
    pub plus_1pct: Option<(Percentiles, f64)>,
    /// Size of the linearity subsample.
    pub linearity_samples: usize,
    /// Parameters ranked by first-order effect on the gain.
    pub influences: Vec<Influence>,
    /// Yield figures; the last is all of them together.
    pub yields: Vec<YieldFigure>,
    /// Histograms: small-signal gain, DC deviation at the operating point, supply for the target.
    pub histograms: Vec<Histogram>,
    /// The nominal analysis.
    pub nominal: Analysis,
}

/// Percentiles of a sample (linear interpolation between order statistics).
pub(crate) fn percentiles(values: &mut [f64]) -> Percentiles {
    values.sort_by(f64::total_cmp);
    let q = |p: f64| -> f64 {
        if values.is_empty() {
            return 0.0;
        }
        let x = p * (values.len() - 1) as f64;
        let i = x.floor() as usize;
        let j = (i + 1).min(values.len() - 1);
        values[i] + (values[j] - values[i]) * (x - i as f64)
    };
    Percentiles {
        p1: q(0.01),
        p50: q(0.5),
        p99: q(0.99),
    }
}

/// Run the Monte Carlo. `progress` is called with the number of samples done after each chunk.
pub fn run(
    design: &Design,
    cfg: &SpreadConfig,
    progress: &(dyn Fn(usize) + Sync),
) -> Result<Spread, AnalysisError> {
    let nominal = analysis::analyse(design)?;
    let eff = effective(design, cfg);
    let (rtol, setting, drift) = eff;
    let model = Model {
        net: &nominal.network,
        ref_ln_sum: reference_ln_sum(design),
        string: TapString::of(design, &nominal.network),
    };
    let sampler = Sampler::new(design, cfg, eff, &model, &nominal);
    let mut outcomes = sampler.all(progress);
    let lin_n = sampler.linearity(&mut outcomes);
    let target = sampler.target;
    let limits = gap_limits(design);

    let ok: Vec<&SampleOp> = outcomes.iter().filter_map(|o| o.op.as_ref()).collect();
    let failed = outcomes.len() - ok.len();
    let col = |f: &dyn Fn(&SampleOp) -> f64| -> Percentiles {
        let mut v: Vec<f64> = ok.iter().map(|o| f(o)).filter(|x| x.is_finite()).collect();
        percentiles(&mut v)
    };
    let histograms = histograms(&outcomes, &ok);
    let mut g0s: Vec<f64> = outcomes.iter().map(|o| o.g0).collect();
    let ln_g0: Vec<f64> = g0s.iter().map(|g| g.ln()).collect();
    let mean_g0 = g0s.iter().sum::<f64>() / g0s.len().max(1) as f64;
    let var_g0 =
        g0s.iter().map(|g| (g - mean_g0).powi(2)).sum::<f64>() / (g0s.len().max(2) - 1) as f64;
    let gain_rel_sd = var_g0.sqrt() / mean_g0;
    let small_signal_gain = percentiles(&mut g0s);
    let gaps = gap_spreads(design, &limits, &outcomes, &ok);
    let droop: Vec<(usize, Percentiles)> = sampler
        .caps
        .iter()
        .enumerate()
        .filter(|_| cfg.pulse_charge.is_some())
        .map(|(k, (g, _, _))| {
            let mut v: Vec<f64> = outcomes.iter().map(|o| o.droop[k]).collect();
            (*g, percentiles(&mut v))
        })
        .collect();
    let (minus_1pct, plus_1pct) = linearity_stats(&outcomes, lin_n);
    let mut vt: Vec<f64> = outcomes
        .iter()
        .map(|o| o.v_target)
        .filter(|v| v.is_finite())
        .collect();
    let supply_for_target = percentiles(&mut vt);
    let (influences, gain_rel_sd_first_order) =
        propagate::influences(design, cfg, eff, &model, &outcomes, &ln_g0);
    let yields = yields::yields(design, cfg, &limits, target, &outcomes);

    let mut resolved = cfg.clone();
    resolved.resistor_tolerance = Some(rtol);
    resolved.supply_setting = Some(setting);
    resolved.supply_drift = Some(drift);
    Ok(Spread {
        config: resolved,
        resistor_tolerance: rtol,
        supply_setting: setting,
        supply_drift: drift,
        failed,
        small_signal_gain,
        gain: col(&|o| o.gain),
        gain_rel_sd,
        gain_rel_sd_first_order,
        deviation: col(&|o| o.dev),
        gaps,
        dissipation: col(&|o| o.dissipation),
        supply_current: col(&|o| o.supply_amps),
        supply_for_target,
        droop,
        minus_1pct,
        plus_1pct,
        linearity_samples: lin_n,
        influences,
        yields,
        histograms,
        nominal,
    })
}

/// Histograms of the small-signal gain, the DC deviation and the supply for the target.
fn histograms(outcomes: &[Outcome], ok: &[&SampleOp]) -> Vec<Histogram> {
    vec![
        histogram(
            "spread-gain",
            "small-signal gain",
            None,
            true,
            &outcomes.iter().map(|o| o.g0).collect::<Vec<_>>(),
        ),
        histogram(
            "spread-deviation",
            "DC gain deviation at the operating point",
            Some("%"),
            false,
            &ok.iter().map(|o| o.dev * 100.0).collect::<Vec<_>>(),
        ),
        histogram(
            "spread-supply",
            "supply for the target gain",
            Some("V"),
            false,
            &outcomes.iter().map(|o| o.v_target).collect::<Vec<_>>(),
        ),
    ]
}

/// Each gap's voltage and dissipation over the solved samples, against its limits.
fn gap_spreads(
    design: &Design,
    limits: &GapLimits,
    outcomes: &[Outcome],
    ok: &[&SampleOp],
) -> Vec<GapSpread> {
    let col = |f: &dyn Fn(&SampleOp) -> f64| -> Percentiles {
        let mut v: Vec<f64> = ok.iter().map(|o| f(o)).filter(|x| x.is_finite()).collect();
        percentiles(&mut v)
    };
    (0..=design.tube.stages)
        .map(|j| {
            let (lim, power) = limits[j];
            let over = ok
                .iter()
                .filter(|o| lim.is_some_and(|l| o.gap_volts[j] > l))
                .count();
            GapSpread {
                number: j + 1,
                label: design.gap_label(j),
                volts: col(&|o| o.gap_volts[j]),
                limit_volts: lim,
                over_fraction: over as f64 / outcomes.len().max(1) as f64,
                watts: col(&|o| o.gap_watts[j]),
                power_rating: power,
            }
        })
        .collect()
}

/// The −1 % and +1 % limits over the first `lin_n` samples, with the fraction that reached them.
fn linearity_stats(outcomes: &[Outcome], lin_n: usize) -> (LinearityStat, LinearityStat) {
    let stats = |pick: &dyn Fn(&LinearityLimits) -> Option<f64>| -> Option<(Percentiles, f64)> {
        if lin_n == 0 {
            return None;
        }
        let mut v: Vec<f64> = outcomes[..lin_n]
            .iter()
            .filter_map(|o| o.lin.as_ref().and_then(pick))
            .collect();
        if v.is_empty() {
            return None;
        }
        let frac = v.len() as f64 / lin_n as f64;
        Some((percentiles(&mut v), frac))
    };
    (stats(&|l| l.0), stats(&|l| l.1))
}

/// Percentiles of a linearity limit and the fraction of samples that reached it.
type LinearityStat = Option<(Percentiles, f64)>;
