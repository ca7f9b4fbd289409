//! The supply as built: a Cockcroft–Walton voltage multiplier driven by a sine (the secondary of
//! a small step-up transformer), with an optional RC filter, solved in its periodic steady state
//! under the base's load.
//!
//! Circuit (half-wave cascade, positive output; the sign of the base's supply is applied by the
//! caller): the drive `v_s(t) = V_p sin(2π f t)` feeds the oscillating column through `C` to
//! node `o1`; `C` joins `o_k` to `o_(k+1)`; the smoothing column runs from ground through `C` to
//! `s1`, `s1` to `s2`, …; diodes point ground → `o1`, `o_k` → `s_k`, `s_k` → `o_(k+1)`. The
//! output is `s_n`, or the node after the filter resistor `R_f` with `C_f` to ground. With ideal
//! diodes and no load each capacitor holds `2 V_p` (the first `V_p`): output `2 n V_p`.
//!
//! Load: the divider with the tube's current, taken as one resistance `R_L = V / I` at the
//! operating point (the divider is resistive; the tube's share is small at a sane operating
//! point). Diodes: the Shockley law `I_s (exp(v / (N V_T)) − 1)` at 27 °C (the temperature
//! ngspice assumes), with a small conductance across each junction as ngspice adds; above
//! [`Diode::linear_above`] amperes the exponential is continued linearly so that Newton's
//! method stays finite (no current in a working multiplier comes near it).
//!
//! Method: implicit (backward Euler) steps, [`STEPS_PER_PERIOD`] to a period, Newton's method at
//! each step on the dense node equations (at most 2 n + 1 nodes); the periodic steady state by
//! shooting — Newton on `x0 − Φ(x0)` with the monodromy matrix `∂Φ/∂x0` carried along the
//! period (docs/physics.md §13 uses the same idea for the base). Backward Euler conserves charge
//! exactly, so the mean load current balances what the diodes deliver.
//!
//! Textbook comparison (high-voltage engineering texts; from memory): ripple
//! `δV ≈ I n (n+1) / (2 f C)`, drop `ΔV ≈ (I / (f C)) (2n³/3 + n²/2 − n/6)` below `2 n V_p`
//! at the output's maximum, an RC filter dividing the ripple by about `2π f R C`.

use crate::numerics::dense;
use uom::si::capacitance::farad;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::f64::{Capacitance, ElectricPotential, ElectricalResistance, Frequency};
use uom::si::frequency::hertz;

/// Backward-Euler steps in one drive period.
pub const STEPS_PER_PERIOD: usize = 2000;
/// Shooting iterations before giving up.
const MAX_SHOOTING: usize = 25;
/// Plain periods run before shooting, to let the diodes settle into their conduction pattern.
const WARM_UP_PERIODS: usize = 3;
/// Conductance across every junction, siemens (ngspice's default GMIN).
const GMIN: f64 = 1e-12;

/// A rectifier diode by the Shockley law.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Diode {
    /// Saturation current `I_s`, amperes.
    pub saturation_amps: f64,
    /// Emission coefficient `N` (times the number of junctions in series in a stack).
    pub emission: f64,
    /// Current above which the exponential is continued linearly, amperes.
    pub linear_above: f64,
}

/// A generic small silicon rectifier (I_s = 1 nA, N = 1.8: typical of small general-purpose
/// rectifiers, from memory). A high-voltage stack of m junctions multiplies N by m.
pub const RECTIFIER: Diode = Diode {
    saturation_amps: 1e-9,
    emission: 1.8,
    linear_above: 100.0,
};

/// A near-ideal switch in the Shockley form (I_s = 1 pA, N = 0.05: some 50 mV forward at an
/// ampere), to set the circuit beside the textbook's ideal diodes.
pub const IDEAL: Diode = Diode {
    saturation_amps: 1e-12,
    emission: 0.05,
    linear_above: 100.0,
};

/// Thermal voltage kT/e at 27 °C (300.15 K, ngspice's nominal temperature), volts.
pub fn thermal_volts() -> f64 {
    crate::model::constants::BOLTZMANN * 300.15 / crate::model::constants::ELEMENTARY_CHARGE
}

