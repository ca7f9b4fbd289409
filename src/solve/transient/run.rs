//! The run through a pulse train: variable-step BDF2 with error control, exact quiet
//! intervals, isolated pulses through the pulse map, the records of the run.

use super::*;

impl Base {
    /// Integrate the base through a train: pulses of cathode charge `qk` (coulombs), all of
    /// `shape`, arriving at `arrivals` (sorted, seconds).
    pub fn run(
        &self,
        arrivals: &[f64],
        shape: &Shape,
        qk: f64,
        opts: &RunOptions,
    ) -> Result<Run, TransientError> {
        self.run_from(None, arrivals, shape, qk, opts)
    }

    /// [`Base::run`] from the node potentials `start` (at time 0, with no tube current and a
    /// constant past) instead of the DC state; the records (droop, gain ratio, recovery) stay
    /// relative to the DC state with no tube current.
    ///
    /// Longer than most (about 160 lines): the set-up and the one loop over the steps, in which
    /// every branch is a named step; the loop's state is shared by all of them.
    pub fn run_from(
        &self,
        start: Option<&[f64]>,
        arrivals: &[f64],
        shape: &Shape,
        qk: f64,
        opts: &RunOptions,
    ) -> Result<Run, TransientError> {
        let n = self.n;
        let (reference, t) = self.quiescent_state()?;
        let nv = match start {
            Some(s) if s.len() == reference.len() => s.to_vec(),
            _ => reference.clone(),
        };
        let g0_gaps = self.tube_gaps(&reference);
        let initial_gain = self.tube.gain_for_gaps(&g0_gaps);
        let train = Train {
            arrivals,
            shape,
            qk,
            support: shape.support(),
        };
        let signal_initial = self.signal_volts(&reference);
        let elements_initial = self.elements_of(&reference);
        let sig_scale = self.signal_scale(qk, shape, initial_gain);
        let tol = self.tolerances(&reference, &g0_gaps, sig_scale, signal_initial, opts);
        let train_end = train.end();
        let recovery_horizon = self.recovery_horizon();
        // History: potentials at the last three accepted times (a DC state has a constant past).
        let span = Span::new(train_end, recovery_horizon, shape.feature(), opts);
        let (t_stop, h_start) = (span.t_stop, span.h_start);
        let mut watch = Watch::new(
            self,
            &reference,
            arrivals,
            opts.record,
            opts.recovery_band,
            train_end,
        );
        let mut ends = AtTrainEnd {
            elements: elements_initial.clone(),
            gaps: g0_gaps.clone(),
        };
        let mut gap_charges = vec![0.0; n + 1];
        if opts.record {
            watch.observe(self, 0.0, &nv, t[n], 0, false);
        }
        let mut st = State::new(nv, t, h_start, train.cathode(0.0));
        let mut stepper = Stepper {
            breaks: train.breaks(),
            next: 0,
            ws: Scratch::default(),
            hist: vec![0.0; self.caps.len()],
        };
        let (mut accepted, mut rejected) = (0usize, 0usize);
        let mut modal: Option<Modal> = None;
        let mut quiet_jumps = 0usize;
        let mut map = MapRun::new(self, &g0_gaps, qk, arrivals, opts);
        // The step budget grows with the train: a few hundred steps resolve one pulse.
        let budget = opts.max_steps.max(400 * arrivals.len() + 100_000);
        while st.time < t_stop * (1.0 - 1e-15) {
            if let Some(p) = opts.progress {
                let reached = arrivals.partition_point(|a| *a <= st.time);
                p.store(reached, std::sync::atomic::Ordering::Relaxed);
            }
            if accepted + rejected > budget {
                return Err(TransientError::Failed {
                    time: st.time,
                    reason: format!(
                        "more than {budget} steps ({} pulses); try fewer pulses",
                        arrivals.len()
                    ),
                });
            }
            // A quiet interval from here to the next arrival (or the end) in one exact step.
            if opts.exact_quiet && st.after_bp && !train.active(st.time) {
                let jumped = self.quiet_jump(&train, &span, &mut st, &mut modal, &mut watch, opts);
                if let Some(stop) = jumped {
                    quiet_jumps += 1;
                    if stop {
                        break;
                    }
                    continue;
                }
            }
            // An isolated pulse arriving on a quiet base: through the map, or in full for it.
            let iso = (!map.off && map.pending.is_none() && st.after_bp)
                .then(|| isolated(arrivals, st.time, train.support, t_stop))
                .flatten();
            if let Some(idx) = iso {
                let mut books = Books {
                    watch: &mut watch,
                    gap_charges: &mut gap_charges,
                    ends: &mut ends,
                };
                match self.isolated_pulse(idx, &train, &span, &mut st, &mut map, &mut books) {
                    Some(true) if opts.stop_at.is_none() => break,
                    Some(_) => continue,
                    None => {}
                }
            }
            let Some(step) = self.attempt(&mut st, &mut stepper, &train, &span, &tol, opts)? else {
                rejected += 1;
                continue;
            };
            let (t_new, ik, err, landing) = (step.t_new, step.ik, step.err, step.landing);
            // Accept.
            accepted += 1;
            let window = train.arrived(st.time);
            let in_train = st.time < train_end * (1.0 - 1e-14);
            if window > 0 && in_train {
                st.book_pulse(&mut watch.pulses[window - 1], ik, n);
            }
            st.book_gaps(&mut gap_charges);
            st.accept(t_new, ik);
            if landing && (st.time - train_end).abs() <= 1e-12 * train_end.max(1e-30) {
                self.mark_train_end(&st.nv, &mut ends, Some(&mut watch));
            }
            let stop = watch.observe(self, st.time, &st.nv, st.t[n], window, in_train);
            let checks = (&tol.node[..], &reference[..], &gap_charges[..]);
            map.after_step(self, &st, &watch, &train, checks, opts);
            if stop && opts.stop_at.is_none() {
                break;
            }
            st.after_bp = landing;
            let grow = if err > 0.0 {
                (0.9 * err.powf(-1.0 / 3.0)).clamp(0.2, 2.0)
            } else {
                2.0
            };
            st.h *= grow;
        }
        if opts.recovery_band.is_none() || train_end <= 0.0 {
            // Make sure the train-end values are set even when the loop stopped there.
            if (st.time - train_end).abs() <= 1e-12 * train_end.max(1e-30) {
                self.mark_train_end(&st.nv, &mut ends, None);
            }
        }
        let recovery = watch.recovery();
        let window_cap_min = watch.window_minima();
        Ok(Run {
            pulses: watch.pulses,
            caps: watch.caps,
            window_cap_min,
            elements_initial,
            elements_at_train_end: ends.elements,
            tube_gaps: (g0_gaps, ends.gaps),
            gap_charges,
            signal_initial: watch.signal_initial,
            train_end,
            recovery,
            recovery_horizon,
            initial_gain,
            samples: watch.samples,
            steps: (accepted, rejected),
            quiet_jumps,
            mapped_pulses: (
                map.mapped,
                map.map.map_or(map.solves, |m| map.solves + m.solves),
            ),
            final_state: (st.time, st.nv),
        })
    }

