//! One pass from a checked design to every figure a report shows.
//!
//! Data flows one way: [`crate::design::Design`] → [`TubeModel`] (calibration) → [`Network`]
//! (solve) → [`Analysis`] (gap table, linearity, safety, warnings) → [`crate::report`]. This module
//! does no IO and knows nothing of output formats; warnings are returned beside the results.

use crate::budget::safety::{self, Safety};
use crate::design::{CapStyle, Design, Element};
use crate::model::tube::{TubeError, TubeModel};
use crate::solve::linearity::{self, Linearity};
use crate::solve::network::{Network, OperatingPoint, SolveError, Workspace};
use crate::units::format_eng;
use crate::warning::{Code, Warning, warning};
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

/// Why an analysis could not be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AnalysisError {
    /// The tube could not be calibrated from what the design gives (bad input).
    #[error("{file}: {source}")]
    Tube {
        /// Design file.
        file: String,
        /// Cause.
        source: TubeError,
    },
    /// The operating point the design asks for cannot exist (bad input): the field is named.
    #[error("{file}: {field}: {source}")]
    Operating {
        /// Design file.
        file: String,
        /// The field that asks for it, e.g. `operating.anode_current`.
        field: String,
        /// Cause (always [`SolveError::Unreachable`]).
        source: SolveError,
    },
    /// Two blocks of the design state the same thing differently (bad input): the field
    /// where the second statement is written is named.
    #[error("{file}: {field}: {message}")]
    Contradiction {
        /// Design file.
        file: String,
        /// The field, e.g. `train.size`.
        field: String,
        /// What contradicts what.
        message: String,
    },
    /// A solve failed.
    #[error("{file}: {source}")]
    Solve {
        /// Design file.
        file: String,
        /// Cause.
        source: SolveError,
    },
}

/// One row of the gap table.
#[derive(Debug, Clone, PartialEq)]
pub struct GapRow {
    /// 1-based gap number.
    pub number: usize,
    /// "K–D1" etc.
    pub label: String,
    /// Element description, e.g. "R 1.00 MΩ".
    pub element: String,
    /// Voltage across the divider element at the operating point, volts.
    pub volts: f64,
    /// Share of the supply, fraction.
    pub share: f64,
    /// Current through the element, amperes.
    pub amps: f64,
    /// Dissipation, watts.
    pub watts: f64,
    /// Power rating (resistors), watts.
    pub power_rating: Option<f64>,
    /// Rated voltage (resistors): min(sqrt(P R), working voltage) (IEC 60115-1, from memory).
    pub rated_volts: Option<f64>,
    /// Voltage at zero tube current, volts.
    pub quiescent_volts: f64,
    /// Secondary-emission ratio of the dynode this gap feeds (multiplying gaps only).
    pub delta: Option<f64>,
    /// Power over rating.
    pub over_power: bool,
    /// Voltage over rated voltage.
    pub over_voltage: bool,
    /// Voltage over the tube's gap limit.
    pub over_gap_limit: bool,
}

/// Everything the reports show.
#[derive(Debug, Clone, PartialEq)]
pub struct Analysis {
    /// The design.
    pub design: Design,
    /// The solver network (holds the calibrated tube).
    pub network: Network,
    /// Divider current with no tube current, amperes.
    pub quiescent_amps: f64,
    /// Small-signal gain.
    pub small_signal_gain: f64,
    /// d ln G / d ln Vs.
    pub sensitivity: f64,
    /// Operating point at the design's average anode current.
    pub op: OperatingPoint,
    /// Gap table.
    pub gaps: Vec<GapRow>,
    /// Linearity curve.
    pub linearity: Linearity,
    /// Safety figures.
    pub safety: Safety,
    /// Plausibility warnings (never block).
    pub warnings: Vec<Warning>,
    /// Values assumed because the design did not give them.
    pub assumptions: Vec<String>,
    /// Small-signal gain against supply magnitude under the design's divider: (volts, gain),
    /// from 60 % of the supply to the tube's maximum.
    pub gain_curve: Vec<(f64, f64)>,
    /// The pulse-train figures, when the design gives a `train` block.
    pub train: Option<crate::budget::pulsetrain::TrainAnalysis>,
    /// The signal budget (light → pulse at the load), when the design has a light block.
    pub signal: Option<crate::budget::signal::SignalBudget>,
    /// The supply as built (a voltage multiplier under the base's load), when the design
    /// describes one and its steady state was found.
    pub supply_model: Option<crate::solve::multiplier::SupplyModel>,
    /// Transistor-held stages against the passive divider, when the design has followers.
    pub active_stages: Option<crate::budget::active::ActiveStages>,
}

