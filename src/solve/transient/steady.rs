//! Steady state of a continuous rate (docs/physics.md §13).
//!
//! - **Periodic**: the state `x0` at the start of a period that one period maps to itself,
//!   `x0 = Φ(x0)`, found by shooting: quasi-Newton on `F(x) = x − Φ(x)` with Broyden's update
//!   of the inverse Jacobian, started from `(I − P_T)⁻¹`, `P_T` the exact propagator of the
//!   pulse-free base over one period (the pulse itself moves the state by a kick that depends
//!   only weakly on it, so this is close to the true Jacobian and few periods are solved).
//! - **Poisson**: the capacitors' drops at the end of each pulse, for arrivals at a mean rate,
//!   by superposition on the pulse-free base: the pulse is the kick it gives at the periodic
//!   steady state of the mean rate (its dependence on the state within the spread is left out),
//!   the intervals exponential; in modal coordinates the pulse-end states follow
//!   `z_{i+1} = e^{−Λ τ_i} z_i + k`, started at their stationary mean `k (r + λ)/λ`, and the
//!   drop exceeded by a given fraction of pulses is read off a long seeded sequence.

use super::quiet::Modal;
use super::{Base, Run, RunOptions, TransientError};
use crate::design::train::{Shape, SplitMix64};

/// The periodic steady state of a repeating pattern of arrivals.
#[derive(Debug, Clone, PartialEq)]
pub struct SteadyState {
    /// Period, seconds.
    pub period: f64,
    /// Node potentials at the start of a period (before its first pulse).
    pub start: Vec<f64>,
    /// One period from the steady state.
    pub run: Run,
    /// One-period maps solved by the shooting.
    pub iterations: usize,
    /// Largest `|x0 − Φ(x0)|` at the end, volts.
    pub residual: f64,
}

fn fail(reason: String) -> TransientError {
    TransientError::Failed { time: 0.0, reason }
}

impl Base {
    /// The periodic steady state of pulses of cathode charge `qk` arriving at `offsets`
    /// (seconds, sorted, in `[0, period)`) in every period.
    pub fn periodic_steady_state(
        &self,
        offsets: &[f64],
        period: f64,
        shape: &Shape,
        qk: f64,
    ) -> Result<SteadyState, TransientError> {
        let (q, _) = self.quiescent_state()?;
        let modal = Modal::new(self, &q);
        let nodes: Vec<usize> = match &modal {
            Some(md) => md.nodes.clone(),
            None => (1..self.nodes())
                .filter(|&k| !matches!(self.var(k), super::Var::Fixed(_)))
                .collect(),
        };
        let m = nodes.len();
        // Initial inverse Jacobian (I − P_T)⁻¹, or the identity without a modal form.
        let mut h = modal
            .as_ref()
            .and_then(|md| {
                let mut a = vec![0.0; m * m];
                for i in 0..m {
                    for j in 0..m {
                        let p: f64 = (0..m)
                            .map(|k| {
                                md.v[i * m + k] * (-md.lambda[k] * period).exp() * md.w[k * m + j]
                            })
                            .sum();
                        a[i * m + j] = f64::from(u8::from(i == j)) - p;
                    }
                }
                crate::numerics::dense::invert(a, m)
            })
            .unwrap_or_else(|| {
                let mut e = vec![0.0; m * m];
                (0..m).for_each(|i| e[i * m + i] = 1.0);
                e
            });
        let opts = RunOptions {
            recovery_band: None,
            stop_at: Some(period),
            ..RunOptions::default()
        };
        let map = |x: &[f64]| -> Result<(Vec<f64>, Run), TransientError> {
            let run = self.run_from(Some(x), offsets, shape, qk, &opts)?;
            let f: Vec<f64> = nodes.iter().map(|&k| x[k] - run.final_state.1[k]).collect();
            Ok((f, run))
        };
        let tol = 1e-9 * self.supply;
        let mut x = q.clone();
        let (mut f, mut run) = map(&x)?;
        let mut iterations = 1;
        let norm = |f: &[f64]| f.iter().fold(0.0f64, |a, b| a.max(b.abs()));
        while norm(&f) > tol && iterations < 60 {
            let s: Vec<f64> = (0..m)
                .map(|i| -(0..m).map(|j| h[i * m + j] * f[j]).sum::<f64>())
                .collect();
            let mut x_new = x.clone();
            for (i, &k) in nodes.iter().enumerate() {
                x_new[k] += s[i];
            }
            let (f_new, run_new) = map(&x_new)?;
            iterations += 1;
            // Broyden's ("good") update of the inverse Jacobian.
            let y: Vec<f64> = f_new.iter().zip(&f).map(|(a, b)| a - b).collect();
            let hy: Vec<f64> = (0..m)
                .map(|i| (0..m).map(|j| h[i * m + j] * y[j]).sum())
                .collect();
            let sh: Vec<f64> = (0..m)
                .map(|j| (0..m).map(|i| s[i] * h[i * m + j]).sum())
                .collect();
            let denom: f64 = s.iter().zip(&hy).map(|(a, b)| a * b).sum();
            if denom.abs() > 1e-300 && denom.is_finite() {
                for i in 0..m {
                    for j in 0..m {
                        h[i * m + j] += (s[i] - hy[i]) * sh[j] / denom;
                    }
                }
            }
            x = x_new;
            f = f_new;
            run = run_new;
        }
        let residual = norm(&f);
        if !residual.is_finite() || residual > 1e-6 * self.supply {
            return Err(fail(format!(
                "the periodic steady state did not converge ({residual:.2e} V after {iterations} periods)"
            )));
        }
        Ok(SteadyState {
            period,
            start: x,
            run,
            iterations,
            residual,
        })
    }

