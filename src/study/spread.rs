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

use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;

use crate::analysis::{self, Analysis, AnalysisError, rated_voltage};
use crate::design::{CapStyle, Design, Element};
use crate::solve::network::{Network, OperatingPoint, Part, Workspace};
use uom::si::capacitance::farad;
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

/// Default spread of ln(gain) between tubes of one type (from memory: a factor of about 2 at 2 σ).
pub const DEFAULT_TUBE_GAIN_SIGMA: f64 = 0.35;
/// Default standard deviation of the exponent k (from memory: k is quoted 0.7–0.8).
pub const DEFAULT_EXPONENT_SIGMA: f64 = 0.02;
/// Default capacitor tolerance (±10 %, common for film and ceramic parts; common practice).
pub const DEFAULT_CAPACITOR_TOLERANCE: f64 = 0.10;
/// Default Zener tolerance (±5 %, common practice).
pub const DEFAULT_ZENER_TOLERANCE: f64 = 0.05;
/// Default supply setting accuracy when the design gives none (±0.5 %, from memory for a
/// front-panel setting).
pub const DEFAULT_SUPPLY_SETTING: f64 = 0.005;
/// Samples run between two progress reports.
pub const CHUNK: usize = 4096;

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
pub const BINS: usize = 60;

/// Histogram of `values` between their 0.1 % and 99.9 % points (the tails are left out of the
/// picture, not of the statistics).
pub fn histogram(
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

/// Multiplicative perturbations of the nominal network.
#[derive(Debug, Clone, PartialEq)]
struct Draw {
    /// Per gap: resistor (or Zener voltage) factor.
    parts: Vec<f64>,
    /// Supply factor.
    supply: f64,
    /// Shift of ln(gain at the calibration point).
    ln_gain: f64,
    /// Shift of k.
    dk: f64,
    /// Capacitor factors, in design order.
    caps: Vec<f64>,
    /// Factors of the followers' tap-string resistors, cathode end first (empty without
    /// followers).
    string: Vec<f64>,
    /// The standard-normal (or uniform) draws, for the correlations: parts…, setting, drift,
    /// tube gain, exponent, then the string's resistors.
    z: Vec<f64>,
}

/// The followers' tap string as built from the nominal design.
#[derive(Debug, Clone, PartialEq)]
struct TapString {
    /// Each resistor of the string as a fraction of the whole, cathode end first (one more
    /// than the followers).
    shares: Vec<f64>,
    /// The followers' drop between tap and dynode, volts.
    drop: f64,
}

impl TapString {
    /// The nominal string of a base with followers, `None` without. A tap lies one drop below
    /// the potential its follower holds (docs/physics.md §14); a tap that would fall below the
    /// cathode, or below the tap before it, is taken at it (a resistor of zero length).
    fn of(design: &Design, net: &Network) -> Option<TapString> {
        let f = design.followers.as_ref()?;
        let drop = f.drop.get::<volt>();
        let mut shares = Vec::with_capacity(net.followers.len() + 1);
        let mut below = 0.0;
        for fl in &net.followers {
            let tap = (fl.fraction - drop / net.supply).clamp(below, 1.0);
            shares.push(tap - below);
            below = tap;
        }
        shares.push(1.0 - below);
        Some(TapString { shares, drop })
    }
}

struct Model<'a> {
    net: &'a Network,
    /// Σ ln(v_ref_i) over the multiplying gaps at the calibration point.
    ref_ln_sum: f64,
    /// The followers' tap string, if the base has followers.
    string: Option<TapString>,
}

impl Model<'_> {
    fn network(&self, d: &Draw) -> Network {
        let mut net = self.net.clone();
        for (p, f) in net.parts.iter_mut().zip(&d.parts) {
            *p = match *p {
                Part::Resistor(g) => Part::Resistor(g / f),
                Part::Zener(v, r) => Part::Zener(v * f, r),
            };
        }
        net.supply *= d.supply;
        if let Some(st) = &self.string {
            // Drawn string: each tap at V Σ_{i≤j} R_i / Σ R, each dynode one drop above it.
            let drawn: Vec<f64> = st
                .shares
                .iter()
                .zip(d.string.iter().chain(std::iter::repeat(&1.0)))
                .map(|(s, f)| s * f)
                .collect();
            let total: f64 = drawn.iter().sum();
            let mut tap = 0.0;
            for (fl, r) in net.followers.iter_mut().zip(&drawn) {
                tap += r / total;
                fl.fraction = tap + st.drop / net.supply;
            }
            net.string_resistance *= total;
        }
        let n = net.tube.stages as f64;
        let t = &mut net.tube;
        if d.dk != 0.0 {
            // Keep the gain at the calibration point: n ln a' + k' S = n ln a + k S.
            let k2 = t.k + d.dk;
            t.a = (t.a.ln() + (t.k - k2) * self.ref_ln_sum / n).exp();
            t.k = k2;
        }
        if d.ln_gain != 0.0 {
            t.a *= (d.ln_gain / n).exp();
        }
        net
    }
}