impl Analysis {
    /// Gain at the operating point.
    pub fn gain(&self) -> f64 {
        self.op.gain()
    }
    /// Total base dissipation, watts.
    pub fn dissipation(&self) -> f64 {
        self.gaps.iter().map(|g| g.watts).sum::<f64>()
            + self.op.anode_amps().powi(2) * self.network.anode_resistance
    }
}

/// The design's pulse stream as one figure: what the train and the light blocks (which
/// describe the same pulses, see [`crate::design`]) give per pulse and on average.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PulseStream {
    /// Cathode charge per pulse, coulombs.
    pub cathode_charge: f64,
    /// Average rate, Hz.
    pub rate: f64,
    /// Average anode current at the small-signal gain, amperes.
    pub average_anode_amps: f64,
    /// Which block the figure comes from.
    pub from: &'static str,
}

/// The pulse stream of a design with a rate, from the train block (which sets the rate) or
/// else the light block; `None` without a rate. A train size that contradicts the light's
/// photoelectrons by more than 10 % is refused where the train's size is written.
fn pulse_stream(design: &Design, gain: f64) -> Result<Option<PulseStream>, AnalysisError> {
    use crate::model::constants::ELEMENTARY_CHARGE;
    let light = design.signal.light.as_ref();
    let light_charge = light.map(|l| {
        crate::model::light::convert(
            &l.spectrum,
            l.photons,
            l.coupling,
            l.filter.as_ref(),
            &design.signal.cathode,
        )
        .emitted
            * ELEMENTARY_CHARGE
    });
    if let Some(t) = &design.train {
        let qk = crate::budget::pulsetrain::cathode_charge(t.size, &t.shape, gain);
        if let Some(ql) = light_charge.filter(|q| *q > 0.0)
            && (qk / ql - 1.0).abs() > 0.10
        {
            return Err(AnalysisError::Contradiction {
                file: design.source.clone(),
                field: "train.size".to_string(),
                message: format!(
                    "{} of anode charge per pulse, while the light block gives {} ({} photoelectrons at the cathode); they are the same pulses: write FromLight, or make the light and the size agree within 10 %",
                    format_eng(qk * gain, "C"),
                    format_eng(ql * gain, "C"),
                    format_eng(ql / ELEMENTARY_CHARGE, "")
                ),
            });
        }
        return Ok(t.pattern.average_rate().map(|rate| PulseStream {
            cathode_charge: qk,
            rate,
            average_anode_amps: qk * gain * rate,
            from: "the train block",
        }));
    }
    Ok(light
        .and_then(|l| l.rate)
        .zip(light_charge)
        .map(|(rate, q)| PulseStream {
            cathode_charge: q,
            rate,
            average_anode_amps: q * gain * rate,
            from: "the light block",
        }))
}

/// What a builder should hear about the supply as built.
fn supply_model_warnings(
    design: &Design,
    sm: &crate::solve::multiplier::SupplyModel,
    warnings: &mut Vec<Warning>,
) {
    let vs = design.supply_magnitude();
    let off = sm.output_minus_setting_volts;
    if off.abs() > 0.02 * vs {
        // The output scales with the drive (less the diodes' drops, a few volts): the drive
        // that gives the setting, to first order.
        let n = sm.stages as f64;
        let needed = sm.amplitude_volts - off / (2.0 * n);
        warnings.push(warning!(Code::MultiplierOutputOffSetting,
            "The multiplier gives {} at the base under this load, {} {} the supply setting of {}: a drive of about {} peak would give the setting (a regulated supply adjusts its drive so; the figures here are made at the setting).",
            format_eng(sm.steady.output_volts, "V"),
            format_eng(off.abs(), "V"),
            if off > 0.0 { "above" } else { "below" },
            format_eng(vs, "V"),
            format_eng(needed.max(0.0), "V")
        ));
    }
    if !sm.meets {
        warnings.push(warning!(Code::MultiplierRippleAboveStability,
            "The supply's ripple ({} p-p at the base) modulates the gain by {:.3} % p-p, more than the {:.2} % gain stability{}: raise the multiplier's capacitance or frequency, or add or enlarge the RC filter.",
            format_eng(sm.steady.ripple_volts, "V"),
            sm.gain_ripple * 100.0,
            sm.gain_stability * 100.0,
            if sm.gain_stability_given { " wanted" } else { " taken as an example" }
        ));
    }
    if design.supply_quality.and_then(|q| q.ripple_volts).is_some() {
        warnings.push(warning!(
            Code::SupplyRippleStatedTwice,
            "The design states a supply ripple (supply.quality.ripple) and describes the multiplier: the supply-quality section uses the stated ripple, the supply-model section the computed one."
        ));
    }
}