    /// One step from `st` towards the next breakpoint: BDF2 with the predictor, Newton's
    /// method, the error estimate. `None` when rejected (the step is shortened for the retry).
    fn attempt(
        &self,
        st: &mut State,
        sp: &mut Stepper,
        train: &Train,
        span: &Span,
        tol: &Tolerances,
        opts: &RunOptions,
    ) -> Result<Option<Taken>, TransientError> {
        let (t_stop, feature) = (span.t_stop, span.feature);
        while sp.next < sp.breaks.len() && sp.breaks[sp.next] <= st.time * (1.0 + 1e-14) + 1e-300 {
            sp.next += 1;
        }
        let next_bp = sp
            .breaks
            .get(sp.next)
            .copied()
            .unwrap_or(t_stop)
            .min(t_stop);
        let landing = st.step_to(next_bp, train, feature);
        let t_new = st.time + st.h;
        let a0 = self.predict(st, t_new, &mut sp.hist);
        let ik = train.cathode(t_new);
        self.forward_currents(ik, &st.trial_nv, &mut st.trial_t);
        let solved = self.newton(
            ik,
            a0,
            &sp.hist,
            &mut st.trial_nv,
            &mut st.trial_t,
            &tol.newton,
            &mut sp.ws,
        );
        if let Err(reason) = solved {
            st.h *= 0.25;
            if st.h < 1e-6 * feature.min(1e-12) {
                return Err(TransientError::Failed {
                    time: st.time,
                    reason,
                });
            }
            return Ok(None);
        }
        let err = self.step_error(st, t_new, tol, opts);
        if err > 1.0 && st.h > 1e-6 * feature {
            st.h *= (0.9 * err.powf(-1.0 / 3.0)).clamp(0.1, 0.9);
            return Ok(None);
        }
        Ok(Some(Taken {
            t_new,
            ik,
            err,
            landing,
        }))
    }

