//! The signal path as wired (anode → base → cable → termination ∥ instrument), the pulse at
//! its far end, the cable's echoes and what a front end did to the pulse.

use super::*;

/// The cable's reflections.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Echoes {
    /// Cable delay one way, s.
    pub delay: f64,
    /// Γ at the load end.
    pub gamma_load: f64,
    /// Γ at the base end.
    pub gamma_base: f64,
    /// Spacing of echoes at the load, s (`2 T`).
    pub spacing: f64,
    /// Relative size of the first echo at the instrument (signed): measured on the computed
    /// pulse, where the far end's Γ(ω) of R ∥ C and the base end's act at the pulse's own
    /// frequencies; the resistive product `Γ_load · Γ_base` when the pulse is longer than the
    /// round trip and its echo cannot be told apart.
    pub first_echo: f64,
    /// Whether `first_echo` was measured on the waveform (else the resistive product).
    pub measured: bool,
}

/// The cable's echoes for a load circuit, if it has a cable.
pub fn echoes(c: &LoadCircuit, w: &Waveform) -> Option<Echoes> {
    c.cable.map(|line| {
        let gl = c.load_reflection().unwrap_or(0.0);
        let gb = c.source_reflection().unwrap_or(1.0);
        let measured = w.first_echo(line.delay);
        Echoes {
            delay: line.delay,
            gamma_load: gl,
            gamma_base: gb,
            spacing: 2.0 * line.delay,
            first_echo: measured.unwrap_or(gl * gb),
            measured: measured.is_some(),
        }
    })
}

/// The signal path of a design as wired: anode (capacitance, anode resistor), coupling
/// capacitor, resistor at the base, cable, termination at the instrument end ∥ the
/// instrument's input R ∥ C. The one description every solve of the pulse reads.
pub fn circuit(design: &Design) -> LoadCircuit {
    circuit_with_termination(design, design.load_resistance.map(|r| r.get::<ohm>()))
}

/// The signal path in one line, as wired from the anode to the instrument, e.g.
/// "anode ∥ 15 pF → 50 Ω at the base → 2 m of 50 Ω cable → 50 Ω ∥ 8 pF input".
pub fn path_line(design: &Design) -> String {
    let mut parts = vec![format!(
        "anode ∥ {}",
        eng(design.load_capacitance.get::<farad>(), "F")
    )];
    if let Some(ra) = design.anode_resistor {
        let to = match design.polarity {
            crate::design::Polarity::AnodePositive => "+HV",
            crate::design::Polarity::CathodeNegative => "ground",
        };
        parts[0] = format!("{}, {} to {to}", parts[0], eng(ra.get::<ohm>(), "Ω"));
    }
    if let Some((cc, _)) = design.coupling {
        parts.push(format!("coupling {}", eng(cc.get::<farad>(), "F")));
    }
    if let Some(rb) = design.base_resistance {
        parts.push(format!("{} at the base", eng(rb.get::<ohm>(), "Ω")));
    }
    let readout = design.signal.readout.as_ref();
    if let Some(c) = readout.and_then(|r| r.cable) {
        parts.push(format!(
            "{} of {} cable",
            eng(c.length, "m"),
            eng(c.impedance, "Ω")
        ));
    }
    // The far end: the termination and the instrument's input side by side.
    let mut far = Vec::new();
    if let Some(rl) = design.load_resistance {
        let what = if readout.is_some() {
            "termination"
        } else {
            "load"
        };
        far.push(format!("{} {what}", eng(rl.get::<ohm>(), "Ω")));
    }
    if let Some(f) = &design.signal.front_end {
        let (rf, cf) = f.input();
        let mut input = eng(rf, "Ω");
        if cf > 0.0 {
            input = format!("{input} ∥ {}", eng(cf, "F"));
        }
        far.push(format!("{input} front-end input"));
        parts.push(far.join(" ∥ "));
        far = Vec::new();
        parts.push(f.describe());
        if let Some(r) = readout {
            parts.push(format!("{} instrument", eng(r.bandwidth, "Hz")));
        }
    } else if let Some(r) = readout {
        let mut input = eng(r.input_resistance, "Ω");
        if r.input_capacitance > 0.0 {
            input = format!("{input} ∥ {}", eng(r.input_capacitance, "F"));
        }
        far.push(format!("{input} input"));
    }
    if !far.is_empty() {
        parts.push(far.join(" ∥ "));
    }
    parts.join(" → ")
}

