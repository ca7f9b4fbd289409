//! Front ends: an amplifier between the base's signal path and the instrument
//! (docs/physics.md §16).
//!
//! Two kinds, each a checked description and a pass of the computed pulse through it:
//! - a fast **voltage amplifier**: gain, −3 dB bandwidth with a single-pole response (rise
//!   `ln 9 / 2π BW`) or a Gaussian one (impulse response a Gaussian of σ = √(ln 2)/(2π BW),
//!   rise 0.3396/BW), an input resistance and capacitance that are the far-end termination of
//!   the signal path, and an input noise density `e_n` that adds in quadrature over the band
//!   (`G e_n √ENBW`, ENBW = π/2·BW for a single pole, √(π/ln 2)/2·BW for a Gaussian);
//! - a **charge-sensitive preamplifier** with a CR–RC^n shaper: the current into its input
//!   (the far-end voltage over its input resistance, taken as resistive) charges `C_f`, which
//!   discharges through `R_f` (`τ_f = R_f C_f`); the shaper is one CR differentiator and `n`
//!   RC integrators of one time constant `τ`. For a step `Q/C_f` it peaks at `t = nτ` with
//!   `(Q/C_f) n^n e^(−n)/n!` (standard shaping theory); the tool does not use that formula for
//!   the pulse, it computes the pulse in time and a test checks the two.
//!
//! Method: the input is the computed waveform, linear between its samples; every first-order
//! section (`y' = (x − y)/τ`) is advanced by its exact solution for a linear input over the
//! step, written so that no large terms cancel; a CR section is the input minus its RC
//! low-pass. The shaper runs on the input's own samples joined with a uniform grid of τ/200
//! over the peak and its tail. The Gaussian response is the exact convolution of the
//! piecewise-linear input with the Gaussian (closed form per segment with the error
//! function).
//!
//! Noise of the preamplifier as an equivalent noise charge (textbook detector electronics,
//! from memory): `ENC² = F_v e_n² C_in² / τ + F_i i_n² τ` with the shaper's noise indices
//! `F_v = (I_n − I_(n+1)) / (2π A_n²)`, `F_i = I_(n+1) / (2π A_n²)`, `I_m = ∫₀^∞ (1+x²)^(−m) dx
//! = (π/2)(2m−3)!!/(2m−2)!!` and `A_n = n^n e^(−n)/n!`; for n = 1 both are e²/8 = 0.924 (the
//! CR–RC result quoted in detector-electronics texts, from memory). `i_n²` gathers the
//! feedback resistor's and the path's shunt resistors' `4kT/R` and a stated current noise.
//! 1/f noise is not counted.
//!
//! No IO; every figure is finite.

use crate::design::InstrumentResponse;
use crate::model::constants::{BOLTZMANN, ELEMENTARY_CHARGE};
use crate::solve::waveform::Waveform;

/// Input resistance assumed for a charge-sensitive preamplifier when none is given, ohms (its
/// input taken as a resistive 50 Ω that terminates the cable; a choice of this tool).
pub const TYPICAL_PREAMP_INPUT_OHMS: f64 = 50.0;
/// Input capacitance assumed for a preamplifier when none is given, farads (an input
/// transistor of a few pF, from memory).
pub const TYPICAL_PREAMP_INPUT_FARADS: f64 = 5e-12;
/// Series noise assumed for a preamplifier when none is given, V/√Hz (a low-noise input
/// transistor, from memory).
pub const TYPICAL_PREAMP_NOISE: f64 = 1e-9;

/// A fast voltage amplifier.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct VoltageAmplifier {
    /// Voltage gain.
    pub gain: f64,
    /// −3 dB bandwidth, Hz.
    pub bandwidth: f64,
    /// Single pole or Gaussian.
    pub response: InstrumentResponse,
    /// Input resistance (the far-end termination), ohms.
    pub input_resistance: f64,
    /// Input capacitance, farads.
    pub input_capacitance: f64,
    /// Input voltage noise density, V/√Hz.
    pub noise_density: f64,
}

