//! The DC solve: residual and band Jacobian of the node and current equations, Newton's method
//! with backtracking (on the one band LU of [`crate::numerics::band`]) and pseudo-transient continuation, the secant on a supply's output resistance.

use super::*;

impl Network {
    fn initial_guess(&self, ik: f64, x: &mut Vec<f64>) {
        let n = self.stages();
        let (_, w) = self.quiescent();
        x.clear();
        x.resize(2 * (n + 1), 0.0);
        let mut v = 0.0;
        for j in 0..n {
            v += w[j];
            x[2 * j] = v;
        }
        // Anode near the return rail.
        x[2 * n] = self.supply;
        self.forward_currents(ik, x);
        x[2 * n] = self.supply - x[2 * n + 1] * self.anode_resistance;
        self.forward_currents(ik, x);
    }

    /// Fill the tube currents from the potentials by forward substitution (explicit chain).
    fn forward_currents(&self, ik: f64, x: &mut [f64]) {
        let n = self.stages();
        let mut prev_v = 0.0;
        let mut offered = ik;
        for j in 0..=n {
            let u = x[2 * j] - prev_v;
            let (t, _, _) = self.tube.transmit(offered, u);
            x[2 * j + 1] = t;
            if j < n {
                // Dynode j+1: accelerated by gap j, collected by gap j+1.
                let (d, _, _) = self.tube.delta(u, x[2 * (j + 1)] - x[2 * j]);
                offered = d * t * if j == 0 { self.tube.collection } else { 1.0 };
            }
            prev_v = x[2 * j];
        }
    }

    /// Residual and (optionally) the Jacobian, in band storage.
    fn evaluate(&self, ik: f64, x: &[f64], res: &mut [f64], jac: Option<&mut BandLu>) {
        let n = self.stages();
        let v = |j: usize| if j == 0 { 0.0 } else { x[2 * (j - 1)] }; // electrode j potential
        let vi = |j: usize| 2 * (j - 1); // index of v_j (j >= 1)
        let ti = |j: usize| 2 * (j - 1) + 1; // index of t_j
        let mut jac = jac;
        if let Some(jm) = jac.as_deref_mut() {
            jm.clear();
        }
        let set = |jm: &mut Option<&mut BandLu>, r: usize, c: usize, val: f64| {
            if let Some(jm) = jm.as_deref_mut() {
                jm.add(r, c, val);
            }
        };
        // Current equations C_j, rows ti(j).
        for j in 1..=n + 1 {
            let row = ti(j);
            let u = v(j) - v(j - 1);
            // Dynode j-1 offers its secondaries: its yield depends on the gap before it
            // (u_{j-1}) and on the gap u_j that collects them.
            let (offered, de_dt, de_du_prev, de_du) = if j == 1 {
                (ik, 0.0, 0.0, 0.0)
            } else {
                let up = v(j - 1) - v(j - 2);
                let eta = if j == 2 { self.tube.collection } else { 1.0 };
                let (d, d_acc, d_coll) = self.tube.delta(up, u);
                let tp = x[ti(j - 1)];
                (eta * d * tp, eta * d, eta * d_acc * tp, eta * d_coll * tp)
            };
            let (f, fc, fu) = self.tube.transmit(offered, u);
            let fu = fu + fc * de_du;
            res[row] = x[row] - f;
            set(&mut jac, row, row, 1.0);
            // through u_j = v_j - v_{j-1}
            set(&mut jac, row, vi(j), -fu);
            if j >= 2 {
                set(&mut jac, row, vi(j - 1), fu);
                set(&mut jac, row, ti(j - 1), -fc * de_dt);
                // through u_{j-1} = v_{j-1} - v_{j-2}
                set(&mut jac, row, vi(j - 1), -fc * de_du_prev);
                if j >= 3 {
                    set(&mut jac, row, vi(j - 2), fc * de_du_prev);
                }
            }
        }
        // Node equations N_j at dynodes, rows vi(j).
        for j in 1..=n {
            let row = vi(j);
            let w_below = v(j) - v(j - 1);
            let (i_below, g_below) = self.parts[j - 1].current(w_below);
            let w_above = if j < n {
                v(j + 1) - v(j)
            } else {
                self.supply - v(j)
            };
            let (i_above, g_above) = self.parts[j].current(w_above);
            res[row] = i_above - i_below + x[ti(j + 1)] - x[ti(j)];
            set(&mut jac, row, vi(j), -g_above - g_below);
            if j >= 2 {
                set(&mut jac, row, vi(j - 1), g_below);
            }
            if j < n {
                set(&mut jac, row, vi(j + 1), g_above);
            }
            set(&mut jac, row, ti(j + 1), 1.0);
            set(&mut jac, row, ti(j), -1.0);
        }
        // Followers sink current from their dynodes to fixed rails: the diagonal only.
        for f in &self.followers {
            let row = vi(f.dynode);
            let (i, g) = f.current(x[row], self.supply);
            res[row] -= i;
            set(&mut jac, row, row, -g);
        }
        // Anode equation, row vi(n+1).
        let row = vi(n + 1);
        res[row] = (self.supply - x[row]) / self.anode_resistance - x[ti(n + 1)];
        set(&mut jac, row, row, -1.0 / self.anode_resistance);
        set(&mut jac, row, ti(n + 1), -1.0);
    }