/// Reference gap voltages of the calibration: the reference ratio at the reference voltage (or at
/// the geometric mean voltage of a gain table).
fn reference_ln_sum(design: &Design) -> f64 {
    use crate::design::GainSpec;
    let t = &design.tube;
    let v = match &t.gain {
        GainSpec::Reference { volts, .. } => volts.get::<volt>(),
        GainSpec::Table(p) => {
            (p.iter().map(|(v, _)| v.get::<volt>().ln()).sum::<f64>() / p.len() as f64).exp()
        }
    };
    let total: f64 = t.reference_ratio.iter().sum();
    t.reference_ratio[..t.stages]
        .iter()
        .map(|r| (v * r / total).ln())
        .sum()
}

/// The −1 % and +1 % crossings of one sample's linearity curve, amperes.
type LinearityLimits = (Option<f64>, Option<f64>);

/// A yield requirement: its wording and the test on one sample.
type YieldCheck<'a> = (String, Box<dyn Fn(&Outcome) -> bool + 'a>);

/// Per-sample outcome.
#[derive(Debug, Clone)]
struct Outcome {
    z: Vec<f64>,
    g0: f64,
    op: Option<SampleOp>,
    v_target: f64,
    droop: Vec<f64>,
    lin: Option<(Option<f64>, Option<f64>)>,
}

#[derive(Debug, Clone)]
struct SampleOp {
    gain: f64,
    dev: f64,
    gap_volts: Vec<f64>,
    gap_watts: Vec<f64>,
    dissipation: f64,
    supply_amps: f64,
}

/// Effective (resistor tolerance, supply setting, supply drift) after the design's defaults.
fn effective(design: &Design, cfg: &SpreadConfig) -> (f64, f64, f64) {
    let q = design.supply_quality.unwrap_or_default();
    (
        cfg.resistor_tolerance.unwrap_or(design.resistor_tolerance),
        cfg.supply_setting
            .or(q.setting_accuracy)
            .unwrap_or(DEFAULT_SUPPLY_SETTING),
        cfg.supply_drift.or(q.drift).unwrap_or(0.0),
    )
}

fn draw(
    index: usize,
    seed: u64,
    design: &Design,
    cfg: &SpreadConfig,
    eff: (f64, f64, f64),
) -> Draw {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(index as u64);
    let (rtol, setting, drift) = eff;
    let s = cfg.sigmas;
    let mut z = Vec::with_capacity(design.elements.len() + 4);
    let normal = |rng: &mut ChaCha8Rng| -> f64 { StandardNormal.sample(rng) };
    let parts: Vec<f64> = design
        .elements
        .iter()
        .map(|e| {
            let zi = normal(&mut rng);
            z.push(zi);
            let tol = match e {
                Element::Resistor(_) => rtol,
                Element::Zener(..) => cfg.zener_tolerance,
            };
            (1.0 + tol / s * zi).max(0.05)
        })
        .collect();
    let zs = normal(&mut rng);
    let u: f64 = 2.0 * rng.random::<f64>() - 1.0;
    let zg = normal(&mut rng);
    let zk = normal(&mut rng);
    z.extend([zs, u, zg, zk]);
    let caps = design
        .decoupling
        .iter()
        .map(|_| (1.0 + cfg.capacitor_tolerance / s * normal(&mut rng)).max(0.05))
        .collect();
    // The tap string: one resistor more than the followers, with the resistors' tolerance.
    let string = design.followers.as_ref().map_or(0, |f| f.hold.len() + 1);
    let string = (0..string)
        .map(|_| {
            let zi = normal(&mut rng);
            z.push(zi);
            (1.0 + rtol / s * zi).max(0.05)
        })
        .collect();
    Draw {
        parts,
        supply: (1.0 + setting / s * zs) * (1.0 + drift * u),
        ln_gain: cfg.tube_gain_sigma * zg,
        dk: cfg.exponent_sigma * zk,
        caps,
        string,
        z,
    }
}

