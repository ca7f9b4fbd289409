//! `dynode new`: a commented starter design from a few answers (stages, supply and polarity,
//! cathode, divider style, light and readout kind) or from a named starting point.
//!
//! The text is RON in the design file's own schema, each field set with a comment that says
//! what it is and where the number comes from (invented starting values to replace with the
//! tube's and the experiment's own). The divider is sized for a chosen current by Ohm's law
//! (`R_unit = V / (I Σ w)` over the style's weights) and snapped to E24; the capacitors on the
//! last two gaps get a rating of at least twice their gap's share of the supply. The caller
//! ([`crate::cli::basic::new_design`]) parses and solves what is written before handing it out.

use crate::design::Polarity;
use crate::model::eseries::Series;
use crate::units::format_eng;

/// How the divider shares the supply.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DividerStyle {
    /// Every gap the same.
    Equal,
    /// K–D1 twice the others (better photoelectron collection; common practice).
    FirstDouble,
    /// K–D1 doubled and the last three gaps raised 1.25×, 1.5×, 2× (pulse linearity; common
    /// practice).
    Tapered,
}

/// What lights the cathode.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LightKind {
    /// No light block (DC figures only).
    None,
    /// A plastic scintillator crossed by charged particles.
    Scintillator,
    /// A pulsed LED.
    Led,
    /// A pulsed laser.
    Laser,
}

/// What reads the pulse.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ReadoutKind {
    /// No readout block.
    None,
    /// An oscilloscope on a 50 Ω cable, terminated at the oscilloscope.
    Scope,
}

/// The answers a starter is written from.
#[derive(Debug, Clone, PartialEq)]
pub struct Starter {
    /// Title.
    pub name: String,
    /// Dynodes.
    pub stages: usize,
    /// Supply magnitude, volts.
    pub supply: f64,
    /// Polarity.
    pub polarity: Polarity,
    /// Built-in cathode key.
    pub cathode: String,
    /// Built-in window key.
    pub window: Option<String>,
    /// Divider style.
    pub divider: DividerStyle,
    /// Divider current wanted with no tube current, amperes.
    pub divider_current: f64,
    /// Light.
    pub light: LightKind,
    /// Readout.
    pub readout: ReadoutKind,
}

/// Named starting points, one like each demo design: (name, what it is, answers). Long by
/// nature: a table, one entry per demo.
pub fn starting_points() -> Vec<(&'static str, &'static str, Starter)> {
    let s = |name: &str, stages, supply, polarity, divider, light, readout| Starter {
        name: name.to_string(),
        stages,
        supply,
        polarity,
        cathode: "bialkali".to_string(),
        window: Some("borosilicate".to_string()),
        divider,
        divider_current: 200e-6,
        light,
        readout,
    };
    use DividerStyle::*;
    use Polarity::*;
    vec![
        (
            "paddle",
            "scintillator paddle for cosmic rays, cathode at −HV (like designs/rooftop-paddle.ron)",
            s(
                "Scintillator paddle (starter)",
                10,
                1100.0,
                CathodeNegative,
                FirstDouble,
                LightKind::Scintillator,
                ReadoutKind::Scope,
            ),
        ),
        (
            "led-bench",
            "LED test bench with a back-terminated cable (like designs/back-terminated.ron)",
            s(
                "LED bench (starter)",
                10,
                1100.0,
                CathodeNegative,
                FirstDouble,
                LightKind::Led,
                ReadoutKind::Scope,
            ),
        ),
        (
            "laser-burst",
            "pulsed-laser readout (like designs/laser-burst-counter.ron)",
            s(
                "Pulsed-laser readout (starter)",
                10,
                1250.0,
                CathodeNegative,
                FirstDouble,
                LightKind::Laser,
                ReadoutKind::Scope,
            ),
        ),
        (
            "laser-timing",
            "fast timing with a 12-stage tube and a tapered divider (like designs/laser-timing.ron)",
            s(
                "Laser timing (starter)",
                12,
                1600.0,
                CathodeNegative,
                Tapered,
                LightKind::Laser,
                ReadoutKind::Scope,
            ),
        ),
        (
            "liquid-cell",
            "scintillator cell at high rate, tapered divider (like designs/liquid-cell-tapered.ron)",
            s(
                "Scintillator cell (starter)",
                12,
                1800.0,
                CathodeNegative,
                Tapered,
                LightKind::Scintillator,
                ReadoutKind::Scope,
            ),
        ),
        (
            "multiplier",
            "battery-run scintillation counter (like designs/multiplier-fed.ron; add its supply.multiplier block by hand)",
            s(
                "Multiplier-fed counter (starter)",
                10,
                1100.0,
                CathodeNegative,
                FirstDouble,
                LightKind::Scintillator,
                ReadoutKind::Scope,
            ),
        ),
        (
            "transistor-held",
            "high-rate counter whose last dynodes are held by followers (like designs/transistor-held.ron; add its divider.followers block by hand)",
            s(
                "Transistor-held counter (starter)",
                10,
                1100.0,
                CathodeNegative,
                FirstDouble,
                LightKind::Scintillator,
                ReadoutKind::Scope,
            ),
        ),
        (
            "dark-counter",
            "photon counting with a 12-stage tube (like designs/photon-counter-dark.ron; add its front_end block by hand)",
            s(
                "Dark-count photon counter (starter)",
                12,
                1300.0,
                CathodeNegative,
                FirstDouble,
                LightKind::Led,
                ReadoutKind::Scope,
            ),
        ),
        (
            "spectroscopy",
            "scintillation spectroscopy at a modest supply (like designs/spectroscopy-preamp.ron; add its front_end block by hand)",
            s(
                "Scintillation spectroscopy (starter)",
                10,
                750.0,
                CathodeNegative,
                FirstDouble,
                LightKind::Scintillator,
                ReadoutKind::Scope,
            ),
        ),
        (
            "timing-bench",
            "time-of-flight bench with a pulsed laser (like designs/timing-bench.ron)",
            s(
                "Timing bench (starter)",
                10,
                1600.0,
                CathodeNegative,
                Tapered,
                LightKind::Laser,
                ReadoutKind::Scope,
            ),
        ),
        (
            "photon-counter",
            "photon counting with the anode at +HV and a coupling capacitor (like designs/photon-counter-positive.ron)",
            s(
                "Photon counter (starter)",
                10,
                1250.0,
                AnodePositive,
                FirstDouble,
                LightKind::Led,
                ReadoutKind::Scope,
            ),
        ),
    ]
}

