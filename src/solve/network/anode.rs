//! Solving for a requested average anode current, and the saturation ceiling of a base.

use super::*;

impl Network {
    /// Solve for the cathode current that gives average anode current `anode` (amperes).
    ///
    /// A secant iteration from the small-signal guess first; should it fail (deep in saturation
    /// the guess can land where Newton's method fails, and near the top of the curve the slope
    /// vanishes), the request is bracketed by walking up from a light load and bisected, so an
    /// impossible request ends as `Unreachable` with the most the divider delivers.
    pub fn solve_anode_raw(
        &self,
        anode: f64,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        let g0 = self.small_signal_gain();
        match self.solve_anode_secant(anode, ws) {
            Ok(op) if op.gain() >= SATURATED_GAIN * g0 => Ok(op),
            // A point past saturation is no operating point: follow the light up from a light
            // load instead, which reaches the request before saturation or finds the ceiling.
            Ok(_) => self
                .solve_anode_bracketed(anode, ws)?
                .ok_or(SolveError::Unreachable {
                    wanted: anode,
                    reached: 0.0,
                }),
            Err(first) => self.solve_anode_bracketed(anode, ws)?.ok_or(first),
        }
    }

    fn solve_anode_secant(
        &self,
        anode: f64,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        let g0 = self.small_signal_gain();
        let mut ik = anode / g0;
        let mut op = self.solve_raw(ik, None, ws)?;
        // Secant iteration on ln(t) against ln(ik).
        let mut prev: Option<(f64, f64)> = None;
        let mut best = op.anode_amps();
        for _ in 0..80 {
            let got = op.anode_amps();
            best = best.max(got);
            let err = (got / anode).ln();
            if err.abs() < 1e-12 {
                return Ok(op);
            }
            let (lx, ly) = (ik.ln(), got.ln());
            let slope = match prev {
                Some((px, py)) if (lx - px).abs() > 1e-300 => (ly - py) / (lx - px),
                _ => 1.0,
            };
            if slope < 1e-3 {
                return Err(SolveError::Unreachable {
                    wanted: anode,
                    reached: best,
                });
            }
            let stepln = (-(err) / slope).clamp(-2.0, 2.0);
            prev = Some((lx, ly));
            ik = (lx + stepln).exp();
            op = self.solve_raw(ik, Some(&op), ws)?;
        }
        Err(SolveError::Unreachable {
            wanted: anode,
            reached: best,
        })
    }

    /// Fallback of [`Network::solve_anode_raw`]: raise the cathode current from a light load in
    /// steps of 2x (each solve warm-started from the last) until the anode current passes
    /// `anode`, then bisect on ln(ik). Past saturation the curve of anode current against
    /// cathode current has a top and, further on, other branches; the walk follows the branch a
    /// base reaches as the light rises, and its top (refined by golden-section search) is the
    /// most the divider delivers. `Ok(None)` when even the light load does not solve.
    fn solve_anode_bracketed(
        &self,
        anode: f64,
        ws: &mut Workspace,
    ) -> Result<Option<OperatingPoint>, SolveError> {
        let (i0, _) = self.quiescent();
        let g0 = self.small_signal_gain();
        let ik = (1e-3 * i0 / g0).min(anode / g0);
        let Ok(first) = self.solve_raw(ik, None, ws) else {
            return Ok(None);
        };
        if first.anode_amps() >= anode {
            return Ok(Some(first));
        }
        // Walk: `prev` < `lo` (the highest so far) while rising.
        let mut prev: Option<OperatingPoint> = None;
        let mut lo = first;
        let mut bracket = None;
        // 2^80 spans any distance from the light load to a request.
        for _ in 0..80 {
            let Ok(next) = self.solve_raw(lo.cathode_amps * 2.0, Some(&lo), ws) else {
                break;
            };
            if next.gain() < SATURATED_GAIN * g0 {
                // Saturated before the request: the ceiling is the most current up to where
                // the gain halves (the curve may have turned down on the way).
                let edge = self.saturation_edge(&lo, &next, g0, ws)?;
                if edge.anode_amps() >= anode {
                    bracket = Some((lo.clone(), edge));
                    break;
                }
                let left = prev
                    .as_ref()
                    .map_or(lo.cathode_amps * 0.5, |p| p.cathode_amps);
                match self.top_between(anode, left, &lo, edge.cathode_amps, ws) {
                    Ok(pair) => bracket = Some(pair),
                    Err(reached) => {
                        return Err(SolveError::Unreachable {
                            wanted: anode,
                            reached: reached.max(edge.anode_amps()),
                        });
                    }
                }
                break;
            }
            if next.anode_amps() >= anode {
                bracket = Some((lo.clone(), next));
                break;
            }
            if next.anode_amps() <= lo.anode_amps() {
                // Past the top: search it between the neighbours of the highest point.
                let left = prev
                    .as_ref()
                    .map_or(lo.cathode_amps * 0.5, |p| p.cathode_amps);
                match self.top_between(anode, left, &lo, next.cathode_amps, ws) {
                    Ok(pair) => bracket = Some(pair),
                    Err(reached) => {
                        return Err(SolveError::Unreachable {
                            wanted: anode,
                            reached,
                        });
                    }
                }
                break;
            }
            prev = Some(std::mem::replace(&mut lo, next));
        }
        let Some((mut lo, mut hi)) = bracket else {
            return Err(SolveError::Unreachable {
                wanted: anode,
                reached: lo.anode_amps(),
            });
        };
        // Bisection on ln(ik): the anode current is continuous along the branch.
        for _ in 0..200 {
            let mid = (lo.cathode_amps * hi.cathode_amps).sqrt();
            let op = self.solve_raw(mid, Some(&lo), ws)?;
            let err = op.anode_amps() / anode - 1.0;
            if err.abs() < 1e-12 || hi.cathode_amps / lo.cathode_amps - 1.0 < 1e-15 {
                return Ok(Some(op));
            }
            if err < 0.0 {
                lo = op;
            } else {
                hi = op;
            }
        }
        Ok(Some(hi))
    }

