//! Dense LU with partial pivoting for the small systems of the solves (a supply multiplier's
//! Newton steps, the shooting of a periodic steady state, a bleed-down's implicit steps, the
//! coupling of a signal path's few nodes). Row-major `m × m` storage.

/// Factor `a` in place into `L U` (unit lower triangle below the diagonal, multipliers kept),
/// recording the row exchanges in `piv`; `None` when a pivot is zero or not finite.
pub fn lu_factor(a: &mut [f64], m: usize, piv: &mut [usize]) -> Option<()> {
    for k in 0..m {
        let p = (k..m).max_by(|&i, &j| a[i * m + k].abs().total_cmp(&a[j * m + k].abs()))?;
        if a[p * m + k] == 0.0 || !a[p * m + k].is_finite() {
            return None;
        }
        piv[k] = p;
        if p != k {
            for j in 0..m {
                a.swap(k * m + j, p * m + j);
            }
        }
        for i in k + 1..m {
            let l = a[i * m + k] / a[k * m + k];
            a[i * m + k] = l;
            if l != 0.0 {
                for j in k + 1..m {
                    a[i * m + j] -= l * a[k * m + j];
                }
            }
        }
    }
    Some(())
}

/// Solve `A x = b` in place with the factors of [`lu_factor`].
pub fn lu_solve(a: &[f64], m: usize, piv: &[usize], b: &mut [f64]) {
    for k in 0..m {
        b.swap(k, piv[k]);
    }
    for i in 0..m {
        let mut s = b[i];
        for j in 0..i {
            s -= a[i * m + j] * b[j];
        }
        b[i] = s;
    }
    for i in (0..m).rev() {
        let mut s = b[i];
        for j in i + 1..m {
            s -= a[i * m + j] * b[j];
        }
        b[i] = s / a[i * m + i];
    }
}

/// Solve `A x = b` once: `a` is overwritten by its factors and `b` by the solution; false
/// when `A` is singular.
pub fn solve(a: &mut [f64], b: &mut [f64], m: usize) -> bool {
    let mut piv = vec![0; m];
    if lu_factor(a, m, &mut piv).is_none() {
        return false;
    }
    lu_solve(a, m, &piv, b);
    true
}

/// The inverse of `a` (row-major), column by column from one factorisation; `None` when
/// singular.
pub fn invert(mut a: Vec<f64>, m: usize) -> Option<Vec<f64>> {
    let mut piv = vec![0; m];
    lu_factor(&mut a, m, &mut piv)?;
    let mut inv = vec![0.0; m * m];
    let mut col = vec![0.0; m];
    for c in 0..m {
        col.iter_mut().for_each(|x| *x = 0.0);
        col[c] = 1.0;
        lu_solve(&a, m, &piv, &mut col);
        for r in 0..m {
            inv[r * m + c] = col[r];
        }
    }
    Some(inv)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_hilbert_matrix_of_order_three_inverts_to_its_integer_inverse() {
        // Textbook: the inverse of the 3×3 Hilbert matrix 1/(i+j−1) is
        // [[9, −36, 30], [−36, 192, −180], [30, −180, 180]] (exact integers).
        let h: Vec<f64> = (0..9).map(|k| 1.0 / ((k / 3 + k % 3 + 1) as f64)).collect();
        let inv = invert(h, 3).unwrap();
        let want = [9.0, -36.0, 30.0, -36.0, 192.0, -180.0, 30.0, -180.0, 180.0];
        for (x, w) in inv.iter().zip(want) {
            assert!((x - w).abs() < 1e-9 * 192.0, "{x} vs {w}");
        }
    }

    #[test]
    fn a_zero_leading_entry_needs_the_pivot_and_a_singular_matrix_is_refused() {
        // 2y = 2 and x + y = 3, with a zero first pivot: y = 1, x = 2.
        let mut a = vec![0.0, 2.0, 1.0, 1.0];
        let mut b = vec![2.0, 3.0];
        assert!(solve(&mut a, &mut b, 2));
        assert!((b[0] - 2.0).abs() < 1e-15 && (b[1] - 1.0).abs() < 1e-15);
        let mut s = vec![1.0, 2.0, 2.0, 4.0];
        let mut r = vec![1.0, 1.0];
        assert!(!solve(&mut s, &mut r, 2));
    }
}
