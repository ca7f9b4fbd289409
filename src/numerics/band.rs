//! Band LU with partial pivoting (the one band solver: the DC Newton solve and the time steps
//! use it) and the band-plus-border system of a time step. Both systems have `KL = 5` below and
//! `KU = 3` above the diagonal: the interleaved unknowns of a dynode chain.

/// Where a node's potential comes from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Var {
    /// Fixed potential (in the time-domain base: the cathode at 0, an ideal return rail, the supply's internal node).
    Fixed(f64),
    /// Index in the band unknowns.
    Band(usize),
    /// The bordered unknown (in the time-domain base: the return rail behind the supply's output resistance).
    Border,
}

pub(crate) const KL: usize = 5;
pub(crate) const KU: usize = 3;
const W: usize = 2 * KL + KU + 1;

/// Band LU factorisation with partial pivoting (LINPACK-style storage of the multipliers).
#[derive(Debug, Clone, Default)]
pub(crate) struct BandLu {
    m: usize,
    ab: Vec<f64>,
    piv: Vec<usize>,
}

impl BandLu {
    pub(crate) fn reset(&mut self, m: usize) {
        self.m = m;
        self.ab.clear();
        self.ab.resize(m * W, 0.0);
        self.piv.resize(m, 0);
    }
    #[inline]
    fn at(&mut self, r: usize, c: usize) -> &mut f64 {
        debug_assert!(c + KL >= r && c + KL - r < W);
        &mut self.ab[r * W + c + KL - r]
    }
    #[inline]
    pub(crate) fn get(&self, r: usize, c: usize) -> f64 {
        self.ab[r * W + c + KL - r]
    }
    /// Add `v` to entry (r, c), which lies in the band (`r ≤ c + KL`, `c ≤ r + KU`).
    #[inline]
    pub(crate) fn add(&mut self, r: usize, c: usize, v: f64) {
        self.ab[r * W + c + KL - r] += v;
    }
    /// Zero every entry (a new matrix of the same size).
    pub(crate) fn clear(&mut self) {
        self.ab.fill(0.0);
    }
    /// Factor in place and solve `A x = b` (`b` becomes `x`); false when `A` is singular.
    pub(crate) fn factor_solve(&mut self, b: &mut [f64]) -> bool {
        if !self.factor() {
            return false;
        }
        self.solve(b);
        true
    }
    fn factor(&mut self) -> bool {
        let m = self.m;
        let idx = |r: usize, c: usize| r * W + c + KL - r;
        for k in 0..m {
            let last_row = (k + KL).min(m - 1);
            let last_col = (k + KL + KU).min(m - 1);
            let mut p = k;
            let mut best = self.get(k, k).abs();
            for r in k + 1..=last_row {
                let v = self.get(r, k).abs();
                if v > best {
                    best = v;
                    p = r;
                }
            }
            if best == 0.0 || !best.is_finite() {
                return false;
            }
            self.piv[k] = p;
            if p != k {
                for c in k..=last_col {
                    self.ab.swap(idx(k, c), idx(p, c));
                }
            }
            let row_k = idx(k, k);
            let piv = self.ab[row_k];
            let len = last_col - k;
            for r in k + 1..=last_row {
                let row_r = idx(r, k);
                let f = self.ab[row_r] / piv;
                self.ab[row_r] = f;
                if f != 0.0 {
                    // Row r's entries k+1..=last_col follow its entry k in storage, as row k's
                    // do; rows k and r do not overlap (r > k): split to borrow both.
                    let (head, tail) = self.ab.split_at_mut(row_r);
                    let pivot_row = &head[row_k + 1..=row_k + len];
                    for (x, y) in tail[1..=len].iter_mut().zip(pivot_row) {
                        *x -= f * y;
                    }
                }
            }
        }
        true
    }
    fn solve(&self, b: &mut [f64]) {
        let m = self.m;
        for k in 0..m {
            let p = self.piv[k];
            if p != k {
                b.swap(k, p);
            }
            let bk = b[k];
            for r in k + 1..=(k + KL).min(m - 1) {
                b[r] -= self.get(r, k) * bk;
            }
        }
        for k in (0..m).rev() {
            let last_col = (k + KL + KU).min(m - 1);
            let row_k = k * W + KL;
            let upper = &self.ab[row_k + 1..=row_k + last_col - k];
            let s = upper
                .iter()
                .zip(&b[k + 1..=last_col])
                .fold(b[k], |s, (a, x)| s - a * x);
            b[k] = s / self.ab[row_k];
        }
    }
}

