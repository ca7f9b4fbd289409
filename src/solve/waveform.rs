//! The pulse at the load: the anode current through the anode network, cable and instrument
//! input, computed in time, and the figures measured on the result.
//!
//! Circuit (docs/physics.md §6). The tube is a current source into the anode node, which carries
//! the anode capacitance and, when fitted, the anode resistor to AC ground (the decoupled supply
//! rail). A coupling capacitor, when fitted, sits in series between the anode and the cable. A
//! lossless coaxial cable of impedance `Z0` and one-way delay `T` joins the base to the load: the
//! load resistor in parallel with the instrument input (resistance and capacitance). Without a
//! cable the load sits at the anode node.
//!
//! Method:
//! - the cable is the method of characteristics (Bergeron): each end sees `Z0` in series with
//!   the wave that left the other end `T` earlier, `v_A(t) − Z0 i_A(t) = v_B(t−T) + Z0 i_B(t−T)`
//!   (lossless transmission-line theory); reflections at a mismatched end, with
//!   `Γ = (R − Z0)/(R + Z0)`, and echoes every `2T` come out of the computation;
//! - the node equations `C dv/dt + G v = i` are integrated with the variable-step second-order
//!   backward differentiation formula (BDF2, L-stable: no numerical ringing on stiff nodes),
//!   fine steps while the current flows and through the echoes, growing steps in the tail;
//! - once the pulse is long gone and the cable's round trip is short against the slow time
//!   constants, the cable is replaced by its capacitance `T / Z0` (charge conserved) so that a
//!   slow tail needs no steps of the cable's delay;
//! - measured figures: peak, 10–90 % rise on the leading edge, 90–10 % fall on the trailing
//!   edge, FWHM, and the undershoot (largest excursion of the other sign after the peak), with
//!   crossings interpolated linearly between samples.

use crate::numerics::dense;

/// Samples of the anode current from `t = 0`, uniform step, amperes (positive = the pulse).
#[derive(Debug, Clone, PartialEq)]
pub struct CurrentPulse {
    /// Step, seconds.
    pub dt: f64,
    /// Current at `t = i · dt`, amperes.
    pub samples: Vec<f64>,
}

impl CurrentPulse {
    /// Current at `t`, linear between samples, zero outside.
    pub fn at(&self, t: f64) -> f64 {
        if t < 0.0 {
            return 0.0;
        }
        let x = t / self.dt;
        let i = x.floor() as usize;
        if i + 1 >= self.samples.len() {
            return if i + 1 == self.samples.len() && x == i as f64 {
                self.samples[i]
            } else {
                0.0
            };
        }
        let f = x - i as f64;
        self.samples[i] * (1.0 - f) + self.samples[i + 1] * f
    }

    /// Time of the last sample, seconds.
    pub fn end(&self) -> f64 {
        self.dt * (self.samples.len().saturating_sub(1)) as f64
    }

    /// Charge, coulombs (trapezoidal sum).
    pub fn charge(&self) -> f64 {
        let s: f64 = self.samples.iter().sum();
        let ends = self.samples.first().unwrap_or(&0.0) + self.samples.last().unwrap_or(&0.0);
        (s - 0.5 * ends) * self.dt
    }

    /// Peak current, amperes.
    pub fn peak(&self) -> f64 {
        self.samples.iter().copied().fold(0.0, f64::max)
    }

    /// The pulse as a waveform (for measuring its own rise and width).
    pub fn as_waveform(&self) -> Waveform {
        Waveform {
            t: (0..self.samples.len())
                .map(|i| i as f64 * self.dt)
                .collect(),
            v: self.samples.clone(),
        }
    }
}

/// A lossless coaxial cable.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Line {
    /// One-way delay, seconds.
    pub delay: f64,
    /// Characteristic impedance, ohms.
    pub impedance: f64,
}