/// A charge-sensitive preamplifier and its CR–RC^n shaper.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ChargePreamp {
    /// Feedback capacitance, farads.
    pub feedback_capacitance: f64,
    /// Feedback resistance, ohms.
    pub feedback_resistance: f64,
    /// Shaping time constant τ, seconds.
    pub shaping_time: f64,
    /// Number of RC integrators n.
    pub order: u32,
    /// Gain of the shaper.
    pub shaper_gain: f64,
    /// Input resistance (the far-end termination), ohms.
    pub input_resistance: f64,
    /// Input capacitance of the amplifier, farads.
    pub input_capacitance: f64,
    /// Series (input voltage) noise density, V/√Hz.
    pub noise_density: f64,
    /// Parallel noise current density besides the resistors', A/√Hz.
    pub noise_current: f64,
    /// Equivalent noise charge stated by the design, electrons rms (replaces the computed one).
    pub enc_electrons: Option<f64>,
}

/// The front end of a design.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum FrontEnd {
    /// A fast voltage amplifier.
    Voltage(VoltageAmplifier),
    /// A charge-sensitive preamplifier with a CR–RC^n shaper.
    Charge(ChargePreamp),
}

/// Noise at the front end's output, V rms.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FrontNoise {
    /// The amplifier's own (series noise, feedback resistor, stated current noise).
    pub amplifier: f64,
    /// The signal path's resistors (Johnson–Nyquist), through the front end.
    pub johnson: f64,
    /// Equivalent noise charge, electrons rms (preamplifier only).
    pub enc_electrons: Option<f64>,
}

impl FrontEnd {
    /// Key for JSON.
    pub fn kind(&self) -> &'static str {
        match self {
            FrontEnd::Voltage(_) => "voltage_amplifier",
            FrontEnd::Charge(_) => "charge_preamplifier",
        }
    }

    /// Input resistance and capacitance: the far-end termination they make.
    pub fn input(&self) -> (f64, f64) {
        match self {
            FrontEnd::Voltage(a) => (a.input_resistance, a.input_capacitance),
            FrontEnd::Charge(p) => (p.input_resistance, p.input_capacitance),
        }
    }

    /// The front end in words for the signal path line.
    pub fn describe(&self) -> String {
        use crate::units::format_eng as eng;
        match self {
            FrontEnd::Voltage(a) => format!(
                "voltage amplifier ×{} ({} {}, {} input, {}/√Hz)",
                crate::units::show_number(a.gain),
                eng(a.bandwidth, "Hz"),
                match a.response {
                    InstrumentResponse::SinglePole => "single pole",
                    InstrumentResponse::Gaussian => "Gaussian",
                },
                eng(a.input_resistance, "Ω"),
                eng(a.noise_density, "V")
            ),
            FrontEnd::Charge(p) => format!(
                "charge preamplifier ({} ∥ {} feedback, {} input) and CR–RC^{} shaper of τ = {}{}",
                eng(p.feedback_capacitance, "F"),
                eng(p.feedback_resistance, "Ω"),
                eng(p.input_resistance, "Ω"),
                p.order,
                eng(p.shaping_time, "s"),
                if p.shaper_gain == 1.0 {
                    String::new()
                } else {
                    format!(", gain {}", crate::units::show_number(p.shaper_gain))
                }
            ),
        }
    }

    /// The output for the voltage `w` at the front end's input.
    pub fn process(&self, w: &Waveform) -> Waveform {
        match self {
            FrontEnd::Voltage(a) => {
                let mut out = match a.response {
                    InstrumentResponse::SinglePole => {
                        let tau = 1.0 / (2.0 * std::f64::consts::PI * a.bandwidth);
                        let x = with_tail(w, 10.0 * tau, tau / 4.0);
                        Waveform {
                            v: low_pass(&x.t, &x.v, tau),
                            t: x.t,
                        }
                    }
                    InstrumentResponse::Gaussian => {
                        let sigma = gaussian_sigma(a.bandwidth);
                        // The output at samples at least σ/20 apart (finer adds nothing the
                        // Gaussian does not smooth away, and would make the convolution
                        // quadratic in their number); every input segment is integrated.
                        let x = with_tail(w, 6.0 * sigma, sigma / 4.0);
                        let at = thin(&x, sigma / 20.0).t;
                        Waveform {
                            v: gaussian_filter(&at, &x.t, &x.v, sigma),
                            t: at,
                        }
                    }
                };
                out.v.iter_mut().for_each(|v| *v *= a.gain);
                out
            }
            FrontEnd::Charge(p) => p.process(w),
        }
    }

    /// Output noise for a signal path whose shunt resistance at the input is `shunt` ohms
    /// (infinite when none) and whose capacitance there, the front end's input included, is
    /// `source_c` farads.
    pub fn noise(&self, shunt: f64, source_c: f64) -> FrontNoise {
        match self {
            FrontEnd::Voltage(a) => {
                let enbw = enbw(a.bandwidth, a.response);
                let johnson = if shunt.is_finite() {
                    a.gain
                        * crate::budget::signal::johnson_rms(
                            shunt,
                            source_c,
                            a.bandwidth,
                            a.response,
                        )
                } else {
                    0.0
                };
                FrontNoise {
                    amplifier: a.gain * a.noise_density * enbw.sqrt(),
                    johnson,
                    enc_electrons: None,
                }
            }
            FrontEnd::Charge(p) => {
                let c_in = source_c + p.feedback_capacitance;
                let kt4 = 4.0 * BOLTZMANN * crate::budget::signal::NOISE_TEMPERATURE;
                let amp_i2 = kt4 / p.feedback_resistance + p.noise_current.powi(2);
                let shunt_i2 = if shunt.is_finite() { kt4 / shunt } else { 0.0 };
                let (fv, fi) = noise_indices(p.order);
                let tau = p.shaping_time;
                let series = fv * (p.noise_density * c_in).powi(2) / tau;
                let enc_amp = (series + fi * amp_i2 * tau).sqrt();
                let enc_shunt = (fi * shunt_i2 * tau).sqrt();
                let enc_amp = p.enc_electrons.map_or(enc_amp, |e| e * ELEMENTARY_CHARGE);
                // Volts out per coulomb at the peak (the formula's factor; the pulse itself
                // is computed).
                let per_coulomb = peak_factor(p.order) * p.shaper_gain / p.feedback_capacitance;
                FrontNoise {
                    amplifier: enc_amp * per_coulomb,
                    johnson: enc_shunt * per_coulomb,
                    enc_electrons: Some(
                        (enc_amp * enc_amp + enc_shunt * enc_shunt).sqrt() / ELEMENTARY_CHARGE,
                    ),
                }
            }
        }
    }

    /// The 10–90 % rise the front end adds alone (single pole 0.3497/BW, Gaussian 0.3396/BW),
    /// seconds; `None` for a preamplifier (its shaper sets the pulse).
    pub fn own_rise(&self) -> Option<f64> {
        match self {
            FrontEnd::Voltage(a) => {
                Some(crate::budget::signal::rise_bandwidth(a.response).0 / a.bandwidth)
            }
            FrontEnd::Charge(_) => None,
        }
    }
}