    fn scaled_norm(res: &[f64], scale: &[f64]) -> f64 {
        res.iter()
            .zip(scale)
            .map(|(r, s)| (r * s).abs())
            .fold(0.0, f64::max)
    }

    fn row_scales(&self, ik: f64, i0: f64, x: &[f64], scale: &mut Vec<f64>) {
        let n = self.stages();
        scale.clear();
        scale.resize(2 * (n + 1), 0.0);
        for j in 0..=n {
            scale[2 * j] = 1.0 / i0.max(1e-300);
            // Current rows relative to the current they carry (never below the cathode current).
            scale[2 * j + 1] = 1.0 / x[2 * j + 1].abs().max(ik.abs()).max(1e-300);
        }
        // The anode row, (Vs − Va)/R − t, subtracts two potentials near the supply: its
        // round-off is about ε·Vs/R, which with a small load and a weak divider (GΩ parts) is
        // far above 1e-10·i0, and Newton's method would stall there. With this floor the row
        // is converged once the anode potential is within 100·ε·Vs (25 pV at 1.1 kV), which
        // moves no figure.
        let floor = 1e12 * f64::EPSILON * self.supply.abs() / self.anode_resistance;
        scale[2 * n] = 1.0 / i0.max(floor).max(1e-300);
    }

    /// Solve at a given cathode (photo)current, starting from `start` when given.
    pub fn solve_cathode(
        &self,
        cathode: ElectricCurrent,
        start: Option<&OperatingPoint>,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        self.solve_raw(cathode.get::<ampere>(), start, ws)
    }

    /// As [`Network::solve_cathode`] with plain amperes (hot loops).
    ///
    /// With a supply output resistance `R_s` the voltage across the base is `V_s − R_s I_s`,
    /// where `I_s` is the supply current the base draws at that voltage: a secant iteration on
    /// the rail voltage, each step a solve with the rail held (the map is close to linear, the
    /// divider being nearly ohmic, so two or three steps reach 1e-12 of the supply).
    pub fn solve_raw(
        &self,
        ik: f64,
        start: Option<&OperatingPoint>,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        if self.supply_resistance <= 0.0 {
            return self.solve_fixed_rail(ik, start, ws);
        }
        let mut inner = self.clone();
        inner.supply_resistance = 0.0;
        // Residual of a rail voltage: how far the drop it implies misses it.
        let mut residual = |rail: f64, start: Option<&OperatingPoint>, ws: &mut Workspace| {
            inner.supply = rail;
            let op = inner.solve_fixed_rail(ik, start, ws)?;
            let miss = rail - (self.supply - self.supply_resistance * op.supply_amps());
            Ok::<_, SolveError>((miss, op))
        };
        let mut a = start.map_or(
            self.supply - self.supply_resistance * self.quiescent().0,
            |s| s.rail_volts,
        );
        let (mut fa, mut op) = residual(a, start, ws)?;
        let mut b = a - fa;
        for _ in 0..60 {
            if fa.abs() <= 1e-12 * self.supply {
                break;
            }
            let (fb, next) = residual(b, Some(&op), ws)?;
            op = next;
            let slope = (fb - fa) / (b - a);
            let step = if slope.is_finite() && slope.abs() > 1e-3 {
                fb / slope
            } else {
                fb
            };
            (a, fa) = (b, fb);
            b -= step;
        }
        if fa.abs() > 1e-9 * self.supply {
            return Err(SolveError::NoConvergence {
                iterations: op.iterations,
                residual: fa,
                cathode_amps: ik,
            });
        }
        op.rail_volts = a;
        Ok(op)
    }