    /// An isolated pulse arriving at `st.time` on a quiet base: through the pulse map when it
    /// holds there (`Some(stop)`: the pulse is booked and the state moved to its end), else
    /// marked to be solved in full for the map (`None`: the run steps through it).
    fn isolated_pulse(
        &self,
        idx: usize,
        train: &Train,
        span: &Span,
        st: &mut State,
        map: &mut MapRun,
        books: &mut Books,
    ) -> Option<bool> {
        let end = train.arrivals[idx] + train.support;
        let (train_end, h_start) = (span.train_end, span.h_start);
        let pred = match map.map.as_mut().map(|m| m.consult(&st.nv)) {
            Some(Use::Map(out)) => {
                let in_train = st.time < train_end * (1.0 - 1e-14);
                self.apply_mapped(&map.lay, &out, idx, st.time, end, books.watch, &mut st.nv);
                for (j, q) in books.gap_charges.iter_mut().enumerate() {
                    *q += out.y[map.lay.gap_charge(j)];
                }
                st.t.iter_mut().for_each(|x| *x = 0.0);
                st.time = end;
                if (st.time - train_end).abs() <= 1e-12 * train_end.max(1e-30) {
                    self.mark_train_end(&st.nv, books.ends, Some(&mut *books.watch));
                }
                let stop = books
                    .watch
                    .observe(self, st.time, &st.nv, 0.0, idx + 1, in_train);
                // A constant past: the quiet interval after the pulse restarts it.
                st.hist_v = [st.nv.clone(), st.nv.clone(), st.nv.clone()];
                st.hist_t = [st.time, st.time - h_start, st.time - 2.0 * h_start];
                st.ik_prev = train.cathode(st.time);
                st.h = h_start;
                map.mapped += 1;
                return Some(stop);
            }
            Some(Use::Full(pred)) => pred,
            None => None,
        };
        map.pending = Some(Pending {
            idx,
            end,
            x: st.nv.clone(),
            gap0: books.gap_charges.clone(),
            mins: (0..map.lay.caps).map(|_| f64::INFINITY).collect(),
            min_times: vec![0.0; map.lay.caps],
            pred,
        });
        None
    }

    /// Tube gap voltages K–D1 … Dn–P of the node potentials `nv`.
    fn tube_gaps(&self, nv: &[f64]) -> Vec<f64> {
        (1..=self.n + 1).map(|j| nv[j] - nv[j - 1]).collect()
    }

    /// Divider element voltages of the node potentials `nv`.
    fn elements_of(&self, nv: &[f64]) -> Vec<f64> {
        self.elements
            .iter()
            .take(self.n + 1)
            .map(|(a, b, _)| nv[*a] - nv[*b])
            .collect()
    }

    /// Record the state at the end of the train (and, given the watch, each capacitor's voltage).
    fn mark_train_end(&self, nv: &[f64], ends: &mut AtTrainEnd, watch: Option<&mut Watch>) {
        ends.elements = self.elements_of(nv);
        ends.gaps = self.tube_gaps(nv);
        if let Some(watch) = watch {
            for (k, rec) in watch.caps.iter_mut().enumerate() {
                rec.at_train_end = self.cap_volts(nv, k);
            }
        }
    }

