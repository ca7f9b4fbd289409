//! The one root search of the crossings: modified regula falsi (the Illinois variant) on a
//! bracket, each evaluation carrying what the caller measured there.
//!
//! Used by the DC linearity crossings (`solve::linearity`) and the pulse-linearity limits of a
//! train (`budget::pulsetrain`). The Illinois step halves the value kept at an end that has
//! stayed twice running, so the search converges superlinearly where plain regula falsi
//! stalls (Dahlquist and Björck, Numerical Methods, §6.2, from memory).

/// Where a bracketed search ended.
#[derive(Debug, Clone, PartialEq)]
pub struct Found<T> {
    /// The evaluation nearest the root (least |f|), on either side: its argument, value and
    /// payload.
    pub nearest: (f64, f64, T),
    /// The last evaluation at or past the root (f ≥ 0), or the given end when none was made.
    pub past: (f64, f64, T),
    /// Evaluations made.
    pub evaluations: usize,
}

/// Search `[a, b]` for a root of `f`, with `f(a) < 0 ≤ f(b)` given as `fa`, `fb` (their
/// payloads `ta`, `tb`). `f` returns the value and a payload, or `None` when it cannot be
/// evaluated there (the search stops with what it has). Stops when |f| < `f_tol`, when the
/// bracket is narrower than `x_tol`, or after `max_evals` evaluations. A caller that starts
/// each evaluation from the last point short of the root keeps that point itself: it is the
/// last evaluation that returned f < 0.
#[allow(clippy::too_many_arguments)]
pub fn illinois<T: Clone>(
    mut f: impl FnMut(f64) -> Option<(f64, T)>,
    (mut a, mut fa): (f64, f64),
    (mut b, mut fb, tb): (f64, f64, T),
    f_tol: f64,
    x_tol: f64,
    max_evals: usize,
) -> Found<T> {
    let mut nearest = (b, fb, tb.clone());
    let mut past = (b, fb, tb);
    let mut side = 0i8;
    let mut evaluations = 0;
    while evaluations < max_evals {
        let mid = if (fb - fa).abs() > 0.0 {
            (a * fb - b * fa) / (fb - fa)
        } else {
            0.5 * (a + b)
        };
        let mid = mid.clamp(a.min(b), a.max(b));
        let Some((y, t)) = f(mid) else {
            break;
        };
        evaluations += 1;
        if y.abs() < nearest.1.abs() {
            nearest = (mid, y, t.clone());
        }
        if y >= 0.0 {
            b = mid;
            fb = y;
            past = (mid, y, t);
            if side == 1 {
                fa *= 0.5;
            }
            side = 1;
        } else {
            a = mid;
            fa = y;
            if side == -1 {
                fb *= 0.5;
            }
            side = -1;
        }
        if y.abs() < f_tol || (b - a).abs() < x_tol {
            break;
        }
    }
    Found {
        nearest,
        past,
        evaluations,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_the_cube_root_of_two_to_the_tolerance_in_few_steps() {
        // x³ − 2 = 0 at 2^(1/3) = 1.259921049894873 (exact to the digits shown).
        let mut calls = 0;
        let found = illinois(
            |x| {
                calls += 1;
                Some((x * x * x - 2.0, x))
            },
            (1.0, -1.0),
            (2.0, 6.0, 2.0),
            1e-13,
            1e-15,
            60,
        );
        assert!((found.nearest.0 - 1.259_921_049_894_873).abs() < 1e-12);
        assert!(found.past.1 >= 0.0);
        // Bisection needs about 40 halvings for 1e-12; the Illinois step far fewer.
        assert!(calls < 15, "{calls} evaluations");
    }
}