impl Diode {
    /// Current and conductance at forward voltage `v`.
    fn eval(&self, v: f64, vt: f64) -> (f64, f64) {
        let nvt = self.emission * vt;
        let v_lin = nvt * (self.linear_above / self.saturation_amps).ln();
        let (i, g) = if v <= v_lin {
            let e = (v / nvt).exp();
            (
                self.saturation_amps * (e - 1.0),
                self.saturation_amps * e / nvt,
            )
        } else {
            let e = (v_lin / nvt).exp();
            let g = self.saturation_amps * e / nvt;
            (self.saturation_amps * (e - 1.0) + g * (v - v_lin), g)
        };
        (i + GMIN * v, g + GMIN)
    }
}

/// The multiplier as given in the design.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Multiplier {
    /// Number of stages n (a doubler is 1).
    pub stages: usize,
    /// Capacitance of every capacitor in both columns.
    pub capacitance: Capacitance,
    /// Drive frequency.
    pub frequency: Frequency,
    /// Drive amplitude (peak of the sine at the transformer secondary).
    pub amplitude: ElectricPotential,
    /// Optional RC filter after the multiplier: series resistance, shunt capacitance.
    pub filter: Option<(ElectricalResistance, Capacitance)>,
    /// The rectifiers.
    pub diode: Diode,
}

/// The multiplier in its periodic steady state under a resistive load.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SteadyState {
    /// Ideal no-load output `2 n V_p`, volts.
    pub no_load_volts: f64,
    /// Load resistance, ohms.
    pub load_ohms: f64,
    /// Mean load current, amperes.
    pub load_amps: f64,
    /// Maximum over a period at the multiplier's output (before the filter), volts.
    pub multiplier_max_volts: f64,
    /// Peak-to-peak ripple at the multiplier's output (before the filter), volts.
    pub multiplier_ripple_volts: f64,
    /// Drop of the multiplier's maximum output below `2 n V_p` (the textbook's ΔV; includes the
    /// diodes' forward drops), volts.
    pub droop_volts: f64,
    /// Mean output at the base (after the filter, if any), volts.
    pub output_volts: f64,
    /// Peak-to-peak ripple at the base, volts.
    pub ripple_volts: f64,
    /// The output at the base over one period, `STEPS_PER_PERIOD` samples, volts.
    #[serde(skip)]
    pub waveform: Vec<f64>,
    /// Shooting iterations used.
    pub iterations: usize,
}

/// The textbook figures for a load current `amps`: (ripple, drop below `2 n V_p`), volts.
pub fn textbook(m: &Multiplier, amps: f64) -> (f64, f64) {
    let n = m.stages as f64;
    let q = amps / (m.frequency.get::<hertz>() * m.capacitance.get::<farad>());
    (
        q * n * (n + 1.0) / 2.0,
        q * (2.0 * n.powi(3) / 3.0 + n * n / 2.0 - n / 6.0),
    )
}

/// Why the steady state could not be found.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum MultiplierError {
    /// Newton's method failed inside a time step.
    #[error("the multiplier's time step did not converge")]
    Step,
    /// Shooting did not reach a periodic state.
    #[error("the multiplier did not reach a periodic steady state in {0} shooting iterations")]
    Shooting(usize),
}

/// The circuit's nodes and parts as plain numbers.
struct Circuit {
    n: usize,
    /// Node count: o1..on, s1..sn, and the filter node.
    m: usize,
    out: usize,
    c: f64,
    vp: f64,
    omega: f64,
    /// Capacitance matrix (dense, m × m).
    cmat: Vec<f64>,
    /// Resistors: (node a, node b or None = ground, conductance).
    resistors: Vec<(usize, Option<usize>, f64)>,
    /// Diodes: (anode or None = ground, cathode).
    diodes: Vec<(Option<usize>, usize)>,
    diode: Diode,
    vt: f64,
}

impl Circuit {
    fn new(mult: &Multiplier, load_ohms: f64) -> Circuit {
        let n = mult.stages;
        let o = |k: usize| k - 1; // o_k
        let s = |k: usize| n + k - 1; // s_k
        let m = 2 * n + usize::from(mult.filter.is_some());
        let c = mult.capacitance.get::<farad>();
        let mut cmat = vec![0.0; m * m];
        let mut cap = |a: usize, b: Option<usize>, v: f64| {
            cmat[a * m + a] += v;
            if let Some(b) = b {
                cmat[b * m + b] += v;
                cmat[a * m + b] -= v;
                cmat[b * m + a] -= v;
            }
        };
        cap(o(1), None, c); // to the drive (a known voltage)
        cap(s(1), None, c);
        for k in 1..n {
            cap(o(k), Some(o(k + 1)), c);
            cap(s(k), Some(s(k + 1)), c);
        }
        let mut resistors = Vec::new();
        let out = match mult.filter {
            Some((r, cf)) => {
                let f = 2 * n;
                cap(f, None, cf.get::<farad>());
                resistors.push((s(n), Some(f), 1.0 / r.get::<ohm>()));
                f
            }
            None => s(n),
        };
        resistors.push((out, None, 1.0 / load_ohms));
        let mut diodes = vec![(None, o(1))];
        for k in 1..=n {
            diodes.push((Some(o(k)), s(k)));
            if k < n {
                diodes.push((Some(s(k)), o(k + 1)));
            }
        }
        Circuit {
            n,
            m,
            out,
            c,
            vp: mult.amplitude.get::<volt>(),
            omega: 2.0 * std::f64::consts::PI * mult.frequency.get::<hertz>(),
            cmat,
            resistors,
            diodes,
            diode: mult.diode,
            vt: thermal_volts(),
        }
    }