    /// Error-control and Newton tolerances of a run from the DC state `reference`.
    fn tolerances(
        &self,
        reference: &[f64],
        g0_gaps: &[f64],
        sig_scale: f64,
        signal_initial: f64,
        opts: &RunOptions,
    ) -> Tolerances {
        let n = self.n;
        let (sig_node, gnd_node) = self.signal;
        // Error-control weights per monitored quantity: tube gaps, signal, return rail.
        let gap_tol: Vec<f64> = g0_gaps
            .iter()
            .map(|u| opts.rtol * u.abs().max(1.0))
            .collect();
        // Floors keep the tolerances above rounding on potentials of order the supply.
        let sig_tol = (opts.rtol_signal * sig_scale).max(1e-12 * self.supply);
        // Monitored differences (a, b, absolute tolerance, value before the train): the
        // multiplying tube gaps, the last divider element Dn–return (which holds the last
        // decoupling capacitor), the anode against the return rail and the signal (both at
        // the signal's tolerance: they carry the pulse), and the return rail itself.
        let rtn = n + 3;
        let mut monitored: Vec<(usize, usize, f64, f64)> = (1..=n)
            .map(|j| (j, j - 1, gap_tol[j - 1], g0_gaps[j - 1]))
            .collect();
        monitored.push((
            rtn,
            n,
            opts.rtol * (reference[rtn] - reference[n]).abs().max(1.0),
            reference[rtn] - reference[n],
        ));
        monitored.push((n + 1, rtn, sig_tol, reference[n + 1] - reference[rtn]));
        monitored.push((sig_node, gnd_node, sig_tol, signal_initial));
        let mut gap_tol = gap_tol;
        gap_tol[n] = gap_tol[n].max(sig_tol);
        let rail_tol = opts.rtol * self.supply;
        // Newton tolerances per node (a thousandth of the error tolerance).
        let mut vtol = vec![1e-13 * self.supply; self.nodes()];
        for j in 1..=n + 1 {
            vtol[j] = vtol[j].max(1e-3 * gap_tol[j - 1]);
        }
        vtol[n + 2] = vtol[n + 2].max(1e-3 * sig_tol);
        vtol[n + 3] = vtol[n + 3].max(1e-3 * rail_tol);
        vtol[n + 1] = vtol[n + 1].min(1e-3 * sig_tol).max(1e-13 * self.supply);
        vtol[n] = vtol[n].min(1e-3 * monitored[n].2).max(1e-13 * self.supply);
        // The error tolerance of each node's potential (the pulse map's checks).
        let mut node_tol: Vec<f64> = vtol.iter().map(|v| 1e3 * v).collect();
        for node in [n + 1, n + 2] {
            node_tol[node] = node_tol[node].max(sig_tol);
        }
        Tolerances {
            monitored,
            rail: rail_tol,
            newton: vtol,
            node: node_tol,
        }
    }

    /// Recovery horizon: twenty times the slowest time constant bound Σ C · R_total.
    fn recovery_horizon(&self) -> f64 {
        let r_total: f64 = self
            .elements
            .iter()
            .take(self.n + 1)
            .map(|(_, _, p)| match p {
                Part::Resistor(g) => 1.0 / g,
                Part::Zener(_, rz) => *rz,
            })
            .sum::<f64>()
            + self.load_rc.0;
        let c_total: f64 = self.caps.iter().map(|c| c.2).sum();
        (20.0 * r_total * c_total).clamp(1e-6, 100.0)
    }

    /// A quiet interval from `st.time` to the next arrival (or the end) in one exact step,
    /// observed on the way. `None` when the interval is not taken in one step; else whether
    /// the run stops there (recovered).
    fn quiet_jump(
        &self,
        train: &Train,
        span: &Span,
        st: &mut State,
        modal: &mut Option<Modal>,
        watch: &mut Watch,
        opts: &RunOptions,
    ) -> Option<bool> {
        let next = train.arrived(st.time);
        let window = next;
        let in_train = st.time < span.train_end * (1.0 - 1e-14);
        let target = train
            .arrivals
            .get(next)
            .copied()
            .unwrap_or(span.t_stop)
            .min(span.t_stop);
        let pre_arrival = next < train.arrivals.len() && target < span.t_stop;
        let jump = QuietJump {
            from: st.time,
            to: target,
            feature: span.feature,
            h_start: span.h_start,
            pre_arrival,
            band: opts
                .recovery_band
                .filter(|_| opts.stop_at.is_none() && !pre_arrival),
        };
        let out = self.quiet(&jump, modal, &st.nv, watch)?;
        let mut stop = false;
        for (ts, state) in &out.states {
            stop = watch.observe(self, *ts, state, 0.0, window, in_train);
            if stop && opts.stop_at.is_none() && !pre_arrival {
                st.nv.clone_from(state);
                st.time = *ts;
                break;
            }
            stop = false;
        }
        st.t.iter_mut().for_each(|x| *x = 0.0);
        if stop {
            return Some(true);
        }
        let k = out.states.len();
        st.nv.clone_from(&out.states[k - 1].1);
        st.time = out.states[k - 1].0;
        if k >= 3 {
            for i in 0..3 {
                st.hist_v[i].clone_from(&out.states[k - 1 - i].1);
                st.hist_t[i] = out.states[k - 1 - i].0;
            }
        }
        st.ik_prev = train.cathode(st.time);
        st.h = span.h_start;
        st.after_bp = true;
        Some(false)
    }