/// Rated voltage of a resistor: `min(sqrt(P R), U_max)` (IEC 60115-1, from memory).
pub fn rated_voltage(power: f64, resistance: f64, working: f64) -> f64 {
    (power * resistance).sqrt().min(working)
}

/// Run the whole analysis.
pub fn analyse(design: &Design) -> Result<Analysis, AnalysisError> {
    analyse_with(
        design,
        Some(crate::budget::pulsetrain::TrainOptions::default()),
    )
}

/// Run the analysis; `train` = None skips the pulse-train solve (e.g. for a netlist).
pub fn analyse_with(
    design: &Design,
    train: Option<crate::budget::pulsetrain::TrainOptions>,
) -> Result<Analysis, AnalysisError> {
    let file = design.source.clone();
    let tube = TubeModel::from_spec(&design.tube).map_err(|source| AnalysisError::Tube {
        file: file.clone(),
        source,
    })?;
    let network = Network::from_design(design, tube);
    let mut ws = Workspace::default();
    let solve_err = |source| AnalysisError::Solve {
        file: file.clone(),
        source,
    };
    let (quiescent_amps, quiescent_volts) = network.quiescent();
    let small_signal_gain = network.small_signal_gain();
    let sensitivity = network.gain_sensitivity();
    let stream = pulse_stream(design, small_signal_gain)?;
    let op = operating_point(design, &network, stream, &mut ws)?;
    let mut linearity = linearity::trace(&network, &mut ws).map_err(solve_err)?;
    if linearity.peak_over.is_some() {
        linearity.peak_over_stiff_knee = linearity::peak_with_stiff_knee(design, &network, &mut ws);
    }
    let safety = safety::assess(design, &op);

    let vs = design.supply_magnitude();
    let max_ia = design.tube.max_anode_current.get::<ampere>();
    let tube_gaps = op.tube_gap_volts();
    let gaps = gap_rows(design, &network, &op, &quiescent_volts);
    let mut warnings = dc_warnings(
        design,
        stream,
        &gaps,
        &op,
        (quiescent_amps, small_signal_gain),
        &safety,
    );
    let mut assumptions = assumptions(design, &network.tube, stream, &op);
    let gain_curve = gain_curve(&network, vs, design.tube.max_supply.get::<volt>());
    let t = &network.tube;
    let signal = crate::budget::signal::budget(
        design,
        &crate::budget::signal::Chain {
            gain: op.gain(),
            collection: t.collection,
            excess_noise: t.excess_noise_factor(&tube_gaps),
            divider_amps: quiescent_amps,
            max_anode_amps: max_ia,
            first_stage_gain: t.deltas(&tube_gaps).next().unwrap_or(1.0),
        },
    );
    if let Some(s) = &signal {
        warnings.extend(s.warnings.iter().cloned());
        assumptions.extend(s.assumptions.iter().cloned());
    }

    let train = match train {
        None => None,
        Some(opts) => match crate::budget::pulsetrain::analyse(design, &network.tube, &opts) {
            Ok(t) => t,
            Err(e) => {
                warnings.push(warning!(
                    Code::TrainSolveFailed,
                    "The pulse-train solve failed, so the train section is missing: {e}"
                ));
                None
            }
        },
    };
    if let Some(t) = &train {
        warnings.extend(t.warnings.iter().cloned());
    }
    let supply_model = design.multiplier.as_ref().and_then(|m| {
        let stability = design.supply_quality.and_then(|q| q.gain_stability);
        match crate::solve::multiplier::assess(m, vs, op.supply_amps(), sensitivity, stability) {
            Ok(sm) => Some(sm),
            Err(e) => {
                warnings.push(warning!(Code::MultiplierSolveFailed,
                    "The supply's multiplier could not be solved, so the supply-model section is missing: {e}."
                ));
                None
            }
        }
    });
    if let Some(sm) = &supply_model {
        supply_model_warnings(design, sm, &mut warnings);
    }
    let active_stages = crate::budget::active::assess(design, &network, &op);
    if let Some(act) = &active_stages {
        warnings.extend(crate::budget::active::warnings(act));
    }
    Ok(Analysis {
        active_stages,
        supply_model,
        gain_curve,
        train,
        design: design.clone(),
        network,
        quiescent_amps,
        small_signal_gain,
        sensitivity,
        op,
        gaps,
        linearity,
        safety,
        warnings,
        assumptions,
        signal,
    })
}