/// The anode network as the waveform engine sees it (SI units, plain f64).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LoadCircuit {
    /// Capacitance at the anode node (anode, wiring), farads.
    pub anode_capacitance: f64,
    /// Anode resistor to AC ground, ohms (with a coupling capacitor).
    pub anode_resistance: Option<f64>,
    /// Series coupling capacitor, farads.
    pub coupling: Option<f64>,
    /// Load resistor at the base, after the coupling capacitor and before the cable, ohms.
    pub base_resistance: Option<f64>,
    /// Cable from the base to the load.
    pub cable: Option<Line>,
    /// Resistance at the load end (termination ∥ instrument input), ohms; infinite when the
    /// far end has neither.
    pub load_resistance: f64,
    /// Capacitance at the load end (instrument input), farads.
    pub load_capacitance: f64,
}

impl LoadCircuit {
    /// Total capacitance the pulse charges, farads: the anode and the instrument input, plus the
    /// cable's own `T / Z0` when it is not terminated (load above 3 Z0, |Γ| > 0.5); a
    /// terminated cable is a resistance, not a capacitance (transmission-line theory).
    pub fn total_capacitance(&self) -> f64 {
        let cc = self.coupling.unwrap_or(f64::INFINITY);
        let far = self.far_capacitance();
        // With a coupling capacitor the far side is seen through it (series), plus the anode.
        let far_seen = if cc.is_finite() {
            far * cc / (far + cc)
        } else {
            far
        };
        self.anode_capacitance + far_seen
    }

    /// Capacitance beyond the coupling capacitor, farads: the instrument input, plus the
    /// cable's `T / Z0` when it is not terminated.
    pub fn far_capacitance(&self) -> f64 {
        let cable = self.cable.map_or(0.0, |l| {
            if self.load_resistance > 3.0 * l.impedance {
                l.delay / l.impedance
            } else {
                0.0
            }
        });
        cable + self.load_capacitance
    }

    /// Whether the cable (if any) is terminated at the load: within a factor 3 of Z0.
    pub fn terminated(&self) -> bool {
        self.cable
            .is_none_or(|l| self.load_resistance <= 3.0 * l.impedance)
    }

    /// Resistance the pulse sees at low frequency (every load on the path and the anode
    /// resistor in parallel; the cable is a wire there), ohms.
    pub fn pulse_resistance(&self) -> f64 {
        parallel(&[self.anode_resistance, Some(self.load_side_resistance())])
    }

    /// Resistance after the coupling capacitor: the base resistor ∥ the far end, ohms.
    pub fn load_side_resistance(&self) -> f64 {
        parallel(&[self.base_resistance, Some(self.load_resistance)])
    }

    /// Resistance the cable sees at the base end: the base resistor ∥ the anode resistor
    /// (through the coupling capacitor, a short at the pulse's frequencies); infinite when the
    /// base end is open.
    pub fn base_end_resistance(&self) -> f64 {
        parallel(&[self.base_resistance, self.anode_resistance])
    }

    /// The load's RC time constant (lumped), seconds.
    pub fn time_constant(&self) -> f64 {
        self.pulse_resistance() * self.total_capacitance()
    }

    /// The coupling high-pass time constant `(R_a + R_L) C_c`, seconds.
    pub fn high_pass_time_constant(&self) -> Option<f64> {
        self.coupling.map(|cc| {
            (self.anode_resistance.unwrap_or(f64::INFINITY) + self.load_side_resistance()) * cc
        })
    }

    /// Reflection coefficient at the load end, `(R − Z0)/(R + Z0)` (resistive part).
    pub fn load_reflection(&self) -> Option<f64> {
        self.cable
            .map(|l| reflection(self.load_resistance, l.impedance))
    }

    /// Reflection coefficient at the base end (base resistor ∥ anode resistor, or open),
    /// resistive part.
    pub fn source_reflection(&self) -> Option<f64> {
        let r = self.base_end_resistance();
        self.cable.map(|l| {
            if r.is_finite() {
                reflection(r, l.impedance)
            } else {
                1.0
            }
        })
    }
}