    /// The operating point between `below` (gain at least [`SATURATED_GAIN`] of `g0`) and
    /// `above` (less) where the gain is that fraction: bisection on ln(cathode current).
    pub fn saturation_edge(
        &self,
        below: &OperatingPoint,
        above: &OperatingPoint,
        g0: f64,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        let (mut lo, mut hi) = (below.clone(), above.clone());
        for _ in 0..100 {
            if hi.cathode_amps / lo.cathode_amps - 1.0 < 1e-12 {
                break;
            }
            let mid = (lo.cathode_amps * hi.cathode_amps).sqrt();
            let op = self.solve_raw(mid, Some(&lo), ws)?;
            if op.gain() >= SATURATED_GAIN * g0 {
                lo = op;
            } else {
                hi = op;
            }
        }
        Ok(lo)
    }

    /// Golden-section search for the top of the anode current on `[left, right]` (cathode
    /// currents, `top` inside). Returns a bracket `(below, at_or_above)` of `anode` as soon as a
    /// point reaches it, or `Err(highest anode current found)`.
    fn top_between(
        &self,
        anode: f64,
        left: f64,
        top: &OperatingPoint,
        right: f64,
        ws: &mut Workspace,
    ) -> Result<(OperatingPoint, OperatingPoint), f64> {
        let phi = 0.5 * (5f64.sqrt() - 1.0);
        let (mut a, mut b) = (left.ln(), right.ln());
        let mut best = top.clone();
        for _ in 0..40 {
            // Probe the larger side of the best point, golden-section style.
            let x = best.cathode_amps.ln();
            let probe = if b - x > x - a {
                x + (1.0 - phi) * (b - x)
            } else {
                x - (1.0 - phi) * (x - a)
            };
            let Ok(op) = self.solve_raw(probe.exp(), Some(&best), ws) else {
                break;
            };
            if op.anode_amps() >= anode {
                // The rising side below `probe` holds `anode`: bracket with the light side.
                return if probe > x {
                    Ok((best, op))
                } else {
                    match self.solve_raw(a.exp(), Some(&op), ws) {
                        Ok(low) if low.anode_amps() < anode => Ok((low, op)),
                        _ => Err(op.anode_amps()),
                    }
                };
            }
            if op.anode_amps() > best.anode_amps() {
                if probe > x {
                    a = x;
                } else {
                    b = x;
                }
                best = op;
            } else if probe > x {
                b = probe;
            } else {
                a = probe;
            }
            if b - a < 1e-9 {
                break;
            }
        }
        Err(best.anode_amps())
    }

    /// Typed form of [`Network::solve_anode_raw`].
    pub fn solve_anode(
        &self,
        anode: ElectricCurrent,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        self.solve_anode_raw(anode.get::<ampere>(), ws)
    }
}