/// The operating point: at the pulses' average cathode current when the design leaves the
/// operating current out (one average current: the light sets the cathode's average, pulses ×
/// rate, and the anode current and gain there follow self-consistently), else at the stated
/// anode current (warned about in [`dc_warnings`] when it disagrees with the pulses).
fn operating_point(
    design: &Design,
    network: &Network,
    stream: Option<PulseStream>,
    ws: &mut Workspace,
) -> Result<OperatingPoint, AnalysisError> {
    let file = design.source.clone();
    let solved = match stream {
        Some(st) if design.operating_assumed && st.rate * st.cathode_charge > 0.0 => {
            network.solve_raw(st.rate * st.cathode_charge, None, ws)
        }
        _ => network.solve_anode(design.anode_current, ws),
    };
    solved.map_err(|source| match source {
        SolveError::Unreachable { .. } => AnalysisError::Operating {
            file: file.clone(),
            field: if design.operating_assumed {
                "operating.anode_current (not given: 10 % of tube.limits.max_anode_current)"
                    .to_string()
            } else {
                "operating.anode_current".to_string()
            },
            source,
        },
        other => AnalysisError::Solve {
            file,
            source: other,
        },
    })
}

/// One row per divider element at the operating point, with its ratings and the yield of the
/// dynode it feeds.
fn gap_rows(
    design: &Design,
    network: &Network,
    op: &OperatingPoint,
    quiescent_volts: &[f64],
) -> Vec<GapRow> {
    let vs = design.supply_magnitude();
    let n = design.tube.stages;
    let p_rating = design.resistor_power.get::<watt>();
    let wv = design.resistor_working_voltage.get::<volt>();
    let max_gap = design.tube.max_gap.map(|v| v.get::<volt>());
    let tube_gaps = op.tube_gap_volts();
    (0..=n)
        .map(|j| {
            let volts = op.element_volts[j];
            let amps = op.element_amps[j];
            let watts = volts * amps;
            let (element, power_rating, rated_volts) = match design.elements[j] {
                Element::Resistor(r) => {
                    let r = r.get::<ohm>();
                    // A gap of m equal parts in series: m times one part's ratings.
                    let m = design.series_parts.get(j).copied().unwrap_or(1).max(1) as f64;
                    let label = if m > 1.0 {
                        format!(
                            "R {} ({}×{})",
                            format_eng(r, "Ω"),
                            m,
                            format_eng(r / m, "Ω")
                        )
                    } else {
                        format!("R {}", format_eng(r, "Ω"))
                    };
                    (
                        label,
                        Some(p_rating * m),
                        Some(m * rated_voltage(p_rating, r / m, wv)),
                    )
                }
                Element::Zener(v, rz) => (
                    format!(
                        "Z {} ({} dyn.)",
                        format_eng(v.get::<volt>(), "V"),
                        format_eng(rz.get::<ohm>(), "Ω")
                    ),
                    None,
                    None,
                ),
            };
            GapRow {
                number: j + 1,
                label: design.gap_label(j),
                element,
                volts,
                share: volts / vs,
                amps,
                watts,
                power_rating,
                rated_volts,
                quiescent_volts: quiescent_volts[j],
                delta: (j < n).then(|| network.tube.delta(tube_gaps[j], tube_gaps[j + 1]).0),
                over_power: power_rating.is_some_and(|p| watts > p),
                over_voltage: rated_volts.is_some_and(|u| volts > u),
                over_gap_limit: max_gap.is_some_and(|m| volts > m),
            }
        })
        .collect()
}