impl LoadCircuit {
    /// Volts at the instrument per ampere of a pulse long against the edges and short against
    /// the slow time constants: the resistance without a cable; with one, the wave launched
    /// into the line, `I · (R_base ∥ Z0)`, times `1 + Γ` at the far end (transmission-line
    /// theory; an open base end launches `I · Z0`).
    pub fn short_pulse_ohms(&self) -> f64 {
        match self.cable {
            None => self.pulse_resistance(),
            Some(l) => {
                let launch = parallel(&[Some(self.base_end_resistance()), Some(l.impedance)]);
                let gamma = if self.load_resistance.is_finite() {
                    reflection(self.load_resistance, l.impedance)
                } else {
                    1.0
                };
                launch * (1.0 + gamma)
            }
        }
    }

    /// The edge time constants: one RC without a cable; with one, each end's capacitance with
    /// the resistance it sees (its own resistors ∥ the line's Z0), seconds.
    pub fn edge_time_constants(&self) -> Vec<f64> {
        match self.cable {
            None => vec![self.time_constant()],
            Some(l) => vec![
                self.anode_capacitance
                    * parallel(&[Some(self.base_end_resistance()), Some(l.impedance)]),
                self.load_capacitance * parallel(&[Some(self.load_resistance), Some(l.impedance)]),
            ],
        }
    }
}

/// Resistors in parallel, ohms (absent ones and infinite ones open); infinite when none.
pub fn parallel(parts: &[Option<f64>]) -> f64 {
    let g: f64 = parts.iter().flatten().map(|r| 1.0 / r).sum();
    if g > 0.0 { 1.0 / g } else { f64::INFINITY }
}

/// Reflection coefficient of a resistive termination `r` on a line of impedance `z0`:
/// `Γ = (r − z0)/(r + z0)` (transmission-line theory).
pub fn reflection(r: f64, z0: f64) -> f64 {
    (r - z0) / (r + z0)
}

/// A computed waveform (non-uniform time steps).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Waveform {
    /// Times, seconds.
    pub t: Vec<f64>,
    /// Values (volts at the load, or amperes for a current).
    pub v: Vec<f64>,
}

/// Figures measured on a pulse.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PulseFigures {
    /// Peak value (volts or amperes, positive).
    pub peak: f64,
    /// Time of the peak, seconds.
    pub t_peak: f64,
    /// 10–90 % rise of the leading edge, seconds.
    pub rise: Option<f64>,
    /// 90–10 % fall of the trailing edge, seconds (None if it does not fall that far).
    pub fall: Option<f64>,
    /// Full width at half maximum, seconds.
    pub fwhm: Option<f64>,
    /// Largest excursion of the opposite sign after the peak (positive number).
    pub undershoot: f64,
}

impl Waveform {
    /// Linear interpolation of the crossing of `level` between samples `i-1` and `i`.
    fn cross(&self, i: usize, level: f64) -> f64 {
        let (t0, t1) = (self.t[i - 1], self.t[i]);
        let (v0, v1) = (self.v[i - 1], self.v[i]);
        if v1 == v0 {
            t1
        } else {
            t0 + (level - v0) / (v1 - v0) * (t1 - t0)
        }
    }

    /// The first time the leading edge reaches `level`, seconds.
    pub fn first_crossing(&self, level: f64) -> Option<f64> {
        (1..self.v.len())
            .find(|&i| self.v[i - 1] < level && self.v[i] >= level)
            .map(|i| self.cross(i, level))
    }

    /// Slope at the first crossing of `level`, units per second.
    pub fn slope_at_first_crossing(&self, level: f64) -> Option<f64> {
        (1..self.v.len())
            .find(|&i| self.v[i - 1] < level && self.v[i] >= level)
            .map(|i| (self.v[i] - self.v[i - 1]) / (self.t[i] - self.t[i - 1]))
    }