    /// The BDF2 history terms of every capacitor into `hist` and the quadratic predictor of
    /// the potentials at `t_new` into `st.trial_nv`; returns the coefficient `α0`.
    fn predict(&self, st: &mut State, t_new: f64, hist: &mut [f64]) -> f64 {
        let h = st.h;
        let hp = st.hist_t[0] - st.hist_t[1];
        let w = h / hp;
        let a0 = (1.0 + 2.0 * w) / (h * (1.0 + w));
        let a1 = -(1.0 + w) / h;
        let a2 = w * w / (h * (1.0 + w));
        let hist_v = &st.hist_v;
        for (c, &(a, b, _)) in self.caps.iter().enumerate() {
            hist[c] = a1 * (hist_v[0][a] - hist_v[0][b]) + a2 * (hist_v[1][a] - hist_v[1][b]);
        }
        // Predictor: quadratic through the last three points.
        let (t0, t1, t2) = (st.hist_t[0], st.hist_t[1], st.hist_t[2]);
        let l0 = (t_new - t1) * (t_new - t2) / ((t0 - t1) * (t0 - t2));
        let l1 = (t_new - t0) * (t_new - t2) / ((t1 - t0) * (t1 - t2));
        let l2 = (t_new - t0) * (t_new - t1) / ((t2 - t0) * (t2 - t1));
        for node in 0..self.nodes() {
            st.trial_nv[node] = match self.var(node) {
                Var::Fixed(v) => v,
                _ => l0 * hist_v[0][node] + l1 * hist_v[1][node] + l2 * hist_v[2][node],
            };
        }
        a0
    }

    /// The step's local truncation error over its tolerance (the largest ratio), from the
    /// third divided difference of the solution at `t_new` and the three points before.
    fn step_error(&self, st: &State, t_new: f64, tol: &Tolerances, opts: &RunOptions) -> f64 {
        let h = st.h;
        let hp = st.hist_t[0] - st.hist_t[1];
        let w = h / hp;
        let (t0, t1, t2) = (st.hist_t[0], st.hist_t[1], st.hist_t[2]);
        let (trial_nv, hist_v) = (&st.trial_nv, &st.hist_v);
        let dd3 = |q: &dyn Fn(&[f64]) -> f64| -> f64 {
            let ts = [t_new, t0, t1, t2];
            let ys = [q(trial_nv), q(&hist_v[0]), q(&hist_v[1]), q(&hist_v[2])];
            let d1: Vec<f64> = (0..3)
                .map(|i| (ys[i] - ys[i + 1]) / (ts[i] - ts[i + 1]))
                .collect();
            let d2: Vec<f64> = (0..2)
                .map(|i| (d1[i] - d1[i + 1]) / (ts[i] - ts[i + 2]))
                .collect();
            (d2[0] - d2[1]) / (ts[0] - ts[3])
        };
        // LTE = v''' h² (h + h') (1+ω) / (6 (1+2ω)) with v''' = 6 × the divided difference.
        let lte_factor = h * h * (h + hp) * (1.0 + w) / (1.0 + 2.0 * w);
        let mut err: f64 = 0.0;
        for &(a, b, abs_tol, before) in &tol.monitored {
            let dep = (trial_nv[a] - trial_nv[b] - before).abs();
            let t = abs_tol.max(opts.rtol_dev * dep);
            let e = dd3(&|v: &[f64]| v[a] - v[b]).abs() * lte_factor / t;
            err = err.max(e);
        }
        if self.supply_resistor {
            let n = self.n;
            err = err.max(dd3(&|v: &[f64]| v[n + 3]).abs() * lte_factor / tol.rail);
        }
        if !err.is_finite() {
            err = 1e6;
        }
        err
    }
}

/// The pulse train a run integrates through.
struct Train<'a> {
    /// Arrival times, sorted, seconds.
    arrivals: &'a [f64],
    shape: &'a Shape,
    /// Cathode charge of each pulse, coulombs.
    qk: f64,
    /// Duration of one pulse, seconds.
    support: f64,
}

