//! The load sweep: log-spaced loads from 50 Ω to 1 MΩ, each judged, and the window that works.

use super::*;

/// One row of the load sweep.
#[derive(Debug, Clone, PartialEq)]
pub struct SweepRow {
    /// Load resistor, ohms.
    pub load: f64,
    /// Effective resistance at the load end (with the instrument input), ohms.
    pub effective: f64,
    /// Figures measured on the computed pulse.
    pub pulse: PulseFigures,
    /// Rise as shown by the instrument (estimate), s.
    pub displayed_rise: Option<f64>,
    /// Peak over baseline noise.
    pub snr: Option<f64>,
    /// Verdict.
    pub verdict: Option<Verdict>,
    /// Whether the rise meets the need.
    pub meets_rise: Option<bool>,
    /// Relative size of the first cable echo, `Γ_load · Γ_base`.
    pub echo: Option<f64>,
}

/// The load sweep and the window of good loads.
#[derive(Debug, Clone, PartialEq)]
pub struct LoadSweep {
    /// Rows, rising load.
    pub rows: Vec<SweepRow>,
    /// Loads that meet the rise need (and are readable when a readout is given): lowest and
    /// highest, ohms.
    pub window: Option<(f64, f64)>,
    /// The window in words.
    pub sentence: String,
    /// What the sweep assumed about the instrument input.
    pub note: Option<String>,
}

/// The load sweep: `n` log-spaced loads from 50 Ω to 1 MΩ for a pulse of `current`.
pub fn load_sweep(
    design: &Design,
    current: &CurrentPulse,
    n: usize,
    photoelectrons: Option<f64>,
    single_pe: Option<&CurrentPulse>,
) -> LoadSweep {
    let (high, note) = match high_impedance(design) {
        Some((d, note)) => (Some(d), Some(note)),
        None => (None, None),
    };
    let design = high.as_ref().unwrap_or(design);
    let r = design.signal.readout.as_ref();
    let (lo, hi) = (50f64.ln(), 1e6f64.ln());
    // Loads are independent: spread them over the cores.
    use rayon::prelude::*;
    let rows: Vec<SweepRow> = (0..n)
        .into_par_iter()
        .map(|i| {
            let load = (lo + (hi - lo) * i as f64 / (n.max(2) - 1) as f64).exp();
            sweep_row(design, load, current, photoelectrons, single_pe)
        })
        .collect();
    let good = |row: &SweepRow| {
        row.meets_rise.unwrap_or(true) && row.verdict.is_none_or(|v| v == Verdict::Readable)
    };
    let window = {
        let g: Vec<&SweepRow> = rows.iter().filter(|x| good(x)).collect();
        g.first().zip(g.last()).map(|(a, b)| (a.load, b.load))
    };
    let sentence = sentence(&rows, r, window);
    LoadSweep {
        rows,
        window,
        sentence,
        note,
    }
}

/// A 50 Ω instrument input makes a high load meaningless: the design with the instrument at
/// its high-impedance setting instead, and the note that says so; `None` when the input is
/// already high or a front end takes the pulse.
fn high_impedance(design: &Design) -> Option<(Design, String)> {
    let ro = design.signal.readout.as_ref()?;
    if ro.input_resistance >= 1e4 || design.signal.front_end.is_some() {
        return None;
    }
    let mut d2 = design.clone();
    if let Some(x) = d2.signal.readout.as_mut() {
        x.input_resistance = 1e6;
        if x.input_capacitance == 0.0 {
            x.input_capacitance = 15e-12;
        }
    }
    let note = format!(
        "the instrument input is {}: the sweep assumes its high-impedance setting (1 MΩ with {})",
        eng(ro.input_resistance, "Ω"),
        eng(
            d2.signal
                .readout
                .as_ref()
                .map_or(15e-12, |x| x.input_capacitance),
            "F"
        )
    );
    Some((d2, note))
}

/// One load of the sweep: the pulse with `load` as the termination, judged.
fn sweep_row(
    design: &Design,
    load: f64,
    current: &CurrentPulse,
    photoelectrons: Option<f64>,
    single_pe: Option<&CurrentPulse>,
) -> SweepRow {
    let r = design.signal.readout.as_ref();
    let fe = design.signal.front_end.as_ref();
    let c = circuit_with_termination(design, Some(load));
    let (far, w) = at_instrument(&c, fe, current);
    let f = w.measure_first(c.cable.map(|l| l.delay));
    let echo = echoes(&c, &far);
    let inst = r.map(|r| rise_bandwidth(r.response).0 / r.bandwidth);
    let displayed = f.rise.map(|x| rss(&[x, inst.unwrap_or(0.0)]));
    let (snr, verdict) = match r {
        Some(ro) => {
            let one = single_pe
                .filter(|_| photoelectrons.is_some_and(|x| x < 1.0))
                .map(|p| at_instrument(&c, fe, p).1.measure().peak);
            let j = judge(
                f.peak,
                noise(&c, ro, one.unwrap_or(f.peak), fe),
                displayed,
                ro,
                photoelectrons,
                echo,
                one,
            );
            (Some(j.snr), Some(j.verdict))
        }
        None => (None, None),
    };
    let need = r.and_then(|r| r.rise_need);
    SweepRow {
        load,
        effective: c.load_resistance,
        pulse: f,
        displayed_rise: displayed,
        snr,
        verdict,
        meets_rise: need.zip(displayed).map(|(n, d)| d <= n),
        echo: echo.map(|e| e.first_echo),
    }
}

/// The sweep's conclusion in one sentence.
fn sentence(rows: &[SweepRow], r: Option<&ReadoutSpec>, window: Option<(f64, f64)>) -> String {
    let need = r.and_then(|r| r.rise_need);
    let fast: Vec<&SweepRow> = rows
        .iter()
        .filter(|x| x.meets_rise.unwrap_or(false))
        .collect();
    match (need, window) {
        (Some(n), Some((a, b))) if a == b => format!(
            "only {} of the loads tried gives a displayed rise within the {} needed and a readable pulse",
            eng(a, "Ω"),
            eng(n, "s")
        ),
        (Some(n), Some((a, b))) => format!(
            "loads from {} to {} give a displayed rise within the {} needed and a readable pulse",
            eng(a, "Ω"),
            eng(b, "Ω"),
            eng(n, "s")
        ),
        (Some(n), None) => match fast.last() {
            Some(f) => format!(
                "loads up to {} meet the {} rise need, but none of them gives a readable pulse (the best is {}): see the reasons under READOUT",
                eng(f.load, "Ω"),
                eng(n, "s"),
                rows.iter()
                    .filter_map(|x| x.verdict)
                    .min()
                    .map_or("not judged", Verdict::as_str)
            ),
            None => format!(
                "no load from 50 Ω to 1 MΩ meets the {} rise need: the tube, light pulse or instrument is too slow",
                eng(n, "s")
            ),
        },
        (None, Some((a, b))) => format!(
            "loads from {} to {} give a readable pulse (give readout.rise_need to narrow the window)",
            eng(a, "Ω"),
            eng(b, "Ω")
        ),
        (None, None) if r.is_some() => {
            "no load from 50 Ω to 1 MΩ gives a readable pulse".to_string()
        }
        (None, None) => "give a readout block to judge the loads".to_string(),
    }
}
