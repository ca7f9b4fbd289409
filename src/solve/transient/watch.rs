//! Bookkeeping of a run: what every accepted state (a BDF2 step or a point of a quiet
//! interval) adds to the per-pulse and per-capacitor records, the samples and the recovery.

use super::{Base, CapRecord, PulseRecord, Sample};

/// Most samples kept while recording: beyond it, every four are thinned to the two with the
/// lowest and highest signal (in time order), so a long train's figure keeps its peaks in
/// bounded memory.
pub const RECORD_LIMIT: usize = 1 << 16;

/// Records of a run in progress.
pub(super) struct Watch {
    pub pulses: Vec<PulseRecord>,
    pub caps: Vec<CapRecord>,
    /// Lowest voltage of each decoupling capacitor in each pulse's window (pulses × caps).
    pub window_min: Vec<f64>,
    pub samples: Vec<Sample>,
    record: bool,
    band: Option<f64>,
    /// Last state outside the recovery band after the train: (time, deviation).
    pub last_outside: Option<(f64, f64)>,
    /// When the gain last entered the band.
    pub recovered_at: Option<f64>,
    train_end: f64,
    pub signal_initial: f64,
    /// Each dynode's gain before the train.
    delta0: Vec<f64>,
}

impl Watch {
    pub fn new(
        base: &Base,
        reference: &[f64],
        arrivals: &[f64],
        record: bool,
        band: Option<f64>,
        train_end: f64,
    ) -> Watch {
        let n = base.n;
        let ncaps = base.decoupling.len();
        let caps: Vec<CapRecord> = (0..ncaps)
            .map(|k| CapRecord {
                initial: base.cap_volts(reference, k),
                droop: 0.0,
                droop_time: 0.0,
                droop_pulse: None,
                at_train_end: base.cap_volts(reference, k),
            })
            .collect();
        Watch {
            pulses: arrivals
                .iter()
                .map(|a| PulseRecord {
                    start: *a,
                    cathode_charge: 0.0,
                    anode_charge: 0.0,
                    peak_anode_amps: 0.0,
                    peak_signal_volts: 0.0,
                })
                .collect(),
            window_min: (0..arrivals.len())
                .flat_map(|_| caps.iter().map(|_| f64::INFINITY))
                .collect(),
            caps,
            samples: Vec::new(),
            record,
            band,
            last_outside: None,
            recovered_at: None,
            train_end,
            signal_initial: base.signal_volts(reference),
            delta0: (1..=n)
                .map(|j| {
                    let acc = reference[j] - reference[j - 1];
                    base.tube.delta(acc, reference[j + 1] - reference[j]).0
                })
                .collect(),
        }
    }

    /// Small-signal gain at the potentials `nv` over the gain before the train.
    pub fn gain_ratio(&self, base: &Base, nv: &[f64]) -> f64 {
        let mut r = 1.0;
        for (j, d0) in (1..=base.n).zip(&self.delta0) {
            r *= base.tube.delta(nv[j] - nv[j - 1], nv[j + 1] - nv[j]).0 / d0;
        }
        r
    }

    /// Take in an accepted state at `time` with anode current `anode_amps`; `window` counts
    /// the arrivals at or before the step's start. Returns whether the run may stop: after the
    /// train, with the gain well inside the recovery band (a tenth of it).
    pub fn observe(
        &mut self,
        base: &Base,
        time: f64,
        nv: &[f64],
        anode_amps: f64,
        window: usize,
        in_train: bool,
    ) -> bool {
        let ncaps = self.caps.len();
        let w = window.max(1) - 1;
        for (k, rec) in self.caps.iter_mut().enumerate() {
            let v = base.cap_volts(nv, k);
            let d = rec.initial - v;
            if d > rec.droop {
                rec.droop = d;
                rec.droop_time = time;
                rec.droop_pulse = Some(w);
            }
            if let Some(m) = self.window_min.get_mut(w * ncaps + k) {
                *m = m.min(v);
            }
        }
        if window > 0 && in_train {
            let s = base.signal_volts(nv) - self.signal_initial;
            let p = &mut self.pulses[window - 1];
            if s.abs() > p.peak_signal_volts.abs() {
                p.peak_signal_volts = s;
            }
        }
        if self.record {
            self.thin();
            self.samples.push(Sample {
                t: time,
                signal_volts: base.signal_volts(nv),
                anode_amps,
                cap_volts: (0..ncaps).map(|k| base.cap_volts(nv, k)).collect(),
                gain_ratio: self.gain_ratio(base, nv),
            });
        }
        let Some(band) = self.band else {
            return false;
        };
        if time < self.train_end * (1.0 - 1e-14) {
            return false;
        }
        // Recovery: when, after the train, the gain last entered the band.
        let dev = (self.gain_ratio(base, nv) - 1.0).abs();
        if dev >= band {
            self.last_outside = Some((time, dev));
            self.recovered_at = None;
        } else if self.recovered_at.is_none() {
            // Interpolate the crossing between the last point outside and this one.
            let cross = match self.last_outside {
                Some((to, dout)) if dout > dev => to + (time - to) * (dout - band) / (dout - dev),
                Some((to, _)) => to,
                None => self.train_end,
            };
            self.recovered_at = Some(cross.max(self.train_end));
        }
        dev < 0.1 * band && time > self.train_end
    }