    /// Measure peak, rise, fall, FWHM and undershoot.
    pub fn measure(&self) -> PulseFigures {
        let (ip, peak) = self
            .v
            .iter()
            .copied()
            .enumerate()
            .fold((0, f64::MIN), |b, (i, v)| if v > b.1 { (i, v) } else { b });
        let mut f = PulseFigures {
            peak: peak.max(0.0),
            t_peak: self.t.get(ip).copied().unwrap_or(0.0),
            rise: None,
            fall: None,
            fwhm: None,
            undershoot: 0.0,
        };
        if peak.is_nan() || peak <= 0.0 || self.v.len() < 3 {
            return f;
        }
        // Leading edge: last upward crossing before the peak.
        let up = |level: f64| {
            (1..=ip)
                .rev()
                .find(|&i| self.v[i - 1] < level && self.v[i] >= level)
                .map(|i| self.cross(i, level))
        };
        // Trailing edge: first downward crossing after the peak.
        let down = |level: f64| {
            (ip + 1..self.v.len())
                .find(|&i| self.v[i - 1] > level && self.v[i] <= level)
                .map(|i| self.cross(i, level))
        };
        let (r10, r90) = (up(0.1 * peak), up(0.9 * peak));
        let (f90, f10) = (down(0.9 * peak), down(0.1 * peak));
        let (h1, h2) = (up(0.5 * peak), down(0.5 * peak));
        f.rise = r10.zip(r90).map(|(a, b)| b - a);
        f.fall = f90.zip(f10).map(|(a, b)| b - a);
        f.fwhm = h1.zip(h2).map(|(a, b)| b - a);
        f.undershoot = self.v[ip..].iter().copied().fold(0.0, f64::min).abs();
        f
    }

    /// The first arrival's figures: with a cable of one-way delay `delay`, only what reaches
    /// the instrument before the first echo can (at three delays, the leading edge's round
    /// trip after its arrival), so that peak, rise, width and undershoot belong to the pulse
    /// itself and an echo is not taken for its tail. A pulse longer than the round trip is
    /// superposed on its own echo and measured whole, as the instrument shows it.
    pub fn measure_first(&self, delay: Option<f64>) -> PulseFigures {
        let Some(t_echo) = delay.map(|d| 3.0 * d) else {
            return self.measure();
        };
        let n = self.t.partition_point(|t| *t < t_echo);
        if n < 3 {
            return self.measure();
        }
        let first = Waveform {
            t: self.t[..n].to_vec(),
            v: self.v[..n].to_vec(),
        };
        let f = first.measure();
        if f.peak > 0.0 && first.ended_by(&f, t_echo) {
            f
        } else {
            self.measure()
        }
    }

    /// Whether the pulse of figures `f` has fallen below a tenth of its peak before `t`.
    fn ended_by(&self, f: &PulseFigures, t: f64) -> bool {
        let ip = self.t.partition_point(|x| *x < f.t_peak);
        self.v[ip..]
            .iter()
            .zip(&self.t[ip..])
            .find(|(v, _)| v.abs() < 0.1 * f.peak)
            .is_some_and(|(_, x)| *x < t)
    }

    /// The first echo at the instrument, signed, as a fraction of the first arrival's peak:
    /// the extreme of the signal over the round trip after the first echo can arrive
    /// (`[3T, 5T)`, `T` the one-way delay). `None` when the pulse is longer than the round
    /// trip (the echo is part of what the instrument shows) or nothing was computed there.
    pub fn first_echo(&self, delay: f64) -> Option<f64> {
        let first = self.measure_first(Some(delay));
        // The first arrival must have passed (below a tenth of its peak) before the echo can
        // come, or the window would hold the pulse's own tail.
        if first.peak <= 0.0 || !self.ended_by(&first, 3.0 * delay) {
            return None;
        }
        let (a, b) = (
            self.t.partition_point(|t| *t < 3.0 * delay),
            self.t.partition_point(|t| *t < 5.0 * delay),
        );
        if b <= a {
            return None;
        }
        let ext = self.v[a..b]
            .iter()
            .copied()
            .fold(0.0f64, |m, x| if x.abs() > m.abs() { x } else { m });
        Some(ext / first.peak)
    }

