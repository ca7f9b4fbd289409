//! Quiet intervals: between pulses no tube current flows (the cathode current is zero, so every
//! gap current is zero) and the base is a linear RC network, `C x' = −(G x + f)`, with `C` the
//! capacitance matrix and `G` the conductance matrix of the unknown node potentials (both
//! symmetric positive definite: every node reaches a fixed potential through capacitors and
//! through conductances), `f` the fixed potentials' and the Zeners' offsets. A Zener is linear
//! inside one region (leakage below its knee, its dynamic resistance above), so the network is
//! linear as long as no Zener changes region; the caller checks that.
//!
//! The pencil `(G, C)` is reduced to a symmetric eigenproblem with the Cholesky factor
//! `C = L Lᵀ`: `A = L⁻¹ G L⁻ᵀ = Q Λ Qᵀ` (cyclic Jacobi rotations, accurate for the graded
//! matrices a base gives, time constants from a nanosecond to seconds). With `V = L⁻ᵀ Q` and
//! `W = Qᵀ Lᵀ = V⁻¹` the solution is exact for any interval:
//! `x(t) = x∞ + V e^{−Λ t} W (x(0) − x∞)`, `x∞ = −G⁻¹ f = −V Λ⁻¹ Vᵀ f`
//! (Golub & Van Loan, *Matrix Computations*, §8.7, the symmetric-definite problem).

use super::{Base, Var, watch::Watch};
use crate::solve::network::Part;

/// A quiet interval to cross.
pub(super) struct QuietJump {
    /// Start and end, seconds.
    pub from: f64,
    pub to: f64,
    /// The pulse's shortest feature (first sample after the start), seconds.
    pub feature: f64,
    /// The BDF2 restart step, seconds.
    pub h_start: f64,
    /// The interval ends at an arrival: its last three states (`to − 2h`, `to − h`, `to`) are
    /// the history the stepping restarts from.
    pub pre_arrival: bool,
    /// After the train: the recovery band whose last crossing is located by bisection.
    pub band: Option<f64>,
}

/// The states a quiet interval passes through: (absolute time, node potentials), rising.
pub(super) struct QuietOut {
    pub states: Vec<(f64, Vec<f64>)>,
}

impl Base {
    /// Cross a quiet interval exactly: states on a geometric grid from the start (factor 2,
    /// or 1.02 after the train where the recovery is read off), each capacitor's interior
    /// minimum located by golden-section search, the recovery crossing by bisection. `None`
    /// when the interval is too short, the modal form does not exist, or a Zener changes region
    /// inside the interval (the caller then steps through it).
    pub(super) fn quiet(
        &self,
        j: &QuietJump,
        modal: &mut Option<Modal>,
        nv: &[f64],
        watch: &Watch,
    ) -> Option<QuietOut> {
        let span = j.to - j.from;
        if span.is_nan() || span <= 0.0 || (j.pre_arrival && span <= 4.0 * j.h_start) {
            return None;
        }
        if modal.as_ref().is_none_or(|m| !m.same_regions(self, nv)) {
            *modal = Modal::new(self, nv);
        }
        let md = modal.as_ref().filter(|m| m.exact)?;
        let mut z0 = Vec::new();
        md.to_modal(nv, &mut z0);
        let state = |dt: f64| {
            let mut v = nv.to_vec();
            md.state_at(&z0, dt, &mut v);
            v
        };
        let end = if j.pre_arrival {
            span - 2.0 * j.h_start
        } else {
            span
        };
        let factor = if j.band.is_some() { 1.02 } else { 2.0 };
        let mut dts = Vec::new();
        let mut d = j.feature;
        while d < end * (1.0 - 1e-9) {
            dts.push(d);
            d *= factor;
        }
        dts.push(end);
        let mut states: Vec<(f64, Vec<f64>)> = dts.iter().map(|&d| (d, state(d))).collect();
        if states.iter().any(|(_, s)| !md.same_regions(self, s)) {
            return None;
        }
        let mut extra = Vec::new();
        // Each capacitor's lowest voltage when it falls inside the interval.
        for k in 0..self.decoupling.len() {
            let v0 = self.cap_volts(nv, k);
            let (mut idx, mut lo) = (0usize, v0);
            for (i, (_, s)) in states.iter().enumerate() {
                let v = self.cap_volts(s, k);
                if v < lo {
                    lo = v;
                    idx = i + 1;
                }
            }
            if idx == 0 || idx == states.len() {
                continue;
            }
            let (mut a, mut b) = (
                if idx >= 2 { states[idx - 2].0 } else { 0.0 },
                states[idx].0,
            );
            let g = 0.5 * (5f64.sqrt() - 1.0);
            let ends = self.decoupling[k];
            let cap = |dt: f64| md.difference_at(&z0, dt, ends, nv);
            // Near the minimum the voltage is flat: a bracket a millionth of the time wide
            // leaves the value off by about 1e-12 of its swing.
            for _ in 0..60 {
                let (c, d) = (b - g * (b - a), a + g * (b - a));
                if cap(c) < cap(d) {
                    b = d;
                } else {
                    a = c;
                }
                if b - a <= 1e-6 * b {
                    break;
                }
            }
            extra.push(0.5 * (a + b));
        }
        // The recovery band's crossings, located to rounding.
        if let Some(band) = j.band {
            let dev = |s: &[f64]| (watch.gain_ratio(self, s) - 1.0).abs();
            let mut prev = (0.0, dev(nv));
            for (ts, s) in &states {
                let here = (*ts, dev(s));
                if prev.1 >= band && here.1 < band {
                    let (mut a, mut b) = (prev.0, here.0);
                    for _ in 0..80 {
                        let mid = 0.5 * (a + b);
                        if dev(&state(mid)) >= band {
                            a = mid;
                        } else {
                            b = mid;
                        }
                        if b - a <= 1e-12 * b {
                            break;
                        }
                    }
                    extra.push(a);
                    extra.push(b);
                }
                prev = here;
            }
        }
        if !extra.is_empty() {
            states.extend(extra.iter().map(|&d| (d, state(d))));
            states.sort_by(|x, y| x.0.total_cmp(&y.0));
            states.dedup_by(|x, y| x.0 == y.0);
        }
        if j.pre_arrival {
            states.push((span - j.h_start, state(span - j.h_start)));
            states.push((span, state(span)));
        }
        let last = states.len() - 1;
        for (i, (ts, _)) in states.iter_mut().enumerate() {
            *ts = if i == last && *ts == span {
                j.to
            } else {
                j.from + *ts
            };
        }
        Some(QuietOut { states })
    }
}

