//! Baseline noise at the instrument: Johnson–Nyquist noise of the load through the
//! instrument's response, the instrument's own noise on the range a pulse is read on.

use super::*;

/// Noise at the instrument.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Noise {
    /// The range the pulse is read on: V/div for an oscilloscope, full scale for a digitiser.
    pub range: f64,
    /// Whether `range` is volts per division (an oscilloscope) or a full scale.
    pub per_division: bool,
    /// Instrument's own at that range, V rms.
    pub instrument: f64,
    /// Johnson–Nyquist of the load over the bandwidth, V rms (through the front end when one
    /// is fitted).
    pub johnson: f64,
    /// The front end's own noise at its output, V rms (0 without a front end).
    pub amplifier: f64,
    /// Baseline total, V rms.
    pub total: f64,
}

/// Johnson–Nyquist noise density `√(4 k T R)`, V/√Hz.
pub fn johnson_density(r: f64, kelvin: f64) -> f64 {
    (4.0 * BOLTZMANN * kelvin * r).sqrt()
}

/// Johnson noise of `r` shunted by `c`, seen through the instrument's response of bandwidth
/// `bw`, V rms: `√(4kTR ∫ |H_RC|² |H_inst|² df)`, integrated numerically.
pub fn johnson_rms(r: f64, c: f64, bw: f64, response: InstrumentResponse) -> f64 {
    let fc = if c > 0.0 {
        1.0 / (2.0 * std::f64::consts::PI * r * c)
    } else {
        f64::INFINITY
    };
    // Integrate over ln f from bw·1e-6 to bw·1e3 (the rest is below 1e-6 of the total).
    let n = 2000;
    let (lo, hi) = ((bw * 1e-6).ln(), (bw * 1e3).ln());
    let h = (hi - lo) / n as f64;
    let mut s = 0.0;
    for i in 0..=n {
        let f = (lo + i as f64 * h).exp();
        let x = f / bw;
        let inst = match response {
            InstrumentResponse::SinglePole => 1.0 / (1.0 + x * x),
            InstrumentResponse::Gaussian => (-std::f64::consts::LN_2 * x * x).exp(),
        };
        let rc = 1.0 / (1.0 + (f / fc).powi(2));
        let w = if i == 0 || i == n { 0.5 } else { 1.0 };
        s += w * inst * rc * f * h;
    }
    // Add the tiny part below the lower limit (flat response there).
    s += bw * 1e-6;
    (4.0 * BOLTZMANN * NOISE_TEMPERATURE * r * s).sqrt()
}

/// Rise × bandwidth product of an instrument response and its name.
pub fn rise_bandwidth(response: InstrumentResponse) -> (f64, &'static str) {
    match response {
        InstrumentResponse::SinglePole => (
            RISE_BW_SINGLE_POLE,
            "single-pole response assumed: 0.35/BW (ln 9 / 2π)",
        ),
        InstrumentResponse::Gaussian => (RISE_BW_GAUSSIAN, "Gaussian response assumed: 0.34/BW"),
    }
}

/// Baseline noise at the instrument for a load circuit, through the front end when one is
/// fitted (its own noise and the path's resistors through it).
pub(super) fn noise(c: &LoadCircuit, r: &ReadoutSpec, peak: f64, fe: Option<&FrontEnd>) -> Noise {
    let (johnson, amplifier) = match fe {
        None => (
            johnson_rms(
                c.pulse_resistance(),
                c.total_capacitance(),
                r.bandwidth,
                r.response,
            ),
            0.0,
        ),
        Some(f) => {
            let n = f.noise(front_end_shunt(c, f), c.total_capacitance());
            (n.johnson, n.amplifier)
        }
    };
    let (range, per_division) = range_for(peak, r);
    // An oscilloscope's noise grows with V/div above its front end's floor; a digitiser's is a
    // fixed fraction of its full scale (common practice, docs/physics.md §11).
    let instrument = match r.division_volts {
        Some(_) => r.noise_rms.max(r.noise_per_division * range),
        None => r.noise_rms * range / r.sensitive_full_scale,
    };
    Noise {
        range,
        per_division,
        instrument,
        johnson,
        amplifier,
        total: rss(&[instrument, johnson, amplifier]),
    }
}

/// The resistance whose Johnson noise a front end sees at its input, ohms: the whole path for
/// a voltage amplifier (its input resistor is a real, noisy termination); the path without the
/// preamplifier's own input for a charge preamplifier (its input is its transistor, whose noise
/// is the series noise).
pub(super) fn front_end_shunt(c: &LoadCircuit, f: &FrontEnd) -> f64 {
    match f {
        FrontEnd::Voltage(_) => c.pulse_resistance(),
        FrontEnd::Charge(p) => {
            let g_term = (1.0 / c.load_resistance - 1.0 / p.input_resistance).max(0.0);
            let term = (g_term > 1e-15).then(|| 1.0 / g_term);
            waveform::parallel(&[c.anode_resistance, c.base_resistance, term])
        }
    }
}

/// The range a pulse of `peak` volts is read on: the most sensitive one that shows it within
/// three quarters of the screen or span, stepping 1–2–5 from the most sensitive range and
/// stopping at the largest. Returns the V/div (oscilloscope, `true`) or the full scale.
pub(super) fn range_for(peak: f64, r: &ReadoutSpec) -> (f64, bool) {
    let (start, fit, top, per_div) = match r.division_volts {
        Some(div) => {
            let d = f64::from(r.divisions.max(1));
            (div, peak / (0.75 * d), r.largest_full_scale / d, true)
        }
        None => (
            r.sensitive_full_scale,
            peak / 0.75,
            r.largest_full_scale,
            false,
        ),
    };
    let mut range = start;
    let steps = [2.0, 2.5, 2.0];
    let mut i = 0;
    while range < fit && range * steps[i % 3] <= top * (1.0 + 1e-9) && i < 60 {
        range *= steps[i % 3];
        i += 1;
    }
    if range < fit {
        range = top.max(start);
    }
    (range, per_div)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn johnson_over_a_single_pole_matches_the_closed_form() {
        // ENBW of a single pole is π/2 · BW (standard result); with no shunt capacitance the
        // integral must give it.
        let v = johnson_rms(1e3, 0.0, 1e8, InstrumentResponse::SinglePole);
        let expect =
            johnson_density(1e3, NOISE_TEMPERATURE) * (std::f64::consts::FRAC_PI_2 * 1e8).sqrt();
        assert!((v / expect - 1.0).abs() < 2e-3, "{v} {expect}");
    }
}