    /// At most `n` points for a figure: every k-th sample, keeping the peak.
    pub fn decimated(&self, n: usize) -> Waveform {
        let k = (self.t.len() / n.max(2)).max(1);
        let mut out = Waveform::default();
        for i in (0..self.t.len()).step_by(k) {
            out.t.push(self.t[i]);
            out.v.push(self.v[i]);
        }
        out
    }
}

/// Gaussian current pulse of standard deviation `sigma` carrying `charge`, centred at 6 σ.
pub fn gaussian_pulse(sigma: f64, charge: f64) -> CurrentPulse {
    let dt = sigma / 20.0;
    let n = 241;
    let mut samples: Vec<f64> = (0..n)
        .map(|i| {
            let x = (i as f64 * dt - 6.0 * sigma) / sigma;
            (-0.5 * x * x).exp()
        })
        .collect();
    normalise(&mut samples, dt, charge);
    CurrentPulse { dt, samples }
}

fn normalise(samples: &mut [f64], dt: f64, charge: f64) {
    let s: f64 = samples.iter().sum::<f64>() * dt;
    if s > 0.0 {
        for x in samples.iter_mut() {
            *x *= charge / s;
        }
    }
}

/// Largest number of samples in a current pulse (keeps a long scintillator tail cheap).
pub const MAX_PULSE_SAMPLES: usize = 100_000;

/// The anode current for a light pulse of `shape` convolved with a Gaussian of standard
/// deviation `sigma` (the single-electron response and the transit-time spread together),
/// carrying `charge`. Sampled at a tenth of the output's fastest edge — the light's own edge
/// convolved with σ, so a wide rectangle or a slow decay with a sharp onset is sampled by the
/// tube's edge, not by its width — at most [`MAX_PULSE_SAMPLES`] samples; the discrete
/// convolution keeps the charge exactly.
pub fn convolved_pulse(
    shape: &crate::model::light::Shape,
    sigma: f64,
    charge: f64,
) -> CurrentPulse {
    let (a, b) = shape.support();
    let pad = 6.0 * sigma;
    let extent = (b - a) + 2.0 * pad;
    // The output's fastest edge is the light's own edge convolved with σ.
    let finest = shape.finest();
    let edge = shape.edge();
    let mut dt = (edge * edge + sigma * sigma).sqrt() / 10.0;
    if extent / dt > MAX_PULSE_SAMPLES as f64 {
        dt = extent / MAX_PULSE_SAMPLES as f64;
    }
    let n = (extent / dt).ceil() as usize + 1;
    // Cell averages of the light (area kept when the light is finer than the grid).
    let sub = ((dt / (finest / 10.0)).ceil() as usize).clamp(1, 200);
    let light: Vec<f64> = (0..n)
        .map(|i| {
            let t0 = i as f64 * dt - pad + a;
            (0..sub)
                .map(|j| shape.value(t0 + (j as f64 + 0.5) * dt / sub as f64))
                .sum::<f64>()
                / sub as f64
        })
        .collect();
    let half = (pad / dt).ceil() as isize;
    let mut kernel: Vec<f64> = (-half..=half)
        .map(|k| {
            let x = k as f64 * dt / sigma;
            (-0.5 * x * x).exp()
        })
        .collect();
    let ks: f64 = kernel.iter().sum();
    for k in &mut kernel {
        *k /= ks;
    }
    let mut out = vec![0.0; n];
    for (i, o) in out.iter_mut().enumerate() {
        let mut s = 0.0;
        for (j, kv) in kernel.iter().enumerate() {
            let src = i as isize + half - j as isize;
            if src >= 0 && (src as usize) < n {
                s += light[src as usize] * kv;
            }
        }
        *o = s;
    }
    normalise(&mut out, dt, charge);
    CurrentPulse { dt, samples: out }
}

/// A step of current `amps` from `t = 0` lasting `length` seconds, sampled at `dt`.
pub fn step_pulse(amps: f64, length: f64, dt: f64) -> CurrentPulse {
    let n = (length / dt).ceil() as usize + 1;
    let mut samples = vec![amps; n];
    samples[0] = 0.0;
    CurrentPulse { dt, samples }
}

// --- the solver --------------------------------------------------------------------------