    /// The ideal no-load state at the drive's zero crossing (rising).
    fn ideal_state(&self) -> Vec<f64> {
        let mut x = vec![0.0; self.m];
        for k in 1..=self.n {
            x[k - 1] = (2 * k - 1) as f64 * self.vp;
            x[self.n + k - 1] = (2 * k) as f64 * self.vp;
        }
        if self.m > 2 * self.n {
            x[2 * self.n] = 2.0 * self.n as f64 * self.vp;
        }
        x
    }

    /// Static currents leaving each node, and their Jacobian, at `x`.
    fn currents(&self, x: &[f64], f: &mut [f64], jac: &mut [f64]) {
        let m = self.m;
        f.iter_mut().for_each(|v| *v = 0.0);
        jac.iter_mut().for_each(|v| *v = 0.0);
        let mut stamp = |a: Option<usize>, b: Option<usize>, i: f64, g: f64| {
            // Current i flows from a to b through the part; g = di/d(va − vb).
            if let Some(a) = a {
                f[a] += i;
                jac[a * m + a] += g;
                if let Some(b) = b {
                    jac[a * m + b] -= g;
                }
            }
            if let Some(b) = b {
                f[b] -= i;
                jac[b * m + b] += g;
                if let Some(a) = a {
                    jac[b * m + a] -= g;
                }
            }
        };
        for &(a, b, g) in &self.resistors {
            let vb = b.map_or(0.0, |b| x[b]);
            stamp(Some(a), b, g * (x[a] - vb), g);
        }
        for &(a, k) in &self.diodes {
            let va = a.map_or(0.0, |a| x[a]);
            let (i, g) = self.diode.eval(va - x[k], self.vt);
            stamp(a, Some(k), i, g);
        }
    }

    /// One backward-Euler step from `x` (time t) to t + h, in place. Returns the LU of the
    /// final Jacobian (for the sensitivities).
    fn step(&self, x: &mut [f64], t: f64, h: f64, ws: &mut Work) -> Result<(), MultiplierError> {
        let m = self.m;
        let dvs = self.vp * ((self.omega * (t + h)).sin() - (self.omega * t).sin());
        ws.x0.copy_from_slice(x);
        let scale = 2.0 * self.n as f64 * self.vp.abs() + 1.0;
        for _ in 0..100 {
            self.currents(x, &mut ws.f, &mut ws.jac);
            // Residual: C (x − x0)/h + i(x) − C e_o1 Δv_s / h.
            for r in 0..m {
                let mut q = 0.0;
                for col in 0..m {
                    q += self.cmat[r * m + col] * (x[col] - ws.x0[col]);
                }
                ws.f[r] += q / h;
                for col in 0..m {
                    ws.jac[r * m + col] += self.cmat[r * m + col] / h;
                }
            }
            ws.f[0] -= self.c * dvs / h;
            dense::lu_factor(&mut ws.jac, m, &mut ws.piv).ok_or(MultiplierError::Step)?;
            ws.dx.iter_mut().zip(&ws.f).for_each(|(d, f)| *d = -f);
            dense::lu_solve(&ws.jac, m, &ws.piv, &mut ws.dx);
            // Keep a junction from jumping far into conduction in one iterate.
            let big = ws.dx.iter().fold(0.0f64, |a, d| a.max(d.abs()));
            let limit = 0.1 * scale;
            let k = if big > limit { limit / big } else { 1.0 };
            for i in 0..m {
                x[i] += k * ws.dx[i];
            }
            if !x.iter().all(|v| v.is_finite()) {
                return Err(MultiplierError::Step);
            }
            if big * k < 1e-9 * scale + 1e-9 {
                // Refresh the Jacobian at the solution for the sensitivities.
                self.currents(x, &mut ws.f, &mut ws.jac);
                for r in 0..m {
                    for col in 0..m {
                        ws.jac[r * m + col] += self.cmat[r * m + col] / h;
                    }
                }
                dense::lu_factor(&mut ws.jac, m, &mut ws.piv).ok_or(MultiplierError::Step)?;
                return Ok(());
            }
        }
        Err(MultiplierError::Step)
    }