impl ChargePreamp {
    /// The shaped output for the voltage `w` at the preamplifier's input.
    pub fn process(&self, w: &Waveform) -> Waveform {
        let tau = self.shaping_time;
        let tau_f = self.feedback_resistance * self.feedback_capacitance;
        let n = self.order as f64;
        // The preamplifier on the input's own samples: C_f dv/dt = i − v/R_f with
        // i = v_in/R_in, i.e. a low-pass of x = v_in R_f/R_in with τ_f = R_f C_f (exact for
        // the piecewise-linear input, however fine its steps).
        let k = self.feedback_resistance / self.input_resistance;
        let x: Vec<f64> = w.v.iter().map(|v| v * k).collect();
        let csa = Waveform {
            v: low_pass(&w.t, &x, tau_f),
            t: w.t.clone(),
        };
        let t_end = w.t.last().copied().unwrap_or(0.0);
        let y_end = csa.v.last().copied().unwrap_or(0.0);
        // The shaper needs steps of τ/200, not the input's: the preamplifier's output at
        // least that far apart, a uniform grid of τ/200 from where the input first reaches a
        // thousandth of its peak until (n + 10) τ after its peak, and a slow tail.
        let h = tau / 200.0;
        let f = w.measure();
        let top = w.v.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let start =
            w.t.iter()
                .zip(&w.v)
                .find(|(_, v)| v.abs() > 1e-3 * top)
                .map_or(0.0, |(t, _)| *t);
        let fine_end = f.t_peak + (n + 10.0) * tau;
        let mut t = thin(&csa, h).t;
        let steps = ((fine_end - start).max(0.0) / h).ceil() as usize;
        t.extend((0..=steps).map(|i| start + i as f64 * h));
        let tail_from = fine_end.max(t_end);
        t.extend((1..=16).map(|i| tail_from + i as f64 * tau / 4.0));
        t.sort_by(f64::total_cmp);
        t.dedup_by(|a, b| (*a - *b).abs() <= 1e-15 * b.abs().max(1e-30));
        // After the input ends the preamplifier only decays.
        let mut y: Vec<f64> = t
            .iter()
            .map(|&s| {
                if s <= t_end {
                    interp(&csa, s)
                } else {
                    y_end * (-(s - t_end) / tau_f).exp()
                }
            })
            .collect();
        // CR: the input minus its low-pass; then n RC integrators.
        let lp = low_pass(&t, &y, tau);
        y.iter_mut().zip(&lp).for_each(|(a, b)| *a -= b);
        for _ in 0..self.order {
            y = low_pass(&t, &y, tau);
        }
        y.iter_mut().for_each(|v| *v *= self.shaper_gain);
        Waveform { t, v: y }
    }
}