    /// Newton's method with the return rail held at `self.supply`.
    ///
    /// Newton's method from `start` (or from the no-current divider). Should it fail — past a
    /// turning point of the curve, where the branch it follows ends — the solve falls back on
    /// pseudo-transient continuation: node capacitances `c` are added and the network is stepped
    /// in implicit Euler pseudo-time, `F(v) - c (v - v_old) = 0`, with `c` shrinking
    /// geometrically, so the state slides to the stable steady state as a real base would.
    fn solve_fixed_rail(
        &self,
        ik: f64,
        start: Option<&OperatingPoint>,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        let n = self.stages();
        ws.i0 = self.quiescent().0;
        let mut x = std::mem::take(&mut ws.x);
        let warm = |x: &mut Vec<f64>| match start {
            Some(op) if op.potentials.len() == n + 1 => {
                x.clear();
                for j in 0..=n {
                    x.push(op.potentials[j]);
                    x.push(op.tube_currents[j]);
                }
                self.forward_currents(ik, x);
            }
            _ => self.initial_guess(ik, x),
        };
        warm(&mut x);
        let mut result = self.newton(ik, &mut x, None, ws);
        if result.is_err() {
            warm(&mut x);
            let (i0, _) = self.quiescent();
            let g0 = i0 / self.supply; // a typical node conductance
            let mut old = x.clone();
            let mut c = 1e3 * g0;
            let mut ok = true;
            let mut refusals = 0;
            while c > 1e-9 * g0 {
                if self.newton(ik, &mut x, Some((c, &old)), ws).is_ok() {
                    old.copy_from_slice(&x);
                    c *= 0.3;
                } else {
                    // Too long a pseudo-time step: go back and take a shorter one.
                    x.copy_from_slice(&old);
                    self.forward_currents(ik, &mut x);
                    c *= 10.0;
                    refusals += 1;
                    if refusals > 40 || c > 1e12 * g0 {
                        ok = false;
                        break;
                    }
                }
            }
            if ok {
                result = self.newton(ik, &mut x, None, ws);
            }
        }
        let out = match result {
            Ok(iterations) if x.iter().all(|v| v.is_finite()) => {
                Ok(self.operating_point(ik, &x, iterations))
            }
            Ok(iterations) => Err(SolveError::NoConvergence {
                iterations,
                residual: f64::NAN,
                cathode_amps: ik,
            }),
            Err(e) => Err(e),
        };
        ws.x = x;
        out
    }

    fn operating_point(&self, ik: f64, x: &[f64], iterations: usize) -> OperatingPoint {
        let n = self.stages();
        let potentials: Vec<f64> = (0..=n).map(|j| x[2 * j]).collect();
        let tube_currents: Vec<f64> = (0..=n).map(|j| x[2 * j + 1]).collect();
        let mut element_volts = Vec::with_capacity(n + 1);
        let mut element_amps = Vec::with_capacity(n + 1);
        let mut prev = 0.0;
        for j in 0..=n {
            let top = if j < n { potentials[j] } else { self.supply };
            let w = top - prev;
            element_volts.push(w);
            element_amps.push(self.parts[j].current(w).0);
            prev = top;
        }
        OperatingPoint {
            potentials,
            tube_currents,
            element_volts,
            element_amps,
            cathode_amps: ik,
            iterations,
            rail_volts: self.supply,
            follower_amps: self
                .followers
                .iter()
                .map(|f| f.current(x[2 * (f.dynode - 1)], self.supply).0)
                .collect(),
            string_amps: self.supply / self.string_resistance,
        }
    }