    /// One period from `x`, in place; with `sens`, the monodromy matrix (row-major, m × m) is
    /// returned in `ws.s`; with `record`, the output node's samples.
    fn period(
        &self,
        x: &mut [f64],
        sens: bool,
        mut record: Option<&mut Vec<f64>>,
        ws: &mut Work,
    ) -> Result<(), MultiplierError> {
        let m = self.m;
        let period = 2.0 * std::f64::consts::PI / self.omega;
        let h = period / STEPS_PER_PERIOD as f64;
        if sens {
            ws.s.iter_mut().for_each(|v| *v = 0.0);
            for i in 0..m {
                ws.s[i * m + i] = 1.0;
            }
        }
        for k in 0..STEPS_PER_PERIOD {
            self.step(x, k as f64 * h, h, ws)?;
            if sens {
                // S ← J⁻¹ (C / h) S, column by column.
                for col in 0..m {
                    for r in 0..m {
                        let mut q = 0.0;
                        for j in 0..m {
                            q += self.cmat[r * m + j] * ws.s[j * m + col];
                        }
                        ws.dx[r] = q / h;
                    }
                    dense::lu_solve(&ws.jac, m, &ws.piv, &mut ws.dx);
                    for r in 0..m {
                        ws.s[r * m + col] = ws.dx[r];
                    }
                }
            }
            if let Some(rec) = record.as_deref_mut() {
                rec.push(x[self.out]);
            }
        }
        Ok(())
    }
}

/// Scratch space for the solves.
struct Work {
    x0: Vec<f64>,
    f: Vec<f64>,
    dx: Vec<f64>,
    jac: Vec<f64>,
    piv: Vec<usize>,
    s: Vec<f64>,
}

impl Work {
    fn new(m: usize) -> Work {
        Work {
            x0: vec![0.0; m],
            f: vec![0.0; m],
            dx: vec![0.0; m],
            jac: vec![0.0; m * m],
            piv: vec![0; m],
            s: vec![0.0; m * m],
        }
    }
}

