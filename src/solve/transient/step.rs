//! One implicit step of the base: the node and gap-current equations in band-plus-border form,
//! the tube's currents by forward substitution, Newton's method on them.

use super::*;

impl Base {
    pub(super) fn var(&self, node: usize) -> Var {
        let n = self.n;
        match node {
            0 => Var::Fixed(0.0),
            j if j <= n + 1 => Var::Band(2 * (j - 1)),
            j if j == n + 2 => {
                if self.has_load_node {
                    Var::Band(2 * (n + 1))
                } else {
                    Var::Fixed(0.0)
                }
            }
            j if j == n + 3 => {
                if self.supply_resistor {
                    Var::Border
                } else {
                    Var::Fixed(self.supply)
                }
            }
            _ => Var::Fixed(self.supply),
        }
    }

    pub(super) fn tvar(j: usize) -> Var {
        Var::Band(2 * (j - 1) + 1)
    }

    /// Potentials of every node from the unknowns.
    pub(super) fn potentials(&self, x: &[f64], border: f64, out: &mut Vec<f64>) {
        out.clear();
        for node in 0..self.nodes() {
            out.push(match self.var(node) {
                Var::Fixed(v) => v,
                Var::Band(i) => x[i],
                Var::Border => border,
            });
        }
    }

    /// Assemble residual and Jacobian. `alpha0` and `hist` describe the capacitor currents
    /// `C (alpha0 v + hist)`; `alpha0 = 0` gives the DC equations.
    pub(super) fn assemble(
        &self,
        ik: f64,
        nv: &[f64],
        t: &[f64],
        alpha0: f64,
        hist: &[f64],
        sys: &mut System,
    ) {
        let n = self.n;
        sys.reset(self.unknowns());
        for &(a, b, part) in &self.elements {
            let (i, g) = part.current(nv[a] - nv[b]);
            sys.branch(self.var(a), self.var(b), i, g);
        }
        for (c, &(a, b, farads)) in self.caps.iter().enumerate() {
            let i = farads * (alpha0 * (nv[a] - nv[b]) + hist[c]);
            sys.branch(self.var(a), self.var(b), i, farads * alpha0);
        }
        // Followers (docs/physics.md §14): a positive current is sunk from the dynode to the
        // cathode end, a negative one sourced from the return rail into the dynode.
        let rail = self.var(n + 3);
        for f in &self.followers {
            let j = f.dynode;
            let (i, g) = f.current(nv[j], nv[n + 3]);
            let vj = self.var(j);
            sys.residual(vj, i);
            sys.jac(vj, vj, g);
            sys.jac(vj, rail, -f.fraction * g);
            if i < 0.0 {
                sys.residual(rail, -i);
                sys.jac(rail, vj, -g);
                sys.jac(rail, rail, f.fraction * g);
            }
        }
        let tube = &self.tube;
        for j in 1..=n + 1 {
            let row = Self::tvar(j);
            let u = nv[j] - nv[j - 1];
            // Dynode j-1's yield depends on the gap before it and on the gap u that collects.
            let (offered, de_dt, de_du, de_du_coll) = if j == 1 {
                (ik, 0.0, 0.0, 0.0)
            } else {
                let up = nv[j - 1] - nv[j - 2];
                let eta = if j == 2 { tube.collection } else { 1.0 };
                let (d, d_acc, d_coll) = tube.delta(up, u);
                (
                    eta * d * t[j - 2],
                    eta * d,
                    eta * d_acc * t[j - 2],
                    eta * d_coll * t[j - 2],
                )
            };
            let (f, fc, fu) = tube.transmit(offered, u);
            let fu = fu + fc * de_du_coll;
            sys.residual(row, t[j - 1] - f);
            sys.jac(row, row, 1.0);
            sys.jac(row, self.var(j), -fu);
            sys.jac(row, self.var(j - 1), fu);
            if j >= 2 {
                sys.jac(row, Self::tvar(j - 1), -fc * de_dt);
                sys.jac(row, self.var(j - 1), -fc * de_du);
                sys.jac(row, self.var(j - 2), fc * de_du);
            }
            // Electrode j receives the electron current t_j: conventional current t_j leaves
            // it into the tube. (Dynode j then nets t_{j+1} - t_j in, as in the DC solve.)
            let v_to = self.var(j);
            sys.residual(v_to, t[j - 1]);
            sys.jac(v_to, row, 1.0);
            // Electrode j-1 emits it: conventional current t_j enters.
            let v_from = self.var(j - 1);
            sys.residual(v_from, -t[j - 1]);
            sys.jac(v_from, row, -1.0);
        }
    }