    /// A capacitor's lowest voltage `v` at `time` inside pulse `idx` (0-based), from the
    /// pulse map.
    pub fn note_min(&mut self, k: usize, idx: usize, time: f64, v: f64) {
        let ncaps = self.caps.len();
        let rec = &mut self.caps[k];
        let d = rec.initial - v;
        if d > rec.droop {
            rec.droop = d;
            rec.droop_time = time;
            rec.droop_pulse = Some(idx);
        }
        if let Some(m) = self.window_min.get_mut(idx * ncaps + k) {
            *m = m.min(v);
        }
    }

    /// A mapped pulse's peak as one recorded sample (when recording): its signal against the
    /// value before the train, its peak anode current, the capacitors' lowest voltages, and
    /// the gain at the potentials `nv` after it.
    pub fn note_peak(
        &mut self,
        base: &Base,
        time: f64,
        signal: f64,
        anode_amps: f64,
        caps: &[f64],
        nv: &[f64],
    ) {
        if self.record {
            self.thin();
            self.samples.push(Sample {
                t: time,
                signal_volts: self.signal_initial + signal,
                anode_amps,
                cap_volts: caps.to_vec(),
                gain_ratio: self.gain_ratio(base, nv),
            });
        }
    }

    /// Thin the samples when they reach [`RECORD_LIMIT`].
    fn thin(&mut self) {
        if self.samples.len() < RECORD_LIMIT {
            return;
        }
        let old = std::mem::take(&mut self.samples);
        let mut kept = Vec::with_capacity(RECORD_LIMIT);
        let mut it = old.into_iter().peekable();
        while it.peek().is_some() {
            let group: Vec<Sample> = it.by_ref().take(4).collect();
            let by = |f: fn(f64, f64) -> bool| {
                (0..group.len())
                    .reduce(|a, b| {
                        if f(group[b].signal_volts, group[a].signal_volts) {
                            b
                        } else {
                            a
                        }
                    })
                    .unwrap_or(0)
            };
            let (lo, hi) = (by(|x, y| x < y), by(|x, y| x > y));
            let (a, b) = (lo.min(hi), lo.max(hi));
            let mut group = group;
            let second = (b != a).then(|| group.swap_remove(b));
            kept.push(group.swap_remove(a));
            kept.extend(second);
        }
        self.samples = kept;
    }

    /// The window minima, a window with no state in it (none so far) at the value before the
    /// train.
    pub fn window_minima(&self) -> Vec<f64> {
        let ncaps = self.caps.len().max(1);
        self.window_min
            .iter()
            .enumerate()
            .map(|(i, v)| {
                if v.is_finite() {
                    *v
                } else {
                    self.caps[i % ncaps].initial
                }
            })
            .collect()
    }

    /// Time after the train until the gain stays within the band (`None` when it had not by
    /// the end of the run; `Some(0)` when it never left).
    pub fn recovery(&self) -> Option<f64> {
        self.band?;
        match (self.recovered_at, self.last_outside) {
            (Some(at), _) => Some(at - self.train_end),
            (None, None) => Some(0.0),
            (None, Some(_)) => None,
        }
    }
}
