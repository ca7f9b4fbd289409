//! Comparisons beside the tube: a PIN photodiode with a transimpedance amplifier giving the
//! same pulse, and the light-line × cathode match table.

use super::*;

/// The photodiode alternative.
#[derive(Debug, Clone, PartialEq)]
pub struct Photodiode {
    /// Photon-weighted responsivity, A/W.
    pub responsivity: f64,
    /// Charge per pulse, C.
    pub charge: f64,
    /// Peak photocurrent, A.
    pub peak_amps: f64,
    /// Feedback resistor for the same peak voltage, ohms.
    pub feedback: f64,
    /// Bandwidth needed for the same rise, Hz.
    pub bandwidth: f64,
    /// Gain-bandwidth product needed, Hz.
    pub gbw: f64,
    /// Output noise (feedback resistor + amplifier), V rms.
    pub noise: f64,
    /// Peak over noise.
    pub snr: f64,
    /// Whether it is practical, with the reason.
    pub practical: bool,
    /// The plain sentence.
    pub sentence: String,
}

/// A PIN photodiode and transimpedance amplifier giving the same peak voltage and rise.
pub(super) fn photodiode_alternative(
    spectrum: &Spectrum,
    photons_at_detector: f64,
    shape: &Shape,
    peak_volts: f64,
    rise: f64,
) -> Option<Photodiode> {
    let si = cathode::silicon_photodiode()?;
    let mut electrons = 0.0;
    let mut energy = 0.0;
    for (nm, p) in spectrum.weights() {
        let qe = cathode::qe_from_sensitivity(si.curve.at_or_zero(nm), nm);
        electrons += photons_at_detector * p * qe;
        energy += photons_at_detector * p * cathode::photon_energy(nm);
    }
    let charge = electrons * ELEMENTARY_CHARGE;
    if !(charge > 0.0 && peak_volts > 0.0) {
        return None;
    }
    let peak_amps = charge / shape.area_per_peak();
    let feedback = peak_volts / peak_amps;
    let bandwidth = RISE_BW_SINGLE_POLE / rise;
    let gbw =
        2.0 * std::f64::consts::PI * feedback * PHOTODIODE_CAPACITANCE * bandwidth * bandwidth;
    let enbw = std::f64::consts::FRAC_PI_2 * bandwidth;
    let v_rf = johnson_density(feedback, NOISE_TEMPERATURE) * enbw.sqrt();
    let cf = 1.0 / (2.0 * std::f64::consts::PI * feedback * bandwidth);
    let v_en = AMPLIFIER_NOISE * (1.0 + PHOTODIODE_CAPACITANCE / cf) * enbw.sqrt();
    let noise = rss(&[v_rf, v_en]);
    let snr = peak_volts / noise;
    let practical = gbw <= PRACTICAL_GBW && snr >= 10.0;
    let sentence = if practical {
        format!(
            "practical: a {} feedback resistor and an amplifier of {} gain-bandwidth give the same pulse with a peak-to-noise of {:.0}",
            eng(feedback, "Ω"),
            eng(gbw, "Hz"),
            snr
        )
    } else if gbw > PRACTICAL_GBW && snr < 10.0 {
        format!(
            "not practical: it would need {} of gain-bandwidth (fast amplifiers give a few GHz) and still reach only {:.1} peak-to-noise; the tube's gain is what makes this light readable",
            eng(gbw, "Hz"),
            snr
        )
    } else if gbw > PRACTICAL_GBW {
        format!(
            "not practical: the {} feedback resistor at this rise time needs {} of gain-bandwidth (fast amplifiers give a few GHz)",
            eng(feedback, "Ω"),
            eng(gbw, "Hz")
        )
    } else {
        format!(
            "not practical: the photocurrent is too small; peak-to-noise would be {:.1}",
            snr
        )
    };
    let _ = energy;
    Some(Photodiode {
        responsivity: charge / (energy.max(1e-300)),
        charge,
        peak_amps,
        feedback,
        bandwidth,
        gbw,
        noise,
        snr,
        practical,
        sentence,
    })
}