    /// Fill the tube currents from the potentials by forward substitution.
    pub(super) fn forward_currents(&self, ik: f64, nv: &[f64], t: &mut [f64]) {
        let mut offered = ik;
        for j in 1..=self.n + 1 {
            let u = nv[j] - nv[j - 1];
            let (tj, _, _) = self.tube.transmit(offered, u);
            t[j - 1] = tj;
            if j <= self.n {
                let (d, _, _) = self.tube.delta(u, nv[j + 1] - nv[j]);
                offered = d * tj * if j == 1 { self.tube.collection } else { 1.0 };
            }
        }
    }

    pub(super) fn pack(&self, nv: &[f64], t: &[f64], x: &mut Vec<f64>) -> f64 {
        x.clear();
        x.resize(self.unknowns(), 0.0);
        let mut border = self.supply;
        for node in 0..self.nodes() {
            match self.var(node) {
                Var::Band(i) => x[i] = nv[node],
                Var::Border => border = nv[node],
                Var::Fixed(_) => {}
            }
        }
        for j in 1..=self.n + 1 {
            if let Var::Band(i) = Self::tvar(j) {
                x[i] = t[j - 1];
            }
        }
        border
    }

    /// Newton solve at one time point; `nv`, `t` hold the start and receive the solution.
    #[allow(clippy::too_many_arguments)]
    pub(super) fn newton(
        &self,
        ik: f64,
        alpha0: f64,
        hist: &[f64],
        nv: &mut Vec<f64>,
        t: &mut [f64],
        vtol: &[f64],
        ws: &mut Scratch,
    ) -> Result<usize, String> {
        let n = self.n;
        let bordered = self.supply_resistor;
        for iter in 0..40 {
            self.assemble(ik, nv, t, alpha0, hist, &mut ws.sys);
            let Some(dw) = ws.sys.solve(bordered) else {
                return Err("the node equations are singular".into());
            };
            let border = self.pack(nv, t, &mut ws.x);
            // Limit a voltage update to a tenth of the supply per iteration (damping far from
            // the solution, inactive near it).
            let vmax = ws
                .sys
                .res
                .iter()
                .step_by(2)
                .fold(dw.abs(), |m, d| m.max(d.abs()));
            let lambda = if vmax > 0.1 * self.supply {
                0.1 * self.supply / vmax
            } else {
                1.0
            };
            let mut converged = true;
            for (i, d) in ws.sys.res.iter().enumerate() {
                ws.x[i] -= lambda * d;
            }
            let border = border - lambda * dw;
            // Convergence: voltage updates far below the error tolerance, current updates
            // relative to the current.
            for node in 1..self.nodes() {
                if let Var::Band(i) = self.var(node) {
                    let tol = vtol[node];
                    if (lambda * ws.sys.res[i]).abs() > tol {
                        converged = false;
                    }
                }
            }
            if bordered && (lambda * dw).abs() > vtol[n + 3] {
                converged = false;
            }
            for j in 1..=n + 1 {
                if let Var::Band(i) = Self::tvar(j) {
                    let d = (lambda * ws.sys.res[i]).abs();
                    if d > 1e-9 * ws.x[i].abs() + 1e-300 {
                        converged = false;
                    }
                }
            }
            let x = std::mem::take(&mut ws.x);
            self.potentials(&x, border, nv);
            for j in 1..=n + 1 {
                if let Var::Band(i) = Self::tvar(j) {
                    t[j - 1] = x[i];
                }
            }
            ws.x = x;
            if !nv.iter().chain(t.iter()).all(|v| v.is_finite()) {
                return Err("the solution left finite numbers".into());
            }
            if converged && iter >= 1 {
                return Ok(iter + 1);
            }
        }
        Err("Newton's method did not converge in 40 iterations".into())
    }
}

/// Reusable buffers of a run.
#[derive(Debug, Clone, Default)]
pub(super) struct Scratch {
    sys: System,
    x: Vec<f64>,
}