/// The base with no tube current in modal form, for one set of Zener regions.
#[derive(Debug, Clone)]
pub(super) struct Modal {
    /// Node id of each unknown.
    pub nodes: Vec<usize>,
    /// Region of each divider element (true: a Zener above its knee).
    pub regions: Vec<bool>,
    /// Decay rate of each mode, 1/s.
    pub lambda: Vec<f64>,
    /// `x = x∞ + V z`, row-major m×m.
    pub v: Vec<f64>,
    /// `z = W (x − x∞)`.
    pub w: Vec<f64>,
    /// Asymptotic potentials of the unknowns.
    pub x_inf: Vec<f64>,
    /// Whether the form is exact: false when followers are linearised at the potentials it
    /// was built at (their law is a smooth limit, not piecewise linear); such a form serves
    /// the steady state's first guess and the Poisson statistics, never a quiet interval.
    pub exact: bool,
}

/// Which region each element is in at the potentials `nv`.
pub(super) fn regions(base: &Base, nv: &[f64]) -> Vec<bool> {
    base.elements
        .iter()
        .map(|&(a, b, part)| matches!(part, Part::Zener(vz, _) if nv[a] - nv[b] > vz))
        .collect()
}

/// Eigen-decomposition of a symmetric matrix by cyclic Jacobi rotations: returns the
/// eigenvalues and the eigenvectors as the columns of a row-major matrix.
fn jacobi(mut a: Vec<f64>, m: usize) -> Option<(Vec<f64>, Vec<f64>)> {
    let mut q = vec![0.0; m * m];
    for i in 0..m {
        q[i * m + i] = 1.0;
    }
    for _sweep in 0..100 {
        let mut off = 0.0;
        for i in 0..m {
            for j in i + 1..m {
                off += a[i * m + j] * a[i * m + j];
            }
        }
        let diag: f64 = (0..m).map(|i| a[i * m + i].abs()).fold(0.0, f64::max);
        if off.sqrt() <= 1e-300 {
            break;
        }
        let mut rotated = false;
        for p in 0..m {
            for r in p + 1..m {
                let apr = a[p * m + r];
                // Negligible against both diagonal entries: relative accuracy for graded
                // matrices (Demmel & Veselić's criterion).
                if apr.abs() <= 1e-18 * (a[p * m + p] * a[r * m + r]).abs().sqrt()
                    || apr.abs() <= 1e-300 * diag
                {
                    continue;
                }
                rotated = true;
                let theta = (a[r * m + r] - a[p * m + p]) / (2.0 * apr);
                let t = theta.signum() / (theta.abs() + (theta * theta + 1.0).sqrt());
                let t = if theta == 0.0 { 1.0 } else { t };
                let c = 1.0 / (t * t + 1.0).sqrt();
                let s = t * c;
                for k in 0..m {
                    let akp = a[k * m + p];
                    let akr = a[k * m + r];
                    a[k * m + p] = c * akp - s * akr;
                    a[k * m + r] = s * akp + c * akr;
                }
                for k in 0..m {
                    let apk = a[p * m + k];
                    let ark = a[r * m + k];
                    a[p * m + k] = c * apk - s * ark;
                    a[r * m + k] = s * apk + c * ark;
                }
                for k in 0..m {
                    let qkp = q[k * m + p];
                    let qkr = q[k * m + r];
                    q[k * m + p] = c * qkp - s * qkr;
                    q[k * m + r] = s * qkp + c * qkr;
                }
            }
        }
        if !rotated {
            break;
        }
    }
    let lambda: Vec<f64> = (0..m).map(|i| a[i * m + i]).collect();
    lambda.iter().all(|l| l.is_finite()).then_some((lambda, q))
}