    /// Drops of each decoupling capacitor below its value before the train at the end of a
    /// pulse, for Poisson arrivals at `rate`: the value exceeded in a fraction `1 − p` of
    /// pulses (`p = 0.99`: in 1 %) and the mean, volts. `steady` is the periodic steady state
    /// at the same mean rate; `pulses` pulses are drawn from `seed`.
    #[allow(clippy::too_many_arguments)]
    pub fn poisson_droop(
        &self,
        steady: &SteadyState,
        shape: &Shape,
        qk: f64,
        rate: f64,
        p: f64,
        seed: u64,
        pulses: usize,
    ) -> Result<(Vec<f64>, Vec<f64>), TransientError> {
        let (q, _) = self.quiescent_state()?;
        let md = Modal::new(self, &q)
            .ok_or_else(|| fail("the base has no modal form for the Poisson statistics".into()))?;
        let m = md.len();
        let support = shape.support();
        let one = self.run_from(
            Some(&steady.start),
            &[0.0],
            shape,
            qk,
            &RunOptions {
                recovery_band: None,
                stop_at: Some(support),
                ..RunOptions::default()
            },
        )?;
        let (mut z_before, mut z_end) = (Vec::new(), Vec::new());
        md.to_modal(&steady.start, &mut z_before);
        md.to_modal(&one.final_state.1, &mut z_end);
        let kick: Vec<f64> = (0..m)
            .map(|i| z_end[i] - (-md.lambda[i] * support).exp() * z_before[i])
            .collect();
        // Each capacitor's voltage as a constant plus a row times z.
        let index = |node: usize| md.nodes.iter().position(|&k| k == node);
        let caps: Vec<(f64, Vec<f64>)> = (0..self.decoupling.len())
            .map(|c| {
                let (a, b) = self.decoupling[c];
                let part = |node: usize| match index(node) {
                    Some(i) => (md.x_inf[i], md.v[i * m..(i + 1) * m].to_vec()),
                    None => (q[node], vec![0.0; m]),
                };
                let ((ca, ra), (cb, rb)) = (part(a), part(b));
                let initial = self.cap_volts(&q, c);
                (
                    initial - (ca - cb),
                    ra.iter().zip(&rb).map(|(x, y)| x - y).collect(),
                )
            })
            .collect();
        // When, after a lone pulse's end, each capacitor is lowest (a capacitor low in the
        // chain goes on falling while the ones above it recharge): scan, then golden section.
        let response = |row: &[f64], dt: f64| -> f64 {
            (0..m)
                .map(|i| row[i] * kick[i] * (-md.lambda[i] * dt).exp())
                .sum()
        };
        let tau_max = md
            .lambda
            .iter()
            .copied()
            .fold(f64::INFINITY, f64::min)
            .recip();
        let lowest: Vec<Vec<f64>> = caps
            .iter()
            .map(|(_, row)| {
                let (mut best, mut at) = (response(row, 0.0), 0.0);
                let mut dt = 1e-3 * support;
                while dt < 10.0 * tau_max {
                    let v = response(row, dt);
                    if v < best {
                        (best, at) = (v, dt);
                    }
                    dt *= 1.25;
                }
                if at > 0.0 {
                    let (mut a, mut b) = (at / 1.25, at * 1.25);
                    let g = 0.5 * (5f64.sqrt() - 1.0);
                    for _ in 0..60 {
                        let (c, d) = (b - g * (b - a), a + g * (b - a));
                        if response(row, c) < response(row, d) {
                            b = d;
                        } else {
                            a = c;
                        }
                    }
                    at = 0.5 * (a + b);
                }
                // The decay factors from the pulse's end to that moment.
                let decay: Vec<f64> = md.lambda.iter().map(|l| (-l * at).exp()).collect();
                vec![at].into_iter().chain(decay).collect()
            })
            .collect();
        // Start at the stationary mean of the pulse-end states.
        let mut z: Vec<f64> = (0..m)
            .map(|i| kick[i] * (rate + md.lambda[i]) / md.lambda[i])
            .collect();
        let burn = 1000;
        let mut g = SplitMix64(seed ^ 0x005E_ED0F_D800_0000);
        let mut drops: Vec<Vec<f64>> = vec![Vec::with_capacity(pulses); caps.len()];
        let mut next = vec![0.0; m];
        for i in 0..pulses + burn {
            let tau = -g.unit_open().ln() / rate;
            for k in 0..m {
                // A mode decayed by e^-40 (4e-18, below a double's resolution of the other
                // terms) is zero: the exponential's slow underflow path is skipped.
                let x = md.lambda[k] * tau;
                next[k] = if x < 40.0 { (-x).exp() * z[k] } else { 0.0 };
            }
            if i >= burn {
                for (c, (offset, row)) in caps.iter().enumerate() {
                    let at_end: f64 = row.iter().zip(&z).map(|(r, x)| r * x).sum();
                    let later: f64 = if lowest[c][0] < tau {
                        (0..m).map(|k| row[k] * lowest[c][k + 1] * z[k]).sum()
                    } else {
                        row.iter().zip(&next).map(|(r, x)| r * x).sum()
                    };
                    drops[c].push(offset - at_end.min(later));
                }
            }
            for k in 0..m {
                z[k] = next[k] + kick[k];
            }
        }
        let mut quantile = Vec::new();
        let mut mean = Vec::new();
        for d in &mut drops {
            mean.push(d.iter().sum::<f64>() / d.len().max(1) as f64);
            let idx = ((p * d.len() as f64).ceil() as usize).clamp(1, d.len().max(1)) - 1;
            let (_, v, _) = d.select_nth_unstable_by(idx, f64::total_cmp);
            quantile.push(*v);
        }
        Ok((quantile, mean))
    }
}