impl Train<'_> {
    /// Cathode current at `time`: the pulses active then, arrivals in (time − support, time].
    fn cathode(&self, time: f64) -> f64 {
        let hi = self.arrivals.partition_point(|a| *a <= time);
        let lo = self.arrivals.partition_point(|a| *a <= time - self.support);
        self.arrivals[lo..hi]
            .iter()
            .map(|a| self.shape.value(time - a))
            .sum::<f64>()
            * self.qk
    }
    /// A pulse still delivering charge after `time`.
    fn active(&self, time: f64) -> bool {
        let hi = self.arrived(time);
        hi > 0 && self.arrivals[hi - 1] + self.support > time * (1.0 + 1e-12)
    }
    /// Inside a pulse at `time`.
    fn in_pulse(&self, time: f64) -> bool {
        let hi = self.arrivals.partition_point(|a| *a <= time);
        let lo = self.arrivals.partition_point(|a| *a < time - self.support);
        hi > lo
    }
    /// Pulses arrived by `time` (the window the records go to).
    fn arrived(&self, time: f64) -> usize {
        self.arrivals
            .partition_point(|a| *a <= time * (1.0 + 1e-14) + 1e-300)
    }
    /// The end of the last pulse.
    fn end(&self) -> f64 {
        self.arrivals.last().copied().unwrap_or(0.0) + self.support
    }
    /// Breakpoints: every pulse's corners, sorted, without repeats.
    fn breaks(&self) -> Vec<f64> {
        let corners = self.shape.corners();
        let mut breaks: Vec<f64> = self
            .arrivals
            .iter()
            .flat_map(|a| corners.iter().map(move |c| a + c))
            .collect();
        breaks.sort_by(f64::total_cmp);
        breaks.dedup_by(|a, b| (*a - *b).abs() <= 1e-15 * a.abs().max(1e-30));
        breaks
    }
}

/// The times that bound a run's steps.
struct Span {
    train_end: f64,
    t_stop: f64,
    /// The pulse's shortest feature, seconds.
    feature: f64,
    /// The first step after a restart.
    h_start: f64,
}

impl Span {
    /// The span of a run: to the train's end, or on to the recovery horizon when a recovery
    /// band is asked for, or to the time asked for; the first step a fiftieth of the feature.
    fn new(train_end: f64, recovery_horizon: f64, feature: f64, opts: &RunOptions) -> Span {
        let t_stop = match (opts.stop_at, opts.recovery_band) {
            (Some(t), _) => t.max(train_end),
            (None, Some(_)) => train_end + recovery_horizon,
            (None, None) => train_end,
        };
        Span {
            train_end,
            t_stop,
            feature,
            h_start: feature / 50.0,
        }
    }
}

/// Error-control and Newton tolerances of a run.
struct Tolerances {
    /// Monitored differences (a, b, absolute tolerance, value before the train).
    monitored: Vec<(usize, usize, f64, f64)>,
    /// Tolerance on the return rail, volts.
    rail: f64,
    /// Newton tolerance of each node's potential.
    newton: Vec<f64>,
    /// Error tolerance of each node's potential (the pulse map's checks).
    node: Vec<f64>,
}

/// The breakpoints ahead and the buffers of the implicit steps.
struct Stepper {
    breaks: Vec<f64>,
    /// The first breakpoint not yet passed.
    next: usize,
    ws: Scratch,
    /// The capacitors' BDF2 history terms.
    hist: Vec<f64>,
}

/// An accepted step: its end, the cathode current there, its error ratio, whether it landed
/// on a breakpoint.
struct Taken {
    t_new: f64,
    ik: f64,
    err: f64,
    landing: bool,
}

/// The records a mapped pulse is booked into.
struct Books<'a> {
    watch: &'a mut Watch,
    gap_charges: &'a mut Vec<f64>,
    ends: &'a mut AtTrainEnd,
}

/// Element voltages and tube gaps at the end of the train.
struct AtTrainEnd {
    elements: Vec<f64>,
    gaps: Vec<f64>,
}

/// Where the integration stands: potentials and gap currents now, the past BDF2 needs, the
/// step, and the trial point of the step being taken.
struct State {
    nv: Vec<f64>,
    t: Vec<f64>,
    /// Potentials at the last three accepted times, newest first, and those times.
    hist_v: [Vec<f64>; 3],
    hist_t: [f64; 3],
    time: f64,
    h: f64,
    /// Cathode current at the last accepted time.
    ik_prev: f64,
    /// The last step landed on a breakpoint.
    after_bp: bool,
    trial_nv: Vec<f64>,
    trial_t: Vec<f64>,
}