/// [`circuit`] with another termination at the instrument end (`None`: open), as the load
/// sweep tries them.
pub(super) fn circuit_with_termination(design: &Design, termination: Option<f64>) -> LoadCircuit {
    let r = design.signal.readout.as_ref();
    // The far end's input: a front end's when one is fitted (its input is the termination),
    // else the instrument's.
    let (rin, cin) = match &design.signal.front_end {
        Some(f) => {
            let (rf, cf) = f.input();
            (Some(rf), cf)
        }
        None => r.map_or((None, 0.0), |r| {
            (Some(r.input_resistance), r.input_capacitance)
        }),
    };
    LoadCircuit {
        anode_capacitance: design.load_capacitance.get::<farad>(),
        anode_resistance: design.anode_resistor.map(|x| x.get::<ohm>()),
        coupling: design.coupling.map(|c| c.0.get::<farad>()),
        base_resistance: design.base_resistance.map(|x| x.get::<ohm>()),
        cable: r.and_then(|r| r.cable).map(|c| waveform::Line {
            delay: c.delay(),
            impedance: c.impedance,
        }),
        load_resistance: waveform::parallel(&[termination, rin]),
        load_capacitance: cin,
    }
}

/// The pulse at the far end of the path for `current`, and what the instrument receives: the
/// same, or the front end's output.
pub(super) fn at_instrument(
    c: &LoadCircuit,
    fe: Option<&FrontEnd>,
    current: &CurrentPulse,
) -> (Waveform, Waveform) {
    let far = waveform::simulate(c, current, 0.0);
    let out = fe.map_or_else(|| far.clone(), |f| f.process(&far));
    (far, out)
}

/// What a front end did to the pulse.
#[derive(Debug, Clone, PartialEq)]
pub struct FrontEndFigures {
    /// `voltage_amplifier` or `charge_preamplifier`.
    pub kind: &'static str,
    /// In words.
    pub description: String,
    /// Peak at the front end's input, V.
    pub input_peak: f64,
    /// Peak at its output, V.
    pub peak: f64,
    /// Time of the output's peak, s.
    pub t_peak: f64,
    /// Peak over baseline noise at the instrument (with a readout).
    pub snr: Option<f64>,
    /// The front end's noise at its output.
    pub noise: FrontNoise,
    /// Charge into the preamplifier, C.
    pub charge_in: Option<f64>,
    /// Its step `Q / C_f`, V.
    pub step: Option<f64>,
    /// Output peak after the charge's centroid, s (measured).
    pub peaking_time: Option<f64>,
    /// Measured output peak over the step and shaper gain.
    pub peak_factor: Option<f64>,
    /// `n^n e^(−n)/n!` beside it.
    pub peak_factor_theory: Option<f64>,
}

/// What the front end did to the pulse.
pub(super) fn front_end_figures(
    fe: &FrontEnd,
    c: &LoadCircuit,
    far: &Waveform,
    pulse: &PulseFigures,
    readable: Option<&Readability>,
) -> FrontEndFigures {
    let noise = fe.noise(front_end_shunt(c, fe), c.total_capacitance());
    let mut fig = FrontEndFigures {
        kind: fe.kind(),
        description: fe.describe(),
        input_peak: far.measure().peak,
        peak: pulse.peak,
        t_peak: pulse.t_peak,
        snr: readable.map(|r| r.snr),
        noise,
        charge_in: None,
        step: None,
        peaking_time: None,
        peak_factor: None,
        peak_factor_theory: None,
    };
    if let FrontEnd::Charge(p) = fe {
        // The charge that entered the preamplifier and when (its centroid), by the trapezoid
        // rule on the computed input.
        let (mut q, mut qt) = (0.0, 0.0);
        for i in 1..far.t.len() {
            let h = far.t[i] - far.t[i - 1];
            let a = 0.5 * (far.v[i] + far.v[i - 1]) / p.input_resistance;
            q += a * h;
            qt += a * h * 0.5 * (far.t[i] + far.t[i - 1]);
        }
        let step = q / p.feedback_capacitance;
        fig.charge_in = Some(q);
        fig.step = Some(step);
        if q > 0.0 {
            fig.peaking_time = Some(pulse.t_peak - qt / q);
            fig.peak_factor = Some(pulse.peak / (step * p.shaper_gain));
        }
        fig.peak_factor_theory = Some(crate::budget::frontend::peak_factor(p.order));
    }
    fig
}