/// Solve a perturbed network at anode current `ia`, warm-started from the nominal point.
///
/// The start is this sample's no-current base (`w`, [`Network::unlit_volts`]) plus the nominal
/// point's shift from its own no-current base (the tube currents move the potentials by about
/// the same amounts), which saves a Newton step over starting from the nominal point itself.
fn solve_at(
    net: &Network,
    ia: f64,
    (g0, w): (f64, &[f64]),
    nominal: &OperatingPoint,
    nominal_quiescent: &[f64],
    nominal_dev: f64,
    ws: &mut Workspace,
) -> Option<OperatingPoint> {
    let mut ik = ia / (g0 * (1.0 + nominal_dev));
    let mut start = nominal.clone();
    let mut v = 0.0;
    for (j, p) in start.potentials.iter_mut().enumerate() {
        if j < w.len() - 1 {
            v += w[j];
            *p = v + (nominal.potentials[j] - nominal_quiescent[j]);
        }
    }
    let mut op = net.solve_raw(ik, Some(&start), ws).ok()?;
    // Within 1e-4 of the anode current the deviation is off by under 1e-6 (its slope in ln I is
    // below 0.01 at any usable operating point): good enough, and one solve instead of three.
    for _ in 0..4 {
        let r = ia / op.anode_amps();
        if (r - 1.0).abs() < 1e-4 {
            return Some(op);
        }
        ik *= r;
        op = net.solve_raw(ik, Some(&op), ws).ok()?;
    }
    if (ia / op.anode_amps() - 1.0).abs() < 1e-6 {
        Some(op)
    } else {
        net.solve_anode_raw(ia, ws).ok()
    }
}

/// d ln G0 / d ln Vs of the small-signal gain, analytically from the no-current divider:
/// `Σ_j (∂δ_j/∂u_acc · r_acc + ∂δ_j/∂u_coll · r_coll) / (δ_j R_total) · Vs` over the dynodes
/// (r the element's resistance or a Zener's dynamic resistance). Equals
/// [`Network::gain_sensitivity`] without its two re-solves.
fn sensitivity(net: &Network, qv: &[f64]) -> f64 {
    let r: Vec<f64> = net
        .parts
        .iter()
        .map(|p| match *p {
            Part::Resistor(g) => 1.0 / g,
            Part::Zener(_, rz) => rz,
        })
        .collect();
    let total: f64 = r.iter().sum();
    // The low-field collection of each gap, d ln c / du = (e / V_c) / (1 − e), e = exp(−u/V_c).
    let knee = net.tube.knee;
    let passed: f64 = (0..=net.tube.stages)
        .map(|i| {
            let c = crate::model::tube::collected(qv[i], knee);
            (1.0 - c) / knee / c * r[i] / total * net.supply
        })
        .sum();
    passed
        + (1..=net.tube.stages)
            .map(|j| {
                let (d, d_acc, d_coll) = net.tube.delta(qv[j - 1], qv[j]);
                (d_acc * r[j - 1] + d_coll * r[j]) / d / total * net.supply
            })
            .sum::<f64>()
}