/// The DC figures' warnings: the stated operating current against the pulses, each gap against
/// its ratings and the tube's limit, the anode and supply currents, the divider current, the
/// gain's deviation, the capacitors' ratings and the bleed-down.
fn dc_warnings(
    design: &Design,
    stream: Option<PulseStream>,
    gaps: &[GapRow],
    op: &OperatingPoint,
    (quiescent_amps, small_signal_gain): (f64, f64),
    safety: &Safety,
) -> Vec<Warning> {
    let p_rating = design.resistor_power.get::<watt>();
    let max_gap = design.tube.max_gap.map(|v| v.get::<volt>());
    let mut warnings = Vec::new();
    if let Some(st) = stream.filter(|_| !design.operating_assumed) {
        let stated = design.anode_current.get::<ampere>();
        if (stated / st.average_anode_amps - 1.0).abs() > 0.10 {
            warnings.push(warning!(Code::OperatingCurrentDiffersFromPulses,
                "operating.anode_current is {}, but the pulses of {} average {} at the anode: the DC figures are made at the stated current; leave operating out to make them at the pulses' average.",
                format_eng(stated, "A"),
                st.from,
                format_eng(st.average_anode_amps, "A")
            ));
        }
    }
    for g in gaps {
        if g.over_gap_limit {
            warnings.push(warning!(
                Code::GapAboveTubeLimit,
                "Gap {} ({}) holds {} at the operating point, above the tube's gap limit of {}.",
                g.number,
                g.label,
                format_eng(g.volts, "V"),
                format_eng(max_gap.unwrap_or(0.0), "V")
            ));
        }
        if g.over_power {
            warnings.push(warning!(Code::ResistorOverPower,
                "Gap {} ({}) dissipates {}, above the resistor's {} rating: use a larger part or split it.",
                g.number,
                g.label,
                format_eng(g.watts, "W"),
                format_eng(p_rating, "W")
            ));
        } else if g.power_rating.is_some_and(|p| g.watts > 0.5 * p) {
            warnings.push(warning!(Code::ResistorAboveHalfPower,
                "Gap {} ({}) dissipates {}, above half the resistor's {} rating (50 % derating is common practice).",
                g.number,
                g.label,
                format_eng(g.watts, "W"),
                format_eng(p_rating, "W")
            ));
        }
        if g.over_voltage {
            warnings.push(warning!(Code::ResistorOverVoltage,
                "Gap {} ({}) puts {} across its resistor, above its rated voltage of {} (min of √(P·R) and the working voltage, IEC 60115-1, from memory): split it into parts in series.",
                g.number,
                g.label,
                format_eng(g.volts, "V"),
                format_eng(g.rated_volts.unwrap_or(0.0), "V")
            ));
        }
    }
    let ia = op.anode_amps();
    let max_ia = design.tube.max_anode_current.get::<ampere>();
    if ia > max_ia {
        warnings.push(warning!(
            Code::AnodeCurrentAboveRating,
            "The average anode current {} is above the tube's rating of {}.",
            format_eng(ia, "A"),
            format_eng(max_ia, "A")
        ));
    }
    // Followers carry the last stages' current: their limits count with the divider's.
    if design.followers.is_none() && quiescent_amps < 10.0 * ia {
        warnings.push(warning!(Code::DividerCurrentLow,
            "The divider current {} is less than ten times the anode current {} (common practice asks 10× to 100×); see the linearity figures.",
            format_eng(quiescent_amps, "A"),
            format_eng(ia, "A")
        ));
    }
    let dev = op.gain() / small_signal_gain - 1.0;
    if dev.abs() > 0.01 {
        warnings.push(warning!(Code::GainOffSmallSignal,
            "At the operating point the gain is {:+.1} % off its small-signal value: the divider is not linear here.",
            dev * 100.0
        ));
    }
    if let Some(limit) = design.current_limit {
        let limit = limit.get::<ampere>();
        if op.supply_amps() > limit {
            warnings.push(warning!(Code::SupplyCurrentAboveLimit,
                "The base draws {} from the supply, above its current limit of {}: the supply will fold back. Do not raise or defeat the limit; raise the divider resistance instead.",
                format_eng(op.supply_amps(), "A"),
                format_eng(limit, "A")
            ));
        }
    }
    for c in &safety.capacitors {
        if let Some(r) = c.rating_volts {
            if r < c.volts {
                warnings.push(warning!(
                    Code::CapacitorOverVoltage,
                    "The {} is rated {} but holds {}.",
                    c.label,
                    format_eng(r, "V"),
                    format_eng(c.volts, "V")
                ));
            } else if r < 1.5 * c.volts && c.label.contains("across") {
                warnings.push(warning!(Code::CapacitorRatingMarginLow,
                    "The {} is rated {} for {}: common practice asks at least 1.5× the gap voltage.",
                    c.label,
                    format_eng(r, "V"),
                    format_eng(c.volts, "V")
                ));
            }
        }
    }
    for d in &design.decoupling {
        if d.rating.is_none() {
            let place = match d.style {
                CapStyle::Across(g) => format!("across gap {g}"),
                CapStyle::ToReturn(k) => format!("from D{k} to the return"),
            };
            warnings.push(warning!(Code::CapacitorRatingMissing,
                "The decoupling capacitor {place} has no voltage rating in the design; give one so it can be checked."
            ));
        }
    }
    match safety.bleed_seconds {
        Some(t) if t > safety::SAFE_SECONDS => warnings.push(warning!(Code::BleedDownSlow,
            "Bleed-down to {:.0} V takes {} ({}), over the {:.0} s of IEC 60204-1 §6.2.4 (from memory).",
            safety::SAFE_VOLTS,
            format_eng(t, "s"),
            safety.bleed_case,
            safety::SAFE_SECONDS
        )),
        None if safety.never_bleeds.is_empty() => warnings.push(warning!(Code::BleedDownOverAnHour,
            "Some capacitor stays above {:.0} V for over an hour after switch-off ({}).",
            safety::SAFE_VOLTS,
            safety.bleed_case
        )),
        _ => {}
    }
    warnings
}