/// `n^n e^(−n) / n!`: the peak of a CR–RC^n shaper's response to a unit step (standard
/// shaping theory). Used for the noise's scale and printed beside the computed pulse.
pub fn peak_factor(n: u32) -> f64 {
    let n = n as f64;
    let ln_fact: f64 = (1..=n as u64).map(|k| (k as f64).ln()).sum();
    (n * n.ln() - n - ln_fact).exp()
}

/// The CR–RC^n shaper's noise indices (`F_v`, `F_i`): ENC² = F_v e_n² C²/τ + F_i i_n² τ.
pub fn noise_indices(n: u32) -> (f64, f64) {
    // I_m = ∫₀^∞ (1+x²)^(−m) dx = (π/2) Π_{j=1}^{m−1} (2j−1)/(2j).
    let i = |m: u32| {
        (1..m).fold(std::f64::consts::FRAC_PI_2, |acc, j| {
            acc * (2 * j - 1) as f64 / (2 * j) as f64
        })
    };
    let a = peak_factor(n);
    let k = 2.0 * std::f64::consts::PI * a * a;
    ((i(n) - i(n + 1)) / k, i(n + 1) / k)
}

/// Noise-equivalent bandwidth of a response of −3 dB bandwidth `bw`, Hz.
pub fn enbw(bw: f64, response: InstrumentResponse) -> f64 {
    match response {
        InstrumentResponse::SinglePole => std::f64::consts::FRAC_PI_2 * bw,
        // |H|² = exp(−ln 2 (f/BW)²): ∫₀^∞ = BW √(π / ln 2) / 2.
        InstrumentResponse::Gaussian => {
            0.5 * bw * (std::f64::consts::PI / std::f64::consts::LN_2).sqrt()
        }
    }
}

/// σ of the Gaussian impulse response of −3 dB bandwidth `bw`: √(ln 2)/(2π BW), seconds.
pub fn gaussian_sigma(bw: f64) -> f64 {
    std::f64::consts::LN_2.sqrt() / (2.0 * std::f64::consts::PI * bw)
}

/// `w` with its samples at least `step` apart (the first and last kept).
fn thin(w: &Waveform, step: f64) -> Waveform {
    let mut out = Waveform::default();
    for (i, (&t, &v)) in w.t.iter().zip(&w.v).enumerate() {
        let last = out.t.last().copied();
        if last.is_none_or(|l| t - l >= step) || i + 1 == w.t.len() {
            out.t.push(t);
            out.v.push(v);
        }
    }
    out
}

/// `w` followed by zero input for `extra` seconds at steps `h` (at most 4000 steps).
fn with_tail(w: &Waveform, extra: f64, h: f64) -> Waveform {
    let mut out = w.clone();
    let end = w.t.last().copied().unwrap_or(0.0);
    let steps = ((extra / h).ceil() as usize).clamp(1, 4000);
    let h = extra / steps as f64;
    if out.t.is_empty() {
        out.t.push(0.0);
        out.v.push(0.0);
    }
    for i in 1..=steps {
        out.t.push(end + i as f64 * h);
        out.v.push(0.0);
    }
    out
}

/// `y' = (x − y)/τ` from `y = 0` for `x` linear between the samples: the exact update over a
/// step of `a = h/τ`, `y1 = y0 e^(−a) + x0 (1 − e^(−a)) + (x1 − x0)(1 − (1 − e^(−a))/a)`,
/// in a form without cancellation of large terms.
pub fn low_pass(t: &[f64], x: &[f64], tau: f64) -> Vec<f64> {
    let mut y = vec![0.0; x.len()];
    for i in 1..x.len() {
        let h = t[i] - t[i - 1];
        let a = h / tau;
        let one_minus_e = -(-a).exp_m1();
        let c2 = if a < 1e-4 {
            a / 2.0 - a * a / 6.0 + a * a * a / 24.0
        } else {
            1.0 - one_minus_e / a
        };
        y[i] = y[i - 1] * (1.0 - one_minus_e) + x[i - 1] * one_minus_e + (x[i] - x[i - 1]) * c2;
    }
    y
}