/// Linear system in band-plus-border form.
#[derive(Debug, Clone, Default)]
pub(crate) struct System {
    lu: BandLu,
    border_col: Vec<f64>,
    border_row: Vec<f64>,
    corner: f64,
    pub(crate) res: Vec<f64>,
    res_border: f64,
}

impl System {
    pub(crate) fn reset(&mut self, m: usize) {
        self.lu.reset(m);
        self.border_col.clear();
        self.border_col.resize(m, 0.0);
        self.border_row.clear();
        self.border_row.resize(m, 0.0);
        self.corner = 0.0;
        self.res.clear();
        self.res.resize(m, 0.0);
        self.res_border = 0.0;
    }
    #[inline]
    pub(crate) fn jac(&mut self, r: Var, c: Var, v: f64) {
        match (r, c) {
            (Var::Band(i), Var::Band(j)) => *self.lu.at(i, j) += v,
            (Var::Band(i), Var::Border) => self.border_col[i] += v,
            (Var::Border, Var::Band(j)) => self.border_row[j] += v,
            (Var::Border, Var::Border) => self.corner += v,
            _ => {}
        }
    }
    #[inline]
    pub(crate) fn residual(&mut self, r: Var, v: f64) {
        match r {
            Var::Band(i) => self.res[i] += v,
            Var::Border => self.res_border += v,
            Var::Fixed(_) => {}
        }
    }
    /// Stamp a two-terminal branch carrying `i` from `a` to `b` with conductance `g`.
    #[inline]
    pub(crate) fn branch(&mut self, a: Var, b: Var, i: f64, g: f64) {
        self.residual(a, i);
        self.residual(b, -i);
        self.jac(a, a, g);
        self.jac(a, b, -g);
        self.jac(b, a, -g);
        self.jac(b, b, g);
    }
    /// Solve `J d = F` in place: `res` becomes the band part of `d`; returns the border part.
    pub(crate) fn solve(&mut self, bordered: bool) -> Option<f64> {
        if !self.lu.factor() {
            return None;
        }
        self.lu.solve(&mut self.res);
        if !bordered {
            return Some(0.0);
        }
        let mut y = std::mem::take(&mut self.border_col);
        self.lu.solve(&mut y);
        let cz: f64 = self
            .border_row
            .iter()
            .zip(&self.res)
            .map(|(a, b)| a * b)
            .sum();
        let cy: f64 = self.border_row.iter().zip(&y).map(|(a, b)| a * b).sum();
        let s = self.corner - cy;
        if s == 0.0 || !s.is_finite() {
            return None;
        }
        let dw = (self.res_border - cz) / s;
        for (r, yi) in self.res.iter_mut().zip(&y) {
            *r -= yi * dw;
        }
        self.border_col = y;
        Some(dw)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn band_lu_matches_a_dense_solution() {
        // A 7×7 band matrix needing row exchanges; the solution is known by construction.
        let m = 7;
        let mut lu = BandLu::default();
        lu.reset(m);
        let mut dense = vec![0.0; m * m];
        for r in 0..m {
            for c in r.saturating_sub(KL)..=(r + KU).min(m - 1) {
                let v = ((r * 7 + c * 3) % 11) as f64 - 4.5 + if r == c { 1e-3 } else { 0.0 };
                *lu.at(r, c) = v;
                dense[r * m + c] = v;
            }
        }
        let x: Vec<f64> = (0..m).map(|i| i as f64 - 2.5).collect();
        let mut b: Vec<f64> = (0..m)
            .map(|r| (0..m).map(|c| dense[r * m + c] * x[c]).sum())
            .collect();
        assert!(lu.factor());
        lu.solve(&mut b);
        for (a, e) in b.iter().zip(&x) {
            assert!((a - e).abs() < 1e-9, "{a} vs {e}");
        }
    }
}