    /// Newton iterations in place on `x`; `pseudo = (c, v_old)` adds the pseudo-transient term.
    fn newton(
        &self,
        ik: f64,
        x: &mut [f64],
        pseudo: Option<(f64, &[f64])>,
        ws: &mut Workspace,
    ) -> Result<usize, SolveError> {
        let n = self.stages();
        let m = 2 * (n + 1);
        ws.lu.reset(m);
        ws.res.resize(m, 0.0);
        ws.dx.resize(m, 0.0);
        ws.trial.resize(m, 0.0);
        ws.res_trial.resize(m, 0.0);
        let mut scale = std::mem::take(&mut ws.scale);
        let max_iter = 60;
        let mut norm = f64::INFINITY;
        let mut result = Err(max_iter);
        let add_pseudo = |x: &[f64], res: &mut [f64], jac: Option<&mut BandLu>| {
            if let Some((c, old)) = pseudo {
                for j in 0..=n {
                    let i = 2 * j;
                    res[i] -= c * (x[i] - old[i]);
                }
                if let Some(jm) = jac {
                    for j in 0..=n {
                        let i = 2 * j;
                        jm.add(i, i, -c);
                    }
                }
            }
        };
        // The residual and Jacobian at the accepted trial point are kept for the next step, so
        // that each Newton step costs one evaluation when no backtracking is needed.
        let mut have = false;
        for iter in 0..max_iter {
            self.row_scales(ik, ws.i0, x, &mut scale);
            if !have {
                self.evaluate(ik, x, &mut ws.res, Some(&mut ws.lu));
                add_pseudo(x, &mut ws.res, Some(&mut ws.lu));
            }
            norm = Self::scaled_norm(&ws.res, &scale);
            ws.dx.copy_from_slice(&ws.res);
            if !ws.lu.factor_solve(&mut ws.dx) {
                ws.scale = scale;
                return Err(SolveError::Singular);
            }
            // Already converged: the residual is at rounding level and the step is tiny.
            let full_step = (0..=n)
                .map(|j| ws.dx[2 * j].abs() / self.supply)
                .fold(0.0, f64::max);
            if norm < 1e-11 && full_step < 1e-10 {
                for i in 0..m {
                    x[i] -= ws.dx[i];
                }
                result = Ok(iter + 1);
                break;
            }
            // Newton step x - J^-1 F, with backtracking on the scaled residual.
            let mut lambda = 1.0;
            let mut accepted = false;
            let mut trial_norm = norm;
            for _ in 0..30 {
                for i in 0..m {
                    ws.trial[i] = x[i] - lambda * ws.dx[i];
                }
                self.evaluate(ik, &ws.trial, &mut ws.res_trial, Some(&mut ws.lu));
                add_pseudo(&ws.trial, &mut ws.res_trial, Some(&mut ws.lu));
                trial_norm = Self::scaled_norm(&ws.res_trial, &scale);
                if trial_norm.is_finite() && (trial_norm < norm || trial_norm < 1e-11) {
                    accepted = true;
                    break;
                }
                lambda *= 0.5;
            }
            if !accepted {
                // No descent: converged only if the residual is already negligible.
                if norm < 1e-8 {
                    result = Ok(iter);
                }
                break;
            }
            x.copy_from_slice(&ws.trial);
            std::mem::swap(&mut ws.res, &mut ws.res_trial);
            have = true;
            let step = (0..=n)
                .map(|j| (lambda * ws.dx[2 * j]).abs() / self.supply)
                .fold(0.0, f64::max);
            norm = trial_norm;
            if trial_norm < 1e-10 && step < 1e-10 {
                result = Ok(iter + 1);
                break;
            }
        }
        ws.scale = scale;
        result.map_err(|iterations| SolveError::NoConvergence {
            iterations,
            residual: norm,
            cathode_amps: ik,
        })
    }
}

#[cfg(test)]
mod jacobian_tests {
    use super::*;
    use crate::design::parse_str;
    use crate::numerics::band::{KL, KU};

    pub(crate) fn demo_network() -> Network {
        let text = std::fs::read_to_string(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/designs/photon-counter-positive.ron"
        ))
        .unwrap();
        let d = parse_str(&text, "demo").unwrap();
        let t = TubeModel::from_spec(&d.tube).unwrap();
        Network::from_design(&d, t)
    }

    #[test]
    fn jacobian_matches_finite_differences() {
        let net = demo_network();
        let mut ws = Workspace::default();
        let ik = 2.0e-11;
        let op = net.solve_raw(ik * 0.9, None, &mut ws).unwrap();
        let n = net.stages();
        let m = 2 * (n + 1);
        let mut x = Vec::new();
        for j in 0..=n {
            x.push(op.potentials[j]);
            x.push(op.tube_currents[j]);
        }
        let mut jac = BandLu::default();
        jac.reset(m);
        let mut r0 = vec![0.0; m];
        net.evaluate(ik, &x, &mut r0, Some(&mut jac));
        for c in 0..m {
            let h = if c % 2 == 0 {
                1e-4
            } else {
                x[c].abs() * 1e-6 + 1e-18
            };
            let mut xp = x.clone();
            xp[c] += h;
            let mut xm = x.clone();
            xm[c] -= h;
            let mut rp = vec![0.0; m];
            let mut rm = vec![0.0; m];
            net.evaluate(ik, &xp, &mut rp, None);
            net.evaluate(ik, &xm, &mut rm, None);
            for r in 0..m {
                let num = (rp[r] - rm[r]) / (2.0 * h);
                let ana = if c + KL >= r && c <= r + KU {
                    jac.get(r, c)
                } else {
                    0.0
                };
                let tol = 1e-5 * (num.abs() + ana.abs()) + 1e-14;
                assert!(
                    (num - ana).abs() <= tol,
                    "J[{r}][{c}] analytic {ana:e} numeric {num:e}"
                );
            }
        }
    }
}