/// Percentiles of a sample (linear interpolation between order statistics).
pub fn percentiles(values: &mut [f64]) -> Percentiles {
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

fn correlation(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len() as f64;
    if x.len() < 2 {
        return 0.0;
    }
    let mx = x.iter().sum::<f64>() / n;
    let my = y.iter().sum::<f64>() / n;
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        sxy += (a - mx) * (b - my);
        sxx += (a - mx).powi(2);
        syy += (b - my).powi(2);
    }
    if sxx <= 0.0 || syy <= 0.0 {
        0.0
    } else {
        sxy / (sxx * syy).sqrt()
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
    let n = design.tube.stages;
    let ia = nominal.op.anode_amps();
    let nominal_dev = nominal.op.gain() / nominal.small_signal_gain - 1.0;
    let target = cfg.target_gain.unwrap_or(nominal.small_signal_gain);
    let p_rating = design.resistor_power.get::<watt>();
    let wv = design.resistor_working_voltage.get::<volt>();
    let max_gap = design.tube.max_gap.map(|v| v.get::<volt>());
    // Limits per gap.
    let limits: Vec<(Option<f64>, Option<f64>)> = (0..=n)
        .map(|j| {
            let m = design.series_parts.get(j).copied().unwrap_or(1).max(1) as f64;
            let (rated, power) = match design.elements[j] {
                Element::Resistor(r) => (
                    Some(m * rated_voltage(p_rating, r.get::<ohm>() / m, wv)),
                    Some(m * p_rating),
                ),
                Element::Zener(..) => (None, None),
            };
            let lim = match (rated, max_gap) {
                (Some(a), Some(b)) => Some(a.min(b)),
                (a, b) => a.or(b),
            };
            (lim, power)
        })
        .collect();
    // Decoupling: gap volts each capacitor sees and the charge it gives (last gap ≈ Q, the one
    // before Q/δ_n, …; docs/physics.md §5).
    let caps: Vec<(usize, f64, f64)> = design
        .decoupling
        .iter()
        .filter_map(|c| match c.style {
            CapStyle::Across(g) => Some((g, c.value.get::<farad>(), 0.0)),
            CapStyle::ToReturn(_) => None,
        })
        .collect();
    let cap_index: Vec<usize> = design
        .decoupling
        .iter()
        .enumerate()
        .filter(|(_, c)| matches!(c.style, CapStyle::Across(_)))
        .map(|(i, _)| i)
        .collect();
    let current_limit = design.current_limit.map(|i| i.get::<ampere>());

    // No-current electrode potentials of the nominal divider (D1..Dn; the anode is left as solved).
    let nominal_potentials: Vec<f64> = {
        let (_, w) = nominal.network.quiescent();
        let mut v = 0.0;
        let mut p: Vec<f64> = w[..n]
            .iter()
            .map(|x| {
                v += x;
                v
            })
            .collect();
        p.push(nominal.op.potentials[n]);
        p
    };
    let sample = |i: usize, ws: &mut Workspace| -> Outcome {
        let d = draw(i, cfg.seed, design, cfg, eff);
        let net = model.network(&d);
        // With followers the no-light potentials are the base's with the drawn holds, a solve
        // of its own; should it fail the sample counts as failed (and its gain is the divider's).
        let unlit = net.unlit_volts();
        let qv = unlit.clone().unwrap_or_else(|_| net.quiescent().1);
        let g0 = net.tube.gain_for_gaps(&qv);
        // d ln G / d ln V: analytic for the divider alone; with followers (their holds scale
        // with the supply, not with the divider's resistors) by central difference.
        let sens = if net.followers.is_empty() {
            sensitivity(&net, &qv)
        } else {
            net.gain_sensitivity()
        };
        let v_target = net.supply * (target / g0).powf(1.0 / sens);
        let op = unlit.ok().and_then(|w| {
            solve_at(
                &net,
                ia,
                (g0, &w),
                &nominal.op,
                &nominal_potentials,
                nominal_dev,
                ws,
            )
        });
        let op = op.map(|op| {
            let gap_watts: Vec<f64> = op
                .element_volts
                .iter()
                .zip(&op.element_amps)
                .map(|(v, a)| v * a)
                .collect();
            // Each follower dissipates |i|·V (its dynode's potential when sinking, the rail less
            // it when sourcing, as in crate::budget::active), the string V²/R.
            let followers: f64 = net
                .followers
                .iter()
                .zip(&op.follower_amps)
                .map(|(f, &i)| {
                    let v = op.potentials[f.dynode - 1];
                    i.abs() * if i >= 0.0 { v } else { op.rail_volts - v }
                })
                .sum::<f64>()
                + op.string_amps * op.rail_volts;
            SampleOp {
                gain: op.gain(),
                dev: op.gain() / g0 - 1.0,
                dissipation: gap_watts.iter().sum::<f64>()
                    + followers
                    + op.anode_amps().powi(2) * net.anode_resistance,
                supply_amps: op.supply_amps(),
                gap_volts: op.element_volts.clone(),
                gap_watts,
            }
        });
        let droop = match cfg.pulse_charge {
            None => Vec::new(),
            Some(q) => caps
                .iter()
                .zip(&cap_index)
                .map(|((g, c, _), ci)| {
                    // Charge given by gap g (1-based): Q divided by the gains of the dynodes after it.
                    // Gap g (1-based) gives Q over the gains of the dynodes after it: the
                    // dynodes fed by gap indices g-1 .. n-1.
                    let mut qi = q;
                    for i in *g - 1..n {
                        qi /= net.tube.delta(qv[i], qv[i + 1]).0.max(1.0);
                    }
                    qi / (c * d.caps[*ci] * qv[*g - 1])
                })
                .collect(),
        };
        Outcome {
            z: d.z,
            g0,
            op,
            v_target,
            droop,
            lin: None,
        }
    };

    let mut outcomes: Vec<Outcome> = Vec::with_capacity(cfg.samples);
    let mut start = 0;
    while start < cfg.samples {
        let end = (start + CHUNK).min(cfg.samples);
        let chunk: Vec<Outcome> = (start..end)
            .into_par_iter()
            .map_init(Workspace::default, |ws, i| sample(i, ws))
            .collect();
        outcomes.extend(chunk);
        start = end;
        progress(start);
    }
    // Linearity on the first samples.
    let lin_n = cfg.linearity_samples.min(cfg.samples);
    let lin: Vec<(Option<f64>, Option<f64>)> = (0..lin_n)
        .into_par_iter()
        .map_init(Workspace::default, |ws, i| {
            let d = draw(i, cfg.seed, design, cfg, eff);
            let net = model.network(&d);
            (
                crate::solve::linearity::crossing(&net, -0.01, false, ws),
                crate::solve::linearity::crossing(&net, 0.01, false, ws),
            )
        })
        .collect();
    for (o, l) in outcomes.iter_mut().zip(lin) {
        o.lin = Some(l);
    }

    // Statistics.
    let ok: Vec<&SampleOp> = outcomes.iter().filter_map(|o| o.op.as_ref()).collect();
    let failed = outcomes.len() - ok.len();
    let col = |f: &dyn Fn(&SampleOp) -> f64| -> Percentiles {
        let mut v: Vec<f64> = ok.iter().map(|o| f(o)).filter(|x| x.is_finite()).collect();
        percentiles(&mut v)
    };
    let histograms = vec![
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
    ];
    let mut g0s: Vec<f64> = outcomes.iter().map(|o| o.g0).collect();
    let ln_g0: Vec<f64> = g0s.iter().map(|g| g.ln()).collect();
    let mean_g0 = g0s.iter().sum::<f64>() / g0s.len().max(1) as f64;
    let var_g0 =
        g0s.iter().map(|g| (g - mean_g0).powi(2)).sum::<f64>() / (g0s.len().max(2) - 1) as f64;
    let gain_rel_sd = var_g0.sqrt() / mean_g0;
    let small_signal_gain = percentiles(&mut g0s);
    let gaps: Vec<GapSpread> = (0..=n)
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
        .collect();
    let droop: Vec<(usize, Percentiles)> = caps
        .iter()
        .enumerate()
        .filter(|_| cfg.pulse_charge.is_some())
        .map(|(k, (g, _, _))| {
            let mut v: Vec<f64> = outcomes.iter().map(|o| o.droop[k]).collect();
            (*g, percentiles(&mut v))
        })
        .collect();
    let lin_stats = |pick: &dyn Fn(&LinearityLimits) -> Option<f64>| -> Option<(Percentiles, f64)> {
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
    let minus_1pct = lin_stats(&|l| l.0);
    let plus_1pct = lin_stats(&|l| l.1);
    let mut vt: Vec<f64> = outcomes
        .iter()
        .map(|o| o.v_target)
        .filter(|v| v.is_finite())
        .collect();
    let supply_for_target = percentiles(&mut vt);

    // First-order influences, by central differences with the core (relative step 1e-4).
    let base_draw = Draw {
        parts: vec![1.0; n + 1],
        supply: 1.0,
        ln_gain: 0.0,
        dk: 0.0,
        caps: vec![1.0; design.decoupling.len()],
        string: vec![1.0; model.string.as_ref().map_or(0, |s| s.shares.len())],
        z: Vec::new(),
    };
    let lng = |d: &Draw| model.network(d).small_signal_gain().ln();
    let h = 1e-4;
    let mut infl: Vec<(String, f64, f64, usize)> = Vec::new();
    for j in 0..=n {
        let mut up = base_draw.clone();
        up.parts[j] = 1.0 + h;
        let mut dn = base_draw.clone();
        dn.parts[j] = 1.0 - h;
        let deriv = (lng(&up) - lng(&dn)) / ((1.0 + h).ln() - (1.0 - h).ln());
        let tol = match design.elements[j] {
            Element::Resistor(_) => rtol,
            Element::Zener(..) => cfg.zener_tolerance,
        };
        let what = match design.elements[j] {
            Element::Resistor(_) => format!("resistor, gap {} ({})", j + 1, design.gap_label(j)),
            Element::Zener(..) => format!("Zener voltage, gap {} ({})", j + 1, design.gap_label(j)),
        };
        infl.push((what, tol / cfg.sigmas, deriv, j));
    }
    let sens = nominal.network.gain_sensitivity();
    infl.push(("supply setting".into(), setting / cfg.sigmas, sens, n + 1));
    infl.push((
        "supply drift (uniform)".into(),
        drift / 3f64.sqrt(),
        sens,
        n + 2,
    ));
    infl.push((
        "tube gain (log-normal)".into(),
        cfg.tube_gain_sigma,
        1.0,
        n + 3,
    ));
    let mut up = base_draw.clone();
    up.dk = h;
    let mut dn = base_draw.clone();
    dn.dk = -h;
    infl.push((
        "exponent k".into(),
        cfg.exponent_sigma,
        (lng(&up) - lng(&dn)) / (2.0 * h),
        n + 4,
    ));
    for j in 0..base_draw.string.len() {
        let mut up = base_draw.clone();
        up.string[j] = 1.0 + h;
        let mut dn = base_draw.clone();
        dn.string[j] = 1.0 - h;
        let deriv = (lng(&up) - lng(&dn)) / ((1.0 + h).ln() - (1.0 - h).ln());
        infl.push((
            format!("tap-string resistor {}", j + 1),
            rtol / cfg.sigmas,
            deriv,
            n + 5 + j,
        ));
    }
    let total_var: f64 = infl.iter().map(|(_, s, d, _)| (s * d).powi(2)).sum();
    let mut influences: Vec<Influence> = infl
        .into_iter()
        .map(|(parameter, sigma, deriv, zi)| {
            let zs: Vec<f64> = outcomes.iter().map(|o| o.z[zi]).collect();
            let fo = (sigma * deriv).abs();
            Influence {
                parameter,
                sigma,
                first_order: fo,
                variance_share: if total_var > 0.0 {
                    fo * fo / total_var
                } else {
                    0.0
                },
                correlation: if sigma > 0.0 {
                    correlation(&zs, &ln_g0)
                } else {
                    0.0
                },
            }
        })
        .collect();
    influences.sort_by(|a, b| b.first_order.total_cmp(&a.first_order));

    // Yield.
    let total = outcomes.len().max(1) as f64;
    let mut yields = Vec::new();
    let ratings_ok = |o: &Outcome| -> bool {
        o.op.as_ref().is_some_and(|s| {
            (0..=n).all(|j| {
                limits[j].0.is_none_or(|l| s.gap_volts[j] <= l)
                    && limits[j].1.is_none_or(|p| s.gap_watts[j] <= p)
            }) && current_limit.is_none_or(|l| s.supply_amps <= l)
        })
    };
    let vmax = cfg
        .supply_max_volts
        .unwrap_or(design.tube.max_supply.get::<volt>())
        .min(design.tube.max_supply.get::<volt>());
    let mut checks: Vec<YieldCheck<'_>> = vec![(
        "every gap within its voltage and power ratings and the supply within its current limit"
            .into(),
        Box::new(ratings_ok),
    )];
    checks.push((
        format!(
            "target gain {target:.3e} reachable with the supply at or below {:.0} V",
            vmax
        ),
        Box::new(move |o: &Outcome| o.v_target <= vmax),
    ));
    if let Some(m) = cfg.max_deviation {
        checks.push((
            format!("|DC deviation| at the operating point ≤ {:.2} %", m * 100.0),
            Box::new(move |o: &Outcome| o.op.as_ref().is_some_and(|s| s.dev.abs() <= m)),
        ));
    }
    if let Some(w) = cfg.gain_window {
        checks.push((
            format!(
                "small-signal gain within ±{:.1} % of {target:.3e} at the set supply",
                w * 100.0
            ),
            Box::new(move |o: &Outcome| (o.g0 / target - 1.0).abs() <= w),
        ));
    }
    if let (Some(m), Some(_)) = (cfg.max_droop, cfg.pulse_charge) {
        checks.push((
            format!(
                "droop per pulse ≤ {:.2} % on every decoupled gap",
                m * 100.0
            ),
            Box::new(move |o: &Outcome| o.droop.iter().all(|d| *d <= m)),
        ));
    }
    for (what, f) in &checks {
        let c = outcomes.iter().filter(|o| f(o)).count();
        yields.push(YieldFigure {
            requirement: what.clone(),
            fraction: c as f64 / total,
        });
    }
    let all = outcomes
        .iter()
        .filter(|o| checks.iter().all(|(_, f)| f(o)))
        .count();
    yields.push(YieldFigure {
        requirement: "all of the above".into(),
        fraction: all as f64 / total,
    });
    drop(checks);

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
        gain_rel_sd_first_order: total_var.sqrt(),
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