impl State {
    /// A state at time 0 from the potentials `nv` and gap currents `t`, with a constant past.
    fn new(nv: Vec<f64>, t: Vec<f64>, h_start: f64, ik0: f64) -> State {
        State {
            hist_v: [nv.clone(), nv.clone(), nv.clone()],
            hist_t: [0.0, -h_start, -2.0 * h_start],
            trial_nv: nv.clone(),
            trial_t: t.clone(),
            nv,
            t,
            time: 0.0,
            h: h_start,
            ik_prev: ik0,
            after_bp: true,
        }
    }
    /// Add the accepted step's charges (trapezoid rule) to the pulse record `p`: cathode
    /// current `ik` at the step's end, anode current from gap `n + 1`.
    fn book_pulse(&self, p: &mut PulseRecord, ik: f64, n: usize) {
        p.cathode_charge += 0.5 * self.h * (self.ik_prev + ik);
        p.anode_charge += 0.5 * self.h * (self.t[n] + self.trial_t[n]);
        p.peak_anode_amps = p.peak_anode_amps.max(self.trial_t[n]);
    }
    /// Add the accepted step's charge across each tube gap (trapezoid rule).
    fn book_gaps(&self, gap_charges: &mut [f64]) {
        for (j, q) in gap_charges.iter_mut().enumerate() {
            *q += 0.5 * self.h * (self.t[j] + self.trial_t[j]);
        }
    }
    /// Size the next step towards the breakpoint `next_bp`; true when it lands on it.
    fn step_to(&mut self, next_bp: f64, train: &Train, feature: f64) -> bool {
        if self.after_bp {
            self.h = self.h.min(feature / 20.0);
        }
        if train.in_pulse(self.time) {
            self.h = self.h.min(train.support / 16.0);
        }
        let mut landing = false;
        if self.time + self.h >= next_bp {
            self.h = next_bp - self.time;
            landing = true;
        } else if next_bp - (self.time + self.h) < 0.25 * self.h {
            // Two even steps rather than a sliver before the breakpoint.
            self.h = 0.5 * (next_bp - self.time);
        }
        landing
    }
    /// Take the trial point as the new state at `t_new` (cathode current `ik`).
    fn accept(&mut self, t_new: f64, ik: f64) {
        self.ik_prev = ik;
        self.hist_v.rotate_right(1);
        self.hist_v[0].clone_from(&self.trial_nv);
        self.hist_t.rotate_right(1);
        self.hist_t[0] = t_new;
        self.nv.clone_from(&self.trial_nv);
        self.t.clone_from(&self.trial_t);
        self.time = t_new;
    }
}

/// The pulse map of a run: isolated pulses through it, or one solved in full for it.
struct MapRun {
    lay: Layout,
    /// The smallest tube gap at the DC state (the map's distance scale), volts.
    scale: f64,
    map: Option<PulseMap>,
    /// The map is not used (or was given up).
    off: bool,
    pending: Option<Pending>,
    /// Pulses taken through the map, and the full solves of maps given up.
    mapped: usize,
    solves: usize,
}

impl MapRun {
    /// The pulse map of a run; off unless quiet intervals are exact, the map is asked for,
    /// the pulses carry charge, there are two or more and no follower holds a dynode.
    fn new(base: &Base, g0_gaps: &[f64], qk: f64, arrivals: &[f64], opts: &RunOptions) -> MapRun {
        MapRun {
            lay: Layout::of(base),
            scale: g0_gaps
                .iter()
                .fold(f64::INFINITY, |m, g| m.min(g.abs()))
                .max(1.0),
            map: None,
            off: !(opts.exact_quiet && opts.pulse_map)
                || qk <= 0.0
                || arrivals.len() < 2
                || !base.followers.is_empty(),
            pending: None,
            mapped: 0,
            solves: 0,
        }
    }
    /// After an accepted step: the pulse being solved in full for the map notes its
    /// capacitors' minima and, at its end, builds or checks the map.
    /// `checks` = (node tolerances, DC state, gap charges so far).
    fn after_step(
        &mut self,
        base: &Base,
        st: &State,
        watch: &Watch,
        train: &Train,
        checks: (&[f64], &[f64], &[f64]),
        opts: &RunOptions,
    ) {
        let (node_tol, reference, gap_charges) = checks;
        let Some(pd) = self.pending.as_mut() else {
            return;
        };
        for k in 0..self.lay.caps {
            let v = base.cap_volts(&st.nv, k);
            if v < pd.mins[k] {
                pd.mins[k] = v;
                pd.min_times[k] = st.time - train.arrivals[pd.idx];
            }
        }
        if st.time >= pd.end * (1.0 - 1e-14) {
            let pd = self.pending.take().expect("pending pulse");
            let full = pd.out(&self.lay, &st.nv, &watch.pulses[pd.idx], gap_charges);
            let (shape, qk) = (train.shape, train.qk);
            let kept = match self.map.as_mut() {
                None => {
                    let tols = (self.scale, node_tol, reference);
                    self.map = PulseMap::build(base, &pd.x, full, tols, shape, qk, opts);
                    self.map.is_some()
                }
                Some(m) => m.solved(base, &pd.x, full, pd.pred, shape, qk, opts),
            };
            if !kept {
                self.solves += self.map.take().map_or(0, |m| m.solves);
                self.off = true;
            }
        }
    }
}