/// The periodic steady state of `mult` feeding `load`.
pub fn steady_state(
    mult: &Multiplier,
    load: ElectricalResistance,
) -> Result<SteadyState, MultiplierError> {
    let load_ohms = load.get::<ohm>();
    let ckt = Circuit::new(mult, load_ohms);
    let m = ckt.m;
    let mut ws = Work::new(m);
    // Start from the textbook's loaded state: the ideal charges less the drop, shared by the
    // stages as the steady drop grows towards the top (a rough guess the shooting corrects).
    let mut x = ckt.ideal_state();
    let amps = 2.0 * ckt.n as f64 * ckt.vp / load_ohms;
    let (_, drop) = textbook(mult, amps);
    let total = 2.0 * ckt.n as f64 * ckt.vp;
    let keep = ((total - drop) / total).clamp(0.05, 1.0);
    x.iter_mut().for_each(|v| *v *= keep);
    for _ in 0..WARM_UP_PERIODS {
        ckt.period(&mut x, false, None, &mut ws)?;
    }
    let scale = total.abs() + 1.0;
    // Shooting with a backtracking line search: the period map bends where a diode starts or
    // stops conducting, and a full Newton step from a point near one such bend can land far
    // from the solution; a step is kept only if it shrinks the periodic residual.
    let residual = |x: &[f64], ws: &mut Work| -> Result<f64, MultiplierError> {
        let mut end = x.to_vec();
        ckt.period(&mut end, false, None, ws)?;
        Ok(x.iter()
            .zip(&end)
            .fold(0.0f64, |a, (s, e)| a.max((s - e).abs())))
    };
    let mut iterations = 0;
    loop {
        if iterations >= MAX_SHOOTING {
            return Err(MultiplierError::Shooting(MAX_SHOOTING));
        }
        iterations += 1;
        let mut end = x.clone();
        ckt.period(&mut end, true, None, &mut ws)?;
        // (M − I) dx = −(Φ(x) − x)
        let mut a = ws.s.clone();
        for i in 0..m {
            a[i * m + i] -= 1.0;
        }
        let mut rhs: Vec<f64> = (0..m).map(|i| x[i] - end[i]).collect();
        let resid = rhs.iter().fold(0.0f64, |a, r| a.max(r.abs()));
        if resid < 1e-9 * scale {
            break;
        }
        let mut piv = vec![0; m];
        dense::lu_factor(&mut a, m, &mut piv).ok_or(MultiplierError::Shooting(iterations))?;
        dense::lu_solve(&a, m, &piv, &mut rhs);
        let big = rhs.iter().fold(0.0f64, |a, d| a.max(d.abs()));
        let mut lambda = if big > 0.2 * scale {
            0.2 * scale / big
        } else {
            1.0
        };
        let mut accepted = None;
        for _ in 0..5 {
            let trial: Vec<f64> = x.iter().zip(&rhs).map(|(s, d)| s + lambda * d).collect();
            if trial.iter().all(|v| v.is_finite()) {
                let r = residual(&trial, &mut ws)?;
                if r < (1.0 - 0.25 * lambda) * resid {
                    accepted = Some(trial);
                    break;
                }
            }
            lambda *= 0.5;
        }
        x = match accepted {
            Some(t) => t,
            // No step helps: a plain period moves towards the steady state all the same.
            None => end,
        };
    }
    // One recorded period at the steady state: the output at the base and, separately, the
    // multiplier's own output s_n.
    let mut out = Vec::with_capacity(STEPS_PER_PERIOD);
    let mut top = Vec::with_capacity(STEPS_PER_PERIOD);
    {
        let mut y = x.clone();
        let h = 1.0 / (ckt.omega / (2.0 * std::f64::consts::PI)) / STEPS_PER_PERIOD as f64;
        for k in 0..STEPS_PER_PERIOD {
            ckt.step(&mut y, k as f64 * h, h, &mut ws)?;
            out.push(y[ckt.out]);
            top.push(y[2 * ckt.n - 1]);
        }
    }
    let stats = |v: &[f64]| {
        let max = v.iter().copied().fold(f64::MIN, f64::max);
        let min = v.iter().copied().fold(f64::MAX, f64::min);
        let mean = v.iter().sum::<f64>() / v.len() as f64;
        (max, min, mean)
    };
    let (tmax, tmin, _) = stats(&top);
    let (omax, omin, omean) = stats(&out);
    Ok(SteadyState {
        no_load_volts: total,
        load_ohms,
        load_amps: omean / load_ohms,
        multiplier_max_volts: tmax,
        multiplier_ripple_volts: tmax - tmin,
        droop_volts: total - tmax,
        output_volts: omean,
        ripple_volts: omax - omin,
        waveform: out,
        iterations,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use uom::si::capacitance::nanofarad;
    use uom::si::frequency::kilohertz;

    fn mult(n: usize) -> Multiplier {
        Multiplier {
            stages: n,
            capacitance: Capacitance::new::<nanofarad>(10.0),
            frequency: Frequency::new::<kilohertz>(30.0),
            amplitude: ElectricPotential::new::<volt>(500.0),
            filter: None,
            diode: RECTIFIER,
        }
    }

    #[test]
    fn light_load_keeps_charge_balance() {
        // Charge conservation (Kirchhoff): over a steady period the mean load current equals
        // the output over the load; the no-load figure is 2 n V_p (textbook).
        let m = mult(2);
        let s = steady_state(&m, ElectricalResistance::new::<ohm>(10e6)).unwrap();
        assert_eq!(s.no_load_volts, 2000.0);
        assert!(s.droop_volts > 0.0 && s.droop_volts < 20.0, "{s:?}");
        assert!(s.ripple_volts > 0.0);
    }
}

/// The supply model's figures for a report: the steady state under the base's load, the
/// textbook figures beside it, and the gain ripple against the gain stability wanted.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SupplyModel {
    /// Number of stages.
    pub stages: usize,
    /// Capacitance of each multiplier capacitor, farads.
    pub capacitance_farads: f64,
    /// Drive frequency, hertz.
    pub frequency_hz: f64,
    /// Drive amplitude (peak), volts.
    pub amplitude_volts: f64,
    /// Filter resistance and capacitance, if fitted.
    pub filter_ohms: Option<f64>,
    /// Filter capacitance, farads.
    pub filter_farads: Option<f64>,
    /// The solved steady state.
    pub steady: SteadyState,
    /// Mean output at the base against the design's supply setting, volts (positive: above).
    pub output_minus_setting_volts: f64,
    /// Drop below `2 n V_p` of the same multiplier with ideal diodes ([`IDEAL`]), volts: the
    /// figure the textbook formula describes.
    pub ideal_droop_volts: f64,
    /// Ripple at the multiplier's output with ideal diodes, volts.
    pub ideal_ripple_volts: f64,
    /// Textbook ripple at the multiplier's output, `I n (n+1) / (2 f C)`, volts.
    pub textbook_ripple_volts: f64,
    /// Textbook drop below `2 n V_p`, `(I / (f C)) (2n³/3 + n²/2 − n/6)`, volts.
    pub textbook_droop_volts: f64,
    /// Textbook ripple after the filter, divided by `2π f R C`, volts (no filter: as before).
    pub textbook_filtered_ripple_volts: f64,
    /// Peak-to-peak gain modulation by the ripple at the base, `S δV / V`, fraction.
    pub gain_ripple: f64,
    /// The gain stability it is judged against (given, or the example 1 %), fraction.
    pub gain_stability: f64,
    /// Whether the gain stability was given in the design.
    pub gain_stability_given: bool,
    /// Whether the gain ripple is within the gain stability.
    pub meets: bool,
}

/// Solve the design's multiplier under the base's load (`supply_amps` drawn at the supply
/// setting `supply_volts`) and judge the ripple's effect on the gain with sensitivity
/// `sensitivity` = d ln G / d ln V.
pub fn assess(
    mult: &Multiplier,
    supply_volts: f64,
    supply_amps: f64,
    sensitivity: f64,
    gain_stability: Option<f64>,
) -> Result<SupplyModel, MultiplierError> {
    let load = supply_volts / supply_amps.max(1e-15);
    let steady = steady_state(mult, ElectricalResistance::new::<ohm>(load))?;
    let ideal = steady_state(
        &Multiplier {
            diode: IDEAL,
            ..*mult
        },
        ElectricalResistance::new::<ohm>(load),
    )?;
    let (tr, td) = textbook(mult, ideal.load_amps);
    let f = mult.frequency.get::<hertz>();
    let filtered = match mult.filter {
        Some((r, c)) => {
            let wrc = 2.0 * std::f64::consts::PI * f * r.get::<ohm>() * c.get::<farad>();
            tr / wrc.max(1.0)
        }
        None => tr,
    };
    let gain_ripple = sensitivity.abs() * steady.ripple_volts / supply_volts;
    let stability = gain_stability.unwrap_or(crate::budget::stability::EXAMPLE_GAIN_STABILITY);
    Ok(SupplyModel {
        stages: mult.stages,
        capacitance_farads: mult.capacitance.get::<farad>(),
        frequency_hz: f,
        amplitude_volts: mult.amplitude.get::<volt>(),
        filter_ohms: mult.filter.map(|(r, _)| r.get::<ohm>()),
        filter_farads: mult.filter.map(|(_, c)| c.get::<farad>()),
        output_minus_setting_volts: steady.output_volts - supply_volts,
        ideal_droop_volts: ideal.droop_volts,
        ideal_ripple_volts: ideal.multiplier_ripple_volts,
        textbook_ripple_volts: tr,
        textbook_droop_volts: td,
        textbook_filtered_ripple_volts: filtered,
        gain_ripple,
        gain_stability: stability,
        gain_stability_given: gain_stability.is_some(),
        meets: gain_ripple <= stability,
        steady,
    })
}

/// Each multiplier capacitor with the most it holds (the ideal no-load charge: `V_p` on the
/// first capacitor of the oscillating column, `2 V_p` on every other, the filter capacitor at
/// `2 n V_p`): (label, farads, volts). The no-load figure is the worst case — the base
/// unplugged with the drive on — and the one a person meets after switch-off.
pub fn stored(mult: &Multiplier) -> Vec<(String, f64, f64)> {
    let c = mult.capacitance.get::<farad>();
    let vp = mult.amplitude.get::<volt>();
    let n = mult.stages;
    let mut v = Vec::new();
    for k in 1..=n {
        let vo = if k == 1 { vp } else { 2.0 * vp };
        v.push((format!("multiplier C{k} (oscillating column)"), c, vo));
    }
    for k in 1..=n {
        v.push((format!("multiplier C{k}' (smoothing column)"), c, 2.0 * vp));
    }
    if let Some((_, cf)) = mult.filter {
        v.push((
            "supply filter capacitor".to_string(),
            cf.get::<farad>(),
            2.0 * n as f64 * vp,
        ));
    }
    v
}