/// Weights of the gaps for a style (K–D1 first, `stages + 1` gaps).
pub fn weights(style: DividerStyle, stages: usize) -> Vec<f64> {
    let n = stages + 1;
    let mut w = vec![1.0; n];
    if style != DividerStyle::Equal && n > 1 {
        w[0] = 2.0;
    }
    if style == DividerStyle::Tapered && n >= 5 {
        w[n - 3] = 1.25;
        w[n - 2] = 1.5;
        w[n - 1] = 2.0;
    }
    w
}

/// A value as the design file takes it: "470k", "1.5M", "4.7n".
fn ron_value(x: f64, unit: &str) -> String {
    let s = format_eng(x, unit);
    match s.split_once(' ') {
        Some((num, rest)) => {
            let num = if num.contains('.') {
                num.trim_end_matches('0').trim_end_matches('.')
            } else {
                num
            };
            if unit.is_empty() {
                format!("{num}{}", rest.trim())
            } else {
                format!("{num} {rest}")
            }
        }
        None => s,
    }
}

/// The starter design's text. Long by nature: a template written line by line in the file's
/// order, each field beside its comment, so the text reads as the file it makes.
pub fn write(o: &Starter) -> String {
    let n = o.stages;
    let w = weights(o.divider, n);
    let sum: f64 = w.iter().sum();
    let unit = o.supply / (o.divider_current * sum);
    let rs: Vec<f64> = w
        .iter()
        .map(|x| Series::E24.nearest(x * unit).unwrap_or(x * unit))
        .collect();
    let total: f64 = rs.iter().sum();
    let gap = |j: usize| o.supply * rs[j] / total;
    let cap_rating = crate::model::eseries::capacitor_rating;
    let max_supply = ((o.supply * 1.35) / 100.0).ceil() * 100.0;
    let sign = if o.polarity == Polarity::CathodeNegative {
        "-"
    } else {
        "+"
    };
    let polarity = match o.polarity {
        Polarity::CathodeNegative => "CathodeNegative",
        Polarity::AnodePositive => "AnodePositive",
    };
    let style = match o.divider {
        DividerStyle::Equal => "every gap the same",
        DividerStyle::FirstDouble => "K–D1 twice the others, for photoelectron collection",
        DividerStyle::Tapered => {
            "K–D1 doubled and the last three gaps raised 1.25×, 1.5×, 2× for pulse linearity"
        }
    };
    let mut t = String::new();
    let line = |t: &mut String, s: &str| {
        t.push_str(s);
        t.push('\n');
    };
    line(&mut t, "// Starter design written by `dynode new`.");
    line(
        &mut t,
        "// A scenario of our own with INVENTED starting numbers: replace every figure marked",
    );
    line(
        &mut t,
        "// \"replace\" with your tube's data sheet and your own parts before building anything.",
    );
    line(
        &mut t,
        "// HIGH VOLTAGE: the circuit this file describes can kill. Read SAFETY.md first.",
    );
    line(
        &mut t,
        "// Check it with `dynode check FILE`; report with `dynode report FILE`.",
    );
    line(&mut t, "(");
    line(
        &mut t,
        &format!("    name: \"{}\",", o.name.replace('"', "'")),
    );
    line(
        &mut t,
        &format!(
            "    notes: Some(\"Starter: {n} stages, {} V, {polarity}, divider: {style}.\"),",
            sign.to_string() + &crate::units::show_number(o.supply)
        ),
    );
    line(&mut t, "    tube: (");
    line(
        &mut t,
        &format!(
            "        // Number of dynodes (the divider then has {} gaps).",
            n + 1
        ),
    );
    line(&mut t, &format!("        stages: {n},"));
    line(
        &mut t,
        "        // Gain law delta = a V^k per stage, calibrated on one point: the gain at a supply",
    );
    line(
        &mut t,
        "        // voltage (replace with the data sheet's figure) and the exponent k (0.7-0.8 is usual).",
    );
    line(
        &mut t,
        &format!(
            "        gain: Reference(volts: \"{} V\", gain: 1.0e6, exponent: Some(0.75)),",
            crate::units::show_number((o.supply * 0.9).round())
        ),
    );
    line(
        &mut t,
        "        // Fraction of photoelectrons collected by the first dynode (replace).",
    );
    line(&mut t, "        collection: Some(\"90 %\"),");
    line(
        &mut t,
        "        // The tube's maximum ratings (replace with the data sheet's).",
    );
    line(&mut t, "        limits: (");
    line(
        &mut t,
        &format!(
            "            max_supply: \"{} V\",",
            crate::units::show_number(max_supply)
        ),
    );
    line(&mut t, "            max_anode_current: \"100 uA\",");
    line(&mut t, "        ),");
    let window = o
        .window
        .as_ref()
        .map_or("None".to_string(), |w| format!("Some(\"{w}\")"));
    line(
        &mut t,
        "        // Cathode response: a built-in generic curve (`dynode cathodes` lists them), or your own table.",
    );
    line(
        &mut t,
        &format!(
            "        cathode: Some(Builtin(name: \"{}\", window: {window})),",
            o.cathode
        ),
    );
    line(
        &mut t,
        "        // Single-electron rise and transit-time spread (replace; typical of a 2-inch tube).",
    );
    line(&mut t, "        single_electron_rise: Some(\"2.5 ns\"),");
    line(&mut t, "        transit_spread: Some(\"1.2 ns\"),");
    line(&mut t, "    ),");
    line(&mut t, "    supply: (");
    line(
        &mut t,
        "        // Signed: negative for a cathode-negative supply, positive for anode-positive.",
    );
    line(
        &mut t,
        &format!(
            "        volts: \"{sign}{} V\",",
            crate::units::show_number(o.supply)
        ),
    );
    line(&mut t, &format!("        polarity: {polarity},"));
    line(
        &mut t,
        "        // The supply's current limit: never defeat it.",
    );
    line(
        &mut t,
        &format!(
            "        current_limit: Some(\"{}\"),",
            ron_value((o.divider_current * 5.0).max(100e-6), "A")
        ),
    );
    line(&mut t, "    ),");
    line(&mut t, "    divider: (");
    line(
        &mut t,
        &format!("        // One element per gap, K–D1 first: {style};"),
    );
    line(
        &mut t,
        &format!(
            "        // sized for about {} with no tube current (Ohm's law), E24 values.",
            format_eng(o.divider_current, "A")
        ),
    );
    let gaps: Vec<String> = rs
        .iter()
        .map(|r| format!("R(\"{}\")", ron_value(*r, "")))
        .collect();
    line(&mut t, &format!("        gaps: [{}],", gaps.join(", ")));
    line(
        &mut t,
        "        // Capacitors on the last gaps hold the voltage during a pulse (rated at least twice",
    );
    line(&mut t, "        // their gap's voltage).");
    line(&mut t, "        decoupling: [");
    for (g, c) in [(n, 4.7e-9), (n + 1, 10e-9)] {
        if g == 0 {
            continue;
        }
        line(
            &mut t,
            &format!(
                "            Across(gap: {g}, value: \"{}\", rating: Some(\"{} V\")),",
                ron_value(c, "F"),
                crate::units::show_number(cap_rating(gap(g - 1)))
            ),
        );
    }
    line(&mut t, "        ],");
    line(
        &mut t,
        "        // Stray capacitance per gap (socket and wiring).",
    );
    line(&mut t, "        stray: Some(\"3 pF\"),");
    line(&mut t, "    ),");
    line(&mut t, "    load: (");
    line(
        &mut t,
        "        // The termination at the instrument end of the cable.",
    );
    line(&mut t, "        resistance: \"50 ohm\",");
    line(
        &mut t,
        "        // Capacitance at the anode node (tube and wiring).",
    );
    line(&mut t, "        capacitance: Some(\"10 pF\"),");
    if o.polarity == Polarity::AnodePositive {
        line(
            &mut t,
            "        // Anode at +HV: the anode returns to +HV through this resistor, and the coupling",
        );
        line(
            &mut t,
            "        // capacitor alone keeps the supply off the instrument (rated well above it).",
        );
        line(&mut t, "        anode_resistor: Some(\"100k\"),");
        line(&mut t, "        coupling: Some(\"2.2 nF\"),");
        line(
            &mut t,
            &format!(
                "        coupling_rating: Some(\"{} V\"),",
                crate::units::show_number(cap_rating(o.supply))
            ),
        );
    }
    line(&mut t, "    ),");
    line(
        &mut t,
        "    // The resistor family: power, working voltage and tolerance of one part.",
    );
    line(
        &mut t,
        "    resistors: Some((power: \"0.5 W\", working_voltage: \"500 V\", tolerance: Some(\"1 %\"))),",
    );
    match o.light {
        LightKind::None => {
            line(
                &mut t,
                "    // The average anode current the DC figures are made at.",
            );
            line(
                &mut t,
                &format!(
                    "    operating: Some((anode_current: \"{}\")),",
                    ron_value(o.divider_current / 100.0, "A")
                ),
            );
        }
        kind => {
            line(
                &mut t,
                "    // The light reaching the cathode per pulse, and how often (replace with yours).",
            );
            line(&mut t, "    light: Some((");
            match kind {
                LightKind::Scintillator => {
                    line(
                        &mut t,
                        "        // Plastic scintillator: 10 000 photons per MeV, about 2 MeV from a muon crossing 1 cm.",
                    );
                    line(
                        &mut t,
                        "        source: Scintillator(emission: Plastic, yield_per_mev: 10000, deposited_mev: 2.0, decay: \"2.4 ns\", rise: Some(\"0.9 ns\")),",
                    );
                    line(&mut t, "        rate: Some(\"100 Hz\"),");
                    line(
                        &mut t,
                        "        // Fraction of the light that reaches the cathode.",
                    );
                    line(&mut t, "        coupling: Some(\"8 %\"),");
                }
                LightKind::Led => {
                    line(
                        &mut t,
                        "        source: Led(centre: \"450 nm\", fwhm: \"25 nm\", pulse: Photons(2000), width: \"30 ns\"),",
                    );
                    line(&mut t, "        rate: Some(\"1 kHz\"),");
                    line(&mut t, "        coupling: Some(\"100 %\"),");
                }
                _ => {
                    line(
                        &mut t,
                        "        source: Laser(wavelength: \"532 nm\", pulse: Photons(1.0e4), width: \"5 ns\"),",
                    );
                    line(&mut t, "        rate: Some(\"1 kHz\"),");
                    line(&mut t, "        coupling: Some(\"1 %\"),");
                }
            }
            line(&mut t, "    )),");
        }
    }
    if o.readout == ReadoutKind::Scope {
        line(
            &mut t,
            "    // The instrument: an oscilloscope on 2 m of 50 ohm cable, terminated at its end.",
        );
        line(&mut t, "    readout: Some((");
        line(&mut t, "        bandwidth: \"200 MHz\",");
        line(
            &mut t,
            "        most_sensitive: PerDivision(volts: \"2 mV\", divisions: Some(8)),",
        );
        line(&mut t, "        input_resistance: \"1M\",");
        line(&mut t, "        input_capacitance: Some(\"13 pF\"),");
        line(&mut t, "        noise: \"0.15 mV\",");
        line(&mut t, "        rise_need: Some(\"10 ns\"),");
        line(
            &mut t,
            "        cable: Some((length: \"2 m\", impedance: \"50 ohm\")),",
        );
        line(&mut t, "    )),");
    }
    line(&mut t, ")");
    t
}