/// What the analysis took as given where the design is silent, each with where to give it.
fn assumptions(
    design: &Design,
    t: &TubeModel,
    stream: Option<PulseStream>,
    op: &OperatingPoint,
) -> Vec<String> {
    let mut assumptions = Vec::new();
    if design.tube.collection_assumed {
        assumptions.push(format!(
            "cathode–D1 collection {:.0} % (typical, from memory; give tube.collection)",
            t.collection * 100.0
        ));
    }
    if t.exponent_assumed {
        assumptions.push(format!(
            "secondary-emission exponent k = {} (typical, Knoll ch. 9, from memory; give tube.gain.exponent)",
            t.k
        ));
    }
    if design.tube.share_assumed {
        assumptions.push(format!(
            "{:.0} % of the secondary-emission exponent on the gap that collects each dynode's secondaries, the rest on the gap that accelerates its primaries (chosen so that a linear chain meets a published bound, under 3 % deviation at 0.1 of the divider current; give tube.collecting_share)",
            t.share * 100.0
        ));
    }
    if design.tube.knee_assumed {
        assumptions.push(format!(
            "gaps stop collecting below a knee of {} (1 − exp(−V/knee), this tool's modelling choice; give tube.collection_knee)",
            format_eng(t.knee, "V")
        ));
    }
    if t.perveance_assumed {
        let (i, d, v) = crate::model::tube::ASSUMED_PULSE_LINEARITY;
        assumptions.push(format!(
            "pulse linearity {} at {:.0} % with {:.0} V on the last gap (from memory; give tube.pulse_linearity)",
            format_eng(i, "A"),
            d * 100.0,
            v
        ));
    }
    match stream {
        Some(st) if design.operating_assumed => assumptions.push(format!(
            "operating point at the pulses' average: {} of cathode current ({:.0} photoelectrons a pulse at {} on average, from {}); the anode current there is {} (give operating.anode_current to choose another)",
            format_eng(st.rate * st.cathode_charge, "A"),
            st.cathode_charge / crate::model::constants::ELEMENTARY_CHARGE,
            format_eng(st.rate, "Hz"),
            st.from,
            format_eng(op.anode_amps(), "A")
        )),
        _ => {}
    }
    if design.resistors_assumed {
        assumptions.push(
            "resistors rated 0.25 W, 250 V working, 1 % (small film parts, common practice; give resistors)".to_string(),
        );
    }
    assumptions
}

/// The small-signal gain against the supply voltage, from 0.6 of the set supply to the tube's
/// maximum (41 points).
fn gain_curve(network: &Network, vs: f64, v_max: f64) -> Vec<(f64, f64)> {
    let v_lo = 0.6 * vs;
    (0..=40)
        .map(|i| {
            let v = v_lo + (v_max - v_lo) * f64::from(i) / 40.0;
            let mut net = network.clone();
            net.supply = v;
            (v, net.small_signal_gain())
        })
        .filter(|(_, g)| g.is_finite() && *g > 0.0)
        .collect()
}