/// The index of the pulse arriving at `time` when it is isolated: the pulse before it has
/// ended, the next arrives after its end, and its end is within the run.
fn isolated(arrivals: &[f64], time: f64, support: f64, t_stop: f64) -> Option<usize> {
    let idx = arrivals.partition_point(|a| *a < time * (1.0 - 1e-14));
    let a = *arrivals.get(idx)?;
    let end = a + support;
    let here = (a - time).abs() <= 1e-14 * time.abs().max(1e-300);
    let before = idx == 0 || arrivals[idx - 1] + support <= a;
    let after = arrivals.get(idx + 1).is_none_or(|b| *b >= end);
    (here && before && after && end <= t_stop).then_some(idx)
}

/// An isolated pulse being solved in full for the pulse map.
struct Pending {
    idx: usize,
    end: f64,
    /// Potentials at its arrival.
    x: Vec<f64>,
    /// Gap charges before it.
    gap0: Vec<f64>,
    /// Each decoupling capacitor's lowest voltage inside it so far, and when (after arrival).
    mins: Vec<f64>,
    min_times: Vec<f64>,
    /// The map's prediction, when it had one.
    pred: Option<Vec<f64>>,
}

impl Pending {
    /// What the pulse produced, laid out as the map's outputs.
    fn out(&self, lay: &Layout, nv: &[f64], p: &PulseRecord, gap_charges: &[f64]) -> PulseOut {
        let mut y = nv.to_vec();
        y.extend([
            p.anode_charge,
            p.peak_anode_amps,
            p.peak_signal_volts,
            p.cathode_charge,
        ]);
        y.extend(gap_charges.iter().zip(&self.gap0).map(|(a, b)| a - b));
        y.extend(&self.mins);
        debug_assert_eq!(y.len(), lay.cap_min(lay.caps));
        PulseOut {
            y,
            min_times: self.min_times.clone(),
        }
    }
}

impl Base {
    /// Book a mapped pulse `idx` (arrival `time`, end `end`) into the records and move the
    /// potentials `nv` to its end.
    #[allow(clippy::too_many_arguments)]
    fn apply_mapped(
        &self,
        lay: &Layout,
        out: &PulseOut,
        idx: usize,
        time: f64,
        end: f64,
        watch: &mut Watch,
        nv: &mut Vec<f64>,
    ) {
        let y = &out.y;
        let p = &mut watch.pulses[idx];
        p.cathode_charge += y[lay.cathode_charge()];
        p.anode_charge += y[lay.anode_charge()];
        p.peak_anode_amps = p.peak_anode_amps.max(y[lay.peak_amps()]);
        let s = y[lay.peak_signal()];
        if s.abs() > p.peak_signal_volts.abs() {
            p.peak_signal_volts = s;
        }
        for k in 0..lay.caps {
            let at = (time + out.min_times.get(k).copied().unwrap_or(0.0)).min(end);
            watch.note_min(k, idx, at, y[lay.cap_min(k)]);
        }
        nv.clear();
        nv.extend_from_slice(&y[..lay.nodes]);
        // The peak as one sample (the figure's buckets keep extremes).
        let mins: Vec<f64> = (0..lay.caps).map(|k| y[lay.cap_min(k)]).collect();
        watch.note_peak(
            self,
            time + 0.5 * (end - time),
            s,
            y[lay.peak_amps()],
            &mins,
            nv,
        );
    }
}