struct Net {
    m: usize,
    cap: Vec<f64>,
    cond: Vec<f64>,
    ground_cap: Vec<f64>,
    out: usize,
    line: Option<(usize, usize, Line)>,
}

impl Net {
    fn build(c: &LoadCircuit) -> Net {
        let mut m = 1;
        let a = 0;
        let k = if c.coupling.is_some() {
            m += 1;
            1
        } else {
            a
        };
        let b = if c.cable.is_some() {
            m += 1;
            m - 1
        } else {
            k
        };
        let mut net = Net {
            m,
            cap: vec![0.0; m * m],
            cond: vec![0.0; m * m],
            ground_cap: vec![0.0; m],
            out: b,
            line: c.cable.map(|l| (k, b, l)),
        };
        net.ground(
            a,
            c.anode_capacitance,
            c.anode_resistance.map_or(0.0, |r| 1.0 / r),
        );
        if let Some(cc) = c.coupling {
            net.between(a, k, cc);
        }
        if let Some(rb) = c.base_resistance {
            net.ground(k, 0.0, 1.0 / rb);
        }
        net.ground(b, c.load_capacitance, 1.0 / c.load_resistance);
        net
    }

    fn ground(&mut self, n: usize, c: f64, g: f64) {
        self.cap[n * self.m + n] += c;
        self.ground_cap[n] += c;
        self.cond[n * self.m + n] += g;
    }

    fn between(&mut self, p: usize, q: usize, c: f64) {
        let m = self.m;
        self.cap[p * m + p] += c;
        self.cap[q * m + q] += c;
        self.cap[p * m + q] -= c;
        self.cap[q * m + p] -= c;
    }

    /// The same network with the cable replaced by its capacitance, nodes merged.
    /// Returns the new net and the state mapping of a voltage vector.
    fn lumped(&self, v: &[f64]) -> (Net, Vec<f64>) {
        let Some((p, q, l)) = self.line else {
            return (
                Net {
                    m: self.m,
                    cap: self.cap.clone(),
                    cond: self.cond.clone(),
                    ground_cap: self.ground_cap.clone(),
                    out: self.out,
                    line: None,
                },
                v.to_vec(),
            );
        };
        // q is the last node; merge it into p.
        let cl = l.delay / l.impedance;
        let m2 = self.m - 1;
        let mut cap = vec![0.0; m2 * m2];
        let mut cond = vec![0.0; m2 * m2];
        let map = |i: usize| if i == q { p } else { i };
        for i in 0..self.m {
            for j in 0..self.m {
                cap[map(i) * m2 + map(j)] += self.cap[i * self.m + j];
                cond[map(i) * m2 + map(j)] += self.cond[i * self.m + j];
            }
        }
        cap[p * m2 + p] += cl;
        let mut ground_cap = self.ground_cap[..m2].to_vec();
        ground_cap[p] += self.ground_cap[q] + cl;
        let wp = self.ground_cap[p] + 0.5 * cl;
        let wq = self.ground_cap[q] + 0.5 * cl;
        let mut v2 = v[..m2].to_vec();
        v2[p] = if wp + wq > 0.0 {
            (wp * v[p] + wq * v[q]) / (wp + wq)
        } else {
            0.5 * (v[p] + v[q])
        };
        (
            Net {
                m: m2,
                cap,
                cond,
                ground_cap,
                out: p,
                line: None,
            },
            v2,
        )
    }
}

/// History of the waves leaving each end of the cable: (t, w_p, w_q), `w = v + Z0 i_into_line`.
struct History {
    t: Vec<f64>,
    wp: Vec<f64>,
    wq: Vec<f64>,
    cursor: usize,
}

impl History {
    fn at(&mut self, t: f64) -> (f64, f64) {
        if t <= 0.0 || self.t.is_empty() {
            return (0.0, 0.0);
        }
        while self.cursor + 1 < self.t.len() && self.t[self.cursor + 1] <= t {
            self.cursor += 1;
        }
        let i = self.cursor;
        if i + 1 >= self.t.len() {
            return (self.wp[i], self.wq[i]);
        }
        let f = ((t - self.t[i]) / (self.t[i + 1] - self.t[i])).clamp(0.0, 1.0);
        (
            self.wp[i] + f * (self.wp[i + 1] - self.wp[i]),
            self.wq[i] + f * (self.wq[i + 1] - self.wq[i]),
        )
    }
}