/// One cell of the light-and-cathode comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct MatchCell {
    /// Cathode key.
    pub cathode: String,
    /// QE at the wavelength (window included).
    pub qe: f64,
    /// Photoelectrons per pulse.
    pub photoelectrons: f64,
    /// Peak at the load, V.
    pub peak_volts: f64,
    /// Verdict with the design's readout.
    pub verdict: Option<Verdict>,
}

/// One wavelength of the comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct MatchRow {
    /// Wavelength, nm.
    pub nm: f64,
    /// Label, e.g. "632.8 nm He-Ne (in air)".
    pub label: String,
    /// One cell per cathode.
    pub cells: Vec<MatchCell>,
}

/// Common laser and LED lines for the comparison (nm, label). He-Ne is given in air; its
/// vacuum wavelength is 632.9908 nm (CIPM 2007).
pub const COMMON_LINES: [(f64, &str); 12] = [
    (266.0, "Nd:YAG 4th harmonic"),
    (355.0, "Nd:YAG 3rd harmonic"),
    (405.0, "violet diode"),
    (450.0, "blue diode"),
    (520.0, "green diode"),
    (532.0, "Nd:YAG 2nd harmonic"),
    (632.8, "He-Ne, in air (632.99 nm in vacuum)"),
    (650.0, "red diode"),
    (780.0, "near-infrared diode"),
    (850.0, "near-infrared diode"),
    (905.0, "pulsed infrared diode"),
    (1064.0, "Nd:YAG fundamental"),
];

/// Compare wavelengths × cathodes for `photons` at the cathode per pulse, with the design's
/// gain, load and readout. The pulse shape is the design's light shape (or a 2 ns Gaussian).
pub fn light_match(
    design: &Design,
    chain: &Chain,
    lines: &[(f64, String)],
    cathodes: &[Cathode],
    photons: f64,
) -> Vec<MatchRow> {
    let s = &design.signal;
    let shape = s
        .light
        .as_ref()
        .map_or(Shape::Gaussian { fwhm: 2e-9 }, |l| l.shape);
    let sigma_ser = ser_sigma(s.timing.ser_rise);
    let sigma_tts = s.timing.tts_fwhm / FWHM_PER_SIGMA;
    let sigma = (sigma_ser * sigma_ser + sigma_tts * sigma_tts).sqrt();
    let mult = chain.gain / chain.collection;
    // The pulse is linear in the charge: one waveform per coulomb serves every cell.
    let unit = waveform::convolved_pulse(&shape, sigma, 1.0);
    let c = circuit(design);
    let fe = s.front_end.as_ref();
    let (far, w) = at_instrument(&c, fe, &unit);
    let f = w.measure_first(c.cable.map(|l| l.delay));
    let echo = echoes(&c, &far);
    let r = s.readout.as_ref();
    let displayed = f.rise.map(|x| {
        rss(&[
            x,
            r.map_or(0.0, |r| rise_bandwidth(r.response).0 / r.bandwidth),
        ])
    });
    let one_pe = at_instrument(
        &c,
        fe,
        &waveform::gaussian_pulse(sigma_ser, mult * ELEMENTARY_CHARGE),
    )
    .1
    .measure()
    .peak;
    lines
        .iter()
        .map(|(nm, label)| MatchRow {
            nm: *nm,
            label: label.clone(),
            cells: cathodes
                .iter()
                .map(|k| {
                    let qe = k.qe(*nm);
                    let npe = photons * qe * chain.collection;
                    let peak = f.peak * npe * mult * ELEMENTARY_CHARGE;
                    MatchCell {
                        cathode: k.key.clone(),
                        qe,
                        photoelectrons: npe,
                        peak_volts: peak,
                        verdict: r.map(|ro| {
                            let n = noise(&c, ro, peak, fe);
                            judge(peak, n, displayed, ro, Some(npe), echo, Some(one_pe)).verdict
                        }),
                    }
                })
                .collect(),
        })
        .collect()
}