impl Modal {
    /// Build the modal form of `base` with the Zener regions at the potentials `nv`; `None`
    /// when the capacitance matrix is singular (a node with no capacitance) or a mode does not
    /// decay.
    pub fn new(base: &Base, nv: &[f64]) -> Option<Modal> {
        let nodes: Vec<usize> = (1..base.nodes())
            .filter(|&k| !matches!(base.var(k), Var::Fixed(_)))
            .collect();
        let m = nodes.len();
        let mut index = vec![usize::MAX; base.nodes()];
        for (i, &k) in nodes.iter().enumerate() {
            index[k] = i;
        }
        let (mut c, mut g, mut f) = (vec![0.0; m * m], vec![0.0; m * m], vec![0.0; m]);
        let stamp = |mat: &mut [f64], f: &mut [f64], a: usize, b: usize, y: f64, i0: f64| {
            let (ia, ib) = (index[a], index[b]);
            if ia != usize::MAX {
                mat[ia * m + ia] += y;
                f[ia] += i0;
                if ib != usize::MAX {
                    mat[ia * m + ib] -= y;
                } else {
                    f[ia] -= y * nv[b];
                }
            }
            if ib != usize::MAX {
                mat[ib * m + ib] += y;
                f[ib] -= i0;
                if ia != usize::MAX {
                    mat[ib * m + ia] -= y;
                } else {
                    f[ib] -= y * nv[a];
                }
            }
        };
        let mut unused = vec![0.0; m];
        for &(a, b, farads) in &base.caps {
            stamp(&mut c, &mut unused, a, b, farads, 0.0);
        }
        for &(a, b, part) in &base.elements {
            let w = nv[a] - nv[b];
            let (i, y) = part.current(w);
            stamp(&mut g, &mut f, a, b, y, i - y * w);
        }
        // A follower couples its dynode to the return rail; with the rail fixed it is a
        // conductance to the cathode (symmetric), else the pencil is not symmetric: no form.
        if !base.followers.is_empty() && base.supply_resistor {
            return None;
        }
        for fl in &base.followers {
            let w = nv[fl.dynode];
            let (i, y) = fl.current(w, base.supply);
            stamp(&mut g, &mut f, fl.dynode, 0, y, i - y * w);
        }
        // Cholesky C = L Lᵀ.
        let mut l = vec![0.0; m * m];
        let cmax = (0..m).map(|i| c[i * m + i]).fold(0.0, f64::max);
        for j in 0..m {
            let mut d = c[j * m + j];
            for k in 0..j {
                d -= l[j * m + k] * l[j * m + k];
            }
            if d.is_nan() || d <= 1e-12 * cmax {
                return None;
            }
            let d = d.sqrt();
            l[j * m + j] = d;
            for i in j + 1..m {
                let mut s = c[i * m + j];
                for k in 0..j {
                    s -= l[i * m + k] * l[j * m + k];
                }
                l[i * m + j] = s / d;
            }
        }
        // Forward solve L X = B column by column (B row-major m×m), in place.
        let lsolve = |b: &mut [f64]| {
            for col in 0..m {
                for i in 0..m {
                    let mut s = b[i * m + col];
                    for k in 0..i {
                        s -= l[i * m + k] * b[k * m + col];
                    }
                    b[i * m + col] = s / l[i * m + i];
                }
            }
        };
        let mut x = g.clone();
        lsolve(&mut x); // X = L⁻¹ G
        let mut a = vec![0.0; m * m];
        for i in 0..m {
            for j in 0..m {
                a[i * m + j] = x[j * m + i];
            }
        }
        lsolve(&mut a); // A = L⁻¹ Xᵀ = L⁻¹ G L⁻ᵀ
        for i in 0..m {
            for j in i + 1..m {
                let s = 0.5 * (a[i * m + j] + a[j * m + i]);
                a[i * m + j] = s;
                a[j * m + i] = s;
            }
        }
        let (lambda, q) = jacobi(a, m)?;
        if lambda.iter().any(|l| l.is_nan() || *l <= 0.0) {
            return None;
        }
        // V = L⁻ᵀ Q: back substitution with Lᵀ.
        let mut v = q.clone();
        for col in 0..m {
            for i in (0..m).rev() {
                let mut s = v[i * m + col];
                for k in i + 1..m {
                    s -= l[k * m + i] * v[k * m + col];
                }
                v[i * m + col] = s / l[i * m + i];
            }
        }
        // W = Qᵀ Lᵀ: W[i][j] = Σ_k Q[k][i] L[j][k].
        let mut w = vec![0.0; m * m];
        for i in 0..m {
            for j in 0..m {
                w[i * m + j] = (0..=j).map(|k| q[k * m + i] * l[j * m + k]).sum();
            }
        }
        // x∞ = −V Λ⁻¹ Vᵀ f.
        let vtf: Vec<f64> = (0..m)
            .map(|i| (0..m).map(|k| v[k * m + i] * f[k]).sum::<f64>() / lambda[i])
            .collect();
        let x_inf: Vec<f64> = (0..m)
            .map(|i| -(0..m).map(|k| v[i * m + k] * vtf[k]).sum::<f64>())
            .collect();
        if !x_inf.iter().chain(&v).chain(&w).all(|z| z.is_finite()) {
            return None;
        }
        Some(Modal {
            nodes,
            regions: regions(base, nv),
            lambda,
            v,
            w,
            x_inf,
            exact: base.followers.is_empty(),
        })
    }