/// The exact convolution of `x` (linear between the samples `t`) with a Gaussian of `sigma`,
/// at the times `at`: per segment `(x0 + β(t − s0))[Φ(u1) − Φ(u0)] + βσ[φ(u0) − φ(u1)]`.
fn gaussian_filter(at: &[f64], t: &[f64], x: &[f64], sigma: f64) -> Vec<f64> {
    let phi = |u: f64| (-0.5 * u * u).exp() / (2.0 * std::f64::consts::PI).sqrt();
    let cdf = |u: f64| 0.5 * erfc(-u / std::f64::consts::SQRT_2);
    at.iter()
        .map(|&ti| {
            let lo = t
                .partition_point(|s| *s < ti - 8.0 * sigma)
                .saturating_sub(1);
            let hi = (t.partition_point(|s| *s <= ti + 8.0 * sigma) + 1).min(t.len());
            let mut acc = 0.0;
            for j in lo + 1..hi {
                let (s0, s1) = (t[j - 1], t[j]);
                if s1 <= s0 {
                    continue;
                }
                let beta = (x[j] - x[j - 1]) / (s1 - s0);
                let (u0, u1) = ((s0 - ti) / sigma, (s1 - ti) / sigma);
                acc += (x[j - 1] + beta * (ti - s0)) * (cdf(u1) - cdf(u0))
                    + beta * sigma * (phi(u0) - phi(u1));
            }
            acc
        })
        .collect()
}

/// The complementary error function (Chebyshev fit of W. H. Press et al., *Numerical
/// Recipes*, §6.2: fractional error below 1.2e-7 everywhere).
pub fn erfc(x: f64) -> f64 {
    let z = x.abs();
    let t = 1.0 / (1.0 + 0.5 * z);
    // The fit's polynomial in t, lowest order first, by Horner's rule.
    const C: [f64; 10] = [
        -1.265_512_23,
        1.000_023_68,
        0.374_091_96,
        0.096_784_18,
        -0.186_288_06,
        0.278_868_07,
        -1.135_203_98,
        1.488_515_87,
        -0.822_152_23,
        0.170_872_77,
    ];
    let poly = C.iter().rev().fold(0.0, |acc, c| acc * t + c);
    let ans = t * (-z * z + poly).exp();
    if x >= 0.0 { ans } else { 2.0 - ans }
}

fn interp(w: &Waveform, t: f64) -> f64 {
    let i = w.t.partition_point(|x| *x < t);
    if i == 0 {
        return if w.t.first() == Some(&t) { w.v[0] } else { 0.0 };
    }
    if i >= w.t.len() {
        return 0.0;
    }
    let (ta, tb) = (w.t[i - 1], w.t[i]);
    let f = if tb > ta { (t - ta) / (tb - ta) } else { 0.0 };
    w.v[i - 1] + f * (w.v[i] - w.v[i - 1])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn low_pass_of_a_step_is_the_exponential() {
        // y' = (1 − y)/τ from 0: 1 − e^(−t/τ) (first-order ODE).
        let t: Vec<f64> = (0..=1000).map(|i| i as f64 * 1e-3).collect();
        let x = vec![1.0; t.len()];
        let y = low_pass(&t, &x, 0.1);
        for (ti, yi) in t.iter().zip(&y).skip(1) {
            assert!((yi - (1.0 - (-ti / 0.1).exp())).abs() < 1e-12, "{ti} {yi}");
        }
    }

    #[test]
    fn erfc_known_values() {
        // erfc(0) = 1, erfc(1) = 0.157299207 (tables of the error function).
        assert!((erfc(0.0) - 1.0).abs() < 2e-7);
        assert!((erfc(1.0) - 0.157_299_207).abs() < 2e-7);
        assert!((erfc(-1.0) - 1.842_700_793).abs() < 3e-7);
    }

    #[test]
    fn cr_rc_noise_indices_are_e_squared_over_eight() {
        // CR–RC (n = 1): ENC² = (e²/8)(e_n² C²/τ + i_n² τ) (detector-electronics texts, from
        // memory).
        let (fv, fi) = noise_indices(1);
        let e2_8 = std::f64::consts::E.powi(2) / 8.0;
        assert!((fv / e2_8 - 1.0).abs() < 1e-12 && (fi / e2_8 - 1.0).abs() < 1e-12);
    }
}