/// Step growth factor in the tail (variable-step BDF2 is zero-stable below 1 + √2).
const GROWTH: f64 = 1.25;

/// Compute the voltage at the load for the anode current `pulse` into `circuit`.
/// `window` extends the end of the computation beyond its own choice (seconds, may be 0).
pub fn simulate(circuit: &LoadCircuit, pulse: &CurrentPulse, window: f64) -> Waveform {
    let mut net = Net::build(circuit);
    let cable_c = circuit.cable.map_or(0.0, |l| l.delay / l.impedance);
    let tau_fast =
        (circuit.pulse_resistance() * (circuit.total_capacitance() + cable_c)).max(1e-15);
    let tau_slow = circuit
        .high_pass_time_constant()
        .unwrap_or(0.0)
        .max(tau_fast);
    let round_trip = circuit.cable.map_or(0.0, |l| 2.0 * l.delay);
    let t_src = pulse.end();
    // Phase 1 (fine) ends after the pulse, ten load time constants and four round trips;
    // the run ends after the slow tail has had its say.
    let t_fine = t_src + 10.0 * tau_fast + 4.0 * round_trip;
    let t_stop = (t_fine + 3.0 * tau_slow.min(1e4 * tau_fast.max(t_src)))
        .max(t_src + window)
        .max(t_fine);
    // Step limits: the source's own step while current flows; then a tenth of the pulse width
    // plus the load time constant (echoes and the fall); then a twentieth of the slow constant.
    let own = pulse.as_waveform().measure();
    let pulse_width = own.fwhm.unwrap_or(t_src);
    let pulse_rise = own.rise.unwrap_or(pulse_width);
    let h_src = pulse.dt.min(tau_fast / 10.0);
    let h_fall = ((pulse_width + tau_fast) / 10.0).max(h_src);
    let h_slow = (tau_slow / 20.0).max(h_fall);
    let t_echoes = t_src + 4.0 * round_trip;
    // While the cable is distributed, echoes keep the pulse's edges, and a capacitive end
    // reflects their derivative over its own RC: resolve the finer of the two with ten steps.
    let h_line = circuit.cable.map_or(f64::INFINITY, |l| {
        let ends = [
            circuit.anode_capacitance * l.impedance,
            circuit.load_capacitance * circuit.load_resistance.min(l.impedance),
        ];
        let edge = ends
            .iter()
            .copied()
            .filter(|x| *x > 0.0)
            .fold(pulse_rise, f64::min);
        (edge / 10.0).max(h_src / 10.0)
    });
    let lump_when = round_trip > 0.0 && tau_fast.max(tau_slow) > 50.0 * round_trip;

    let mut hist = History {
        t: Vec::new(),
        wp: Vec::new(),
        wq: Vec::new(),
        cursor: 0,
    };
    let mut v_prev = vec![0.0; net.m];
    let mut v_now = vec![0.0; net.m];
    let mut t = 0.0;
    let mut h_prev;
    let mut h = h_src;
    let mut out = Waveform {
        t: vec![0.0],
        v: vec![0.0],
    };
    if let Some((_, _, _)) = net.line {
        hist.t.push(0.0);
        hist.wp.push(0.0);
        hist.wq.push(0.0);
    }
    let mut a = [0.0; 9];
    let mut inv = [0.0; 9];
    let mut cached: Option<(f64, f64, usize, bool)> = None;
    let mut rhs = [0.0; 3];
    let mut first = true;
    while t < t_stop {
        // Step size for this step.
        let limit = if t < t_src {
            h_src
        } else if t < t_fine {
            h_fall
        } else {
            h_slow
        };
        let mut h_new = if first {
            h_src
        } else {
            (h * GROWTH).min(limit)
        };
        if let Some((_, _, l)) = net.line {
            h_new = h_new.min(l.delay);
            if t < t_echoes {
                h_new = h_new.min(h_line);
            }
        }
        if t >= t_echoes && lump_when && net.line.is_some() {
            let (n2, v2) = net.lumped(&v_now);
            net = n2;
            v_now = v2;
            v_prev = v_now.clone();
            first = true;
            continue;
        }
        h_prev = if first { 0.0 } else { h };
        h = h_new;
        let tn = t + h;
        // BDF2 coefficients (variable step); backward Euler on the first step.
        let (a0, a1, a2) = if h_prev == 0.0 {
            (1.0, -1.0, 0.0)
        } else {
            let w = h / h_prev;
            ((1.0 + 2.0 * w) / (1.0 + w), -(1.0 + w), w * w / (1.0 + w))
        };
        let m = net.m;
        // The matrix changes only with the step, its ratio or a change of network: keep its
        // inverse while they stay (the fine phase runs at one step).
        let key = (h, a0, m, net.line.is_some());
        if cached != Some(key) {
            for i in 0..m {
                for j in 0..m {
                    a[i * m + j] = a0 / h * net.cap[i * m + j] + net.cond[i * m + j];
                }
            }
            if let Some((p, q, l)) = net.line {
                let g = 1.0 / l.impedance;
                a[p * m + p] += g;
                a[q * m + q] += g;
            }
            let mut ok = true;
            for col in 0..m {
                let mut lu = a;
                let mut unit = [0.0; 3];
                unit[col] = 1.0;
                ok &= dense::solve(&mut lu[..m * m], &mut unit[..m], m);
                for row in 0..m {
                    inv[row * m + col] = unit[row];
                }
            }
            if !ok {
                break;
            }
            cached = Some(key);
        }
        for i in 0..m {
            let mut r = 0.0;
            for j in 0..m {
                r -= net.cap[i * m + j] * (a1 * v_now[j] + a2 * v_prev[j]) / h;
            }
            rhs[i] = r;
        }
        rhs[0] += pulse.at(tn);
        let mut e = (0.0, 0.0);
        if let Some((p, q, l)) = net.line {
            // E_p(t) = w_q(t − T), E_q(t) = w_p(t − T).
            let (wp, wq) = hist.at(tn - l.delay);
            e = (wq, wp);
            let g = 1.0 / l.impedance;
            rhs[p] += e.0 * g;
            rhs[q] += e.1 * g;
        }
        let mut x = [0.0; 3];
        for i in 0..m {
            x[i] = (0..m).map(|j| inv[i * m + j] * rhs[j]).sum();
        }
        rhs = x;
        v_prev.copy_from_slice(&v_now);
        v_now.copy_from_slice(&rhs[..m]);
        if let Some((p, q, _)) = net.line {
            hist.t.push(tn);
            hist.wp.push(2.0 * v_now[p] - e.0);
            hist.wq.push(2.0 * v_now[q] - e.1);
        }
        t = tn;
        first = false;
        out.t.push(t);
        out.v.push(v_now[net.out]);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn charge_is_kept_by_the_convolution() {
        let s = crate::model::light::Shape::Rectangular { width: 10e-9 };
        let p = convolved_pulse(&s, 1e-9, 1e-12);
        assert!((p.charge() / 1e-12 - 1.0).abs() < 1e-3);
    }

    #[test]
    fn integrating_limit_is_q_over_c() {
        // A short pulse into a long RC: peak → Q/C (definition of capacitance).
        let c = LoadCircuit {
            anode_capacitance: 10e-12,
            anode_resistance: None,
            coupling: None,
            base_resistance: None,
            cable: None,
            load_resistance: 1e6,
            load_capacitance: 0.0,
        };
        let p = gaussian_pulse(0.5e-9, 1.6e-12);
        let w = simulate(&c, &p, 0.0);
        let f = w.measure();
        assert!((f.peak / 0.16 - 1.0).abs() < 1e-3, "{}", f.peak);
    }
}