    /// Number of unknowns.
    pub fn len(&self) -> usize {
        self.nodes.len()
    }

    /// Modal coordinates of the potentials `nv`.
    pub fn to_modal(&self, nv: &[f64], z: &mut Vec<f64>) {
        let m = self.len();
        z.clear();
        z.extend((0..m).map(|i| {
            (0..m)
                .map(|j| self.w[i * m + j] * (nv[self.nodes[j]] - self.x_inf[j]))
                .sum::<f64>()
        }));
    }

    /// Potentials `dt` after the modal state `z0`, written into the unknowns of `nv` (the fixed
    /// nodes keep their values).
    pub fn state_at(&self, z0: &[f64], dt: f64, nv: &mut [f64]) {
        let m = self.len();
        let ez = self.decayed(z0, dt);
        for (i, &node) in self.nodes.iter().enumerate() {
            let row = &self.v[i * m..(i + 1) * m];
            nv[node] = self.x_inf[i] + row.iter().zip(&ez).map(|(v, e)| v * e).sum::<f64>();
        }
    }

    /// The modal state `dt` after `z0`: `e^{−λ dt} z0`.
    fn decayed(&self, z0: &[f64], dt: f64) -> Vec<f64> {
        z0.iter()
            .zip(&self.lambda)
            .map(|(z, l)| if *z == 0.0 { 0.0 } else { z * (-l * dt).exp() })
            .collect()
    }

    /// The potential difference between nodes `a` and `b` (node ids; a fixed node holds its
    /// potential in `nv`) `dt` after the modal state `z0`.
    pub fn difference_at(&self, z0: &[f64], dt: f64, (a, b): (usize, usize), nv: &[f64]) -> f64 {
        let m = self.len();
        let ez = self.decayed(z0, dt);
        let at = |node: usize| match self.nodes.iter().position(|&k| k == node) {
            Some(i) => {
                let row = &self.v[i * m..(i + 1) * m];
                self.x_inf[i] + row.iter().zip(&ez).map(|(v, e)| v * e).sum::<f64>()
            }
            None => nv[node],
        };
        at(a) - at(b)
    }

    /// Whether the potentials keep every Zener in the region this form assumes.
    pub fn same_regions(&self, base: &Base, nv: &[f64]) -> bool {
        base.elements
            .iter()
            .zip(&self.regions)
            .all(|(&(a, b, part), &r)| match part {
                Part::Zener(vz, _) => (nv[a] - nv[b] > vz) == r,
                Part::Resistor(_) => true,
            })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn jacobi_diagonalises_a_symmetric_matrix() {
        // A = Q Λ Qᵀ must hold to rounding (the definition of the symmetric eigenproblem).
        let m = 5;
        let mut a = vec![0.0; m * m];
        for i in 0..m {
            for j in 0..m {
                a[i * m + j] = 1.0 / (1.0 + i as f64 + j as f64) + if i == j { 2.0 } else { 0.0 };
            }
        }
        let (l, q) = jacobi(a.clone(), m).unwrap();
        for i in 0..m {
            for j in 0..m {
                let r: f64 = (0..m).map(|k| q[i * m + k] * l[k] * q[j * m + k]).sum();
                assert!((r - a[i * m + j]).abs() < 1e-13, "{i},{j}: {r}");
            }
        }
    }
}
