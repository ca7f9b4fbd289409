//! Sizing, preferred values, tolerance statistics, sweeps and supply quality, each checked
//! against an outside source named beside it.

use std::process::Command;

use dynode::budget::stability;
use dynode::design;
use dynode::model::eseries::{E6, E12, E24, E48, E96, Series};
use dynode::solve::network::Workspace;
use dynode::study::sizing;
use dynode::study::spread::{self, SpreadConfig};
use dynode::study::sweep;
use proptest::prelude::*;

use crate::common::{crate_path, rel, temp_dir};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_dynode"))
}

// ---------------------------------------------------------------------------------------------
// IEC 60063 preferred values
// ---------------------------------------------------------------------------------------------

/// IEC 60063:2015 E12, as listed in the project's reference checks (seen in secondary copies).
#[test]
fn e12_is_the_published_list() {
    let published = [10, 12, 15, 18, 22, 27, 33, 39, 47, 56, 68, 82];
    let ours: Vec<i64> = E12.iter().map(|v| (v * 10.0).round() as i64).collect();
    assert_eq!(ours, published);
}

/// IEC 60063:2015 E24 (seen in secondary copies), including the values that are NOT the
/// rounded geometric series round(10·10^(i/24)): the formula gives 2.6 2.9 3.2 3.5 3.8 4.2 4.6
/// 8.3 where the standard has 2.7 3.0 3.3 3.6 3.9 4.3 4.7 8.2.
#[test]
fn e24_is_the_published_list_not_the_formula() {
    let published = [
        10, 11, 12, 13, 15, 16, 18, 20, 22, 24, 27, 30, 33, 36, 39, 43, 47, 51, 56, 62, 68, 75, 82,
        91,
    ];
    let ours: Vec<i64> = E24.iter().map(|v| (v * 10.0).round() as i64).collect();
    assert_eq!(ours, published);
    let formula: Vec<i64> = (0..24)
        .map(|i| (10.0 * 10f64.powf(i as f64 / 24.0)).round() as i64)
        .collect();
    let mut traps = Vec::new();
    for i in 0..24 {
        if formula[i] != published[i] {
            traps.push((formula[i], published[i]));
        }
    }
    assert_eq!(
        traps,
        vec![
            (26, 27),
            (29, 30),
            (32, 33),
            (35, 36),
            (38, 39),
            (42, 43),
            (46, 47),
            (83, 82)
        ]
    );
    // And snapping lands on the published values.
    assert_eq!(
        Series::E24.nearest(2.68e3).map(|v| Series::E24.clean(v)),
        Some(2.7e3)
    );
    assert_eq!(
        Series::E24.nearest(8.2e5).map(|v| Series::E24.clean(v)),
        Some(8.2e5)
    );
}

/// IEC 60063 E96: round(100·10^(i/96)), 100 … 909 931 953 976 (reference checks: verified against
/// the published list).
#[test]
fn e96_is_the_published_list() {
    let ours: Vec<i64> = E96.iter().map(|v| (v * 100.0).round() as i64).collect();
    let formula: Vec<i64> = (0..96)
        .map(|i| (100.0 * 10f64.powf(i as f64 / 96.0)).round() as i64)
        .collect();
    assert_eq!(ours, formula);
    assert_eq!(&ours[92..], &[909, 931, 953, 976]);
}

/// IEC 60063 builds each series on the next finer one: E48 is every second E96 value, E6 every
/// second E12 value.
#[test]
fn coarser_series_are_subsets() {
    for (i, v) in E48.iter().enumerate() {
        assert_eq!(*v, E96[2 * i]);
    }
    for (i, v) in E6.iter().enumerate() {
        assert_eq!(*v, E12[2 * i]);
    }
}

/// Snapping across decades (the series repeats every decade, IEC 60063).
#[test]
fn snapping_up_down_nearest_across_decades() {
    let s = Series::E12;
    let c = |x: Option<f64>| x.map(|v| s.clean(v));
    assert_eq!(c(s.up(8.3e5)), Some(1.0e6));
    assert_eq!(c(s.down(1.1e6)), Some(1.0e6));
    assert_eq!(c(s.down(9.9e-9)), Some(8.2e-9));
    assert_eq!(c(s.nearest(5.0e3)), Some(4.7e3));
    assert_eq!(c(s.up(4.7e3)), Some(4.7e3));
    assert_eq!(s.nearest(0.0), None);
}

// ---------------------------------------------------------------------------------------------
// Sizing
// ---------------------------------------------------------------------------------------------

/// Check a sized design against every requirement, with the core solve, independently of the
/// sizer's own check list.
fn assert_meets(req: &sizing::Requirements, s: &sizing::Sized) -> Result<(), String> {
    let a = &s.analysis;
    let g0 = a.network.small_signal_gain();
    if rel(g0, req.target_gain) > 1e-3 {
        return Err(format!("gain {g0:e} vs target {:e}", req.target_gain));
    }
    let mut ws = Workspace::default();
    for f in [1.0 / 128.0, 1.0 / 32.0, 0.1, 0.3, 0.6, 1.0] {
        let op = a
            .network
            .solve_anode_raw(req.max_average * f, &mut ws)
            .map_err(|e| e.to_string())?;
        let dev = op.gain() / g0 - 1.0;
        if dev.abs() > req.deviation {
            return Err(format!("deviation {dev} at {} A", req.max_average * f));
        }
    }
    let vs = a.design.supply_magnitude();
    if vs > req.supply_max_volts || vs > a.design.tube.max_supply.value {
        return Err(format!("supply {vs} V over the limit"));
    }
    if a.op.supply_amps() > req.supply_max_current {
        return Err(format!("supply current {} A", a.op.supply_amps()));
    }
    // The design file writes quantities to six significant digits.
    if (a.op.anode_amps() / req.max_average - 1.0).abs() > 1e-5 {
        return Err("report not at the max average anode current".into());
    }
    if let Some(p) = req.max_dissipation
        && a.dissipation() > p
    {
        return Err(format!("dissipation {} W", a.dissipation()));
    }
    for g in &a.gaps {
        let pr = g.power_rating.ok_or("a gap is not a resistor")?;
        if g.watts > pr * req.derating {
            return Err(format!(
                "gap {} dissipates {} W of {} W",
                g.number, g.watts, pr
            ));
        }
        if g.over_voltage || g.over_gap_limit || g.over_power {
            return Err(format!("gap {} over a rating", g.number));
        }
    }
    if let (Some((_, droop)), Some(_)) = (req.capacitors, &a.design.train) {
        // Sized with the pulse-train solve: the time-domain droop of each decoupled gap
        // (whole base, strays included) stays within the allowed droop.
        let opts = dynode::budget::pulsetrain::TrainOptions {
            train_only: true,
            ..Default::default()
        };
        let t = dynode::budget::pulsetrain::analyse(&a.design, &a.network.tube, &opts)
            .map_err(|e| e.to_string())?
            .ok_or("no train analysis")?;
        for d in &t.droop {
            let f = d.droop_volts / d.gap_volts.abs();
            if f > droop {
                return Err(format!("{} droops {:.3} %", d.label, f * 100.0));
            }
        }
    } else if let (Some((_, droop)), Some((q, _))) = (req.capacitors, &s.pulse_charge) {
        // ΔV = Q/C (definition of capacitance) with the last gap giving Q, the one before Q/δn …
        let n = a.design.tube.stages;
        let mut qi = *q;
        for j in (0..=n).rev() {
            let v = a.gaps[j].quiescent_volts;
            let c = a
                .design
                .decoupling
                .iter()
                .find(|d| d.style == design::CapStyle::Across(j + 1))
                .map(|d| d.value.value)
                .unwrap_or(0.0)
                + a.design.stray.value;
            if qi / c > droop * v * 1.000001 {
                return Err(format!("gap {} droops {} V", j + 1, qi / c));
            }
            if j >= 1 {
                qi /= a
                    .network
                    .tube
                    .delta(a.gaps[j - 1].quiescent_volts, v)
                    .0
                    .max(1.0);
            }
        }
    }
    if s.checks.iter().any(|c| !c.ok) {
        return Err("the sizer's own checks report a failure".into());
    }
    Ok(())
}

/// The demo requirements size into a design that `dynode report` accepts and that meets them;
/// a second run refuses to overwrite without --force (nothing written).
#[test]
fn demo_requirements_size_into_a_design_report_accepts() {
    let dir = temp_dir("size-demo");
    let req_path = crate_path("designs/requirements/paddle-rebuild.ron");
    let out = dir.join("sized.ron");
    let st = bin()
        .args([
            "size",
            req_path.to_str().unwrap(),
            "-o",
            out.to_str().unwrap(),
            "-q",
        ])
        .status()
        .unwrap();
    assert!(st.success());
    let st = bin()
        .args(["report", out.to_str().unwrap(), "--strict"])
        .output()
        .unwrap();
    assert!(
        st.status.success(),
        "{}",
        String::from_utf8_lossy(&st.stderr)
    );
    let before = std::fs::read(&out).unwrap();
    let st = bin()
        .args([
            "size",
            req_path.to_str().unwrap(),
            "-o",
            out.to_str().unwrap(),
            "-q",
        ])
        .output()
        .unwrap();
    assert_eq!(st.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&st.stderr).contains("--force"));
    assert_eq!(std::fs::read(&out).unwrap(), before);
    // And in the library: every requirement holds on the core solve.
    let text = std::fs::read_to_string(&req_path).unwrap();
    let req = sizing::parse_requirements(&text, "demo").unwrap();
    let s = sizing::size(&req).unwrap();
    assert_meets(&req, &s).unwrap();
}

/// A requirements file with a misspelled field names it (exit 2, nothing written).
#[test]
fn bad_requirements_are_located() {
    let dir = temp_dir("size-bad");
    let p = dir.join("req.ron");
    let text = std::fs::read_to_string(crate_path("designs/requirements/paddle-rebuild.ron"))
        .unwrap()
        .replace("deviation: \"1 %\"", "deviation: \"1 uF\"");
    std::fs::write(&p, text).unwrap();
    let out = dir.join("o.ron");
    let o = bin()
        .args(["size", p.to_str().unwrap(), "-o", out.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("deviation"));
    assert!(!out.exists());
}

/// The blocks a requirements file shares with a design (tube, load, the resistor family, the
/// supply's extras, the stray) are checked by the design's own per-block checks, and each error
/// names the file and the field as the requirements file writes it (schema: docs/design-file.md,
/// "Requirements file"; the stray there is `capacitors.stray`, not a design's `divider.stray`).
#[test]
fn shared_blocks_are_checked_and_named_as_the_requirements_file_writes_them() {
    let demo =
        std::fs::read_to_string(crate_path("designs/requirements/paddle-rebuild.ron")).unwrap();
    let cases = [
        (
            "stray: Some(\"3 pF\")",
            "stray: Some(\"3 uF\")",
            "capacitors.stray",
        ),
        (
            "resistance: \"50 ohm\"",
            "resistance: \"open\"",
            "load.resistance",
        ),
        (
            "tolerance: \"1 %\"",
            "tolerance: \"80 %\"",
            "resistors.tolerance",
        ),
        (
            "drift: Some(\"0.02 %\")",
            "drift: Some(\"70 %\")",
            "supply.quality.drift",
        ),
        (
            "output_capacitance: Some(\"10 nF\")",
            "output_capacitance: Some(\"10 F\")",
            "supply.output_capacitance",
        ),
        (
            "collection: Some(\"90 %\")",
            "collection: Some(\"190 %\")",
            "tube.collection",
        ),
        (
            "stages: 10,",
            "stages: 10, cathode: Some(Builtin(name: \"none\")),",
            "tube.cathode.name",
        ),
    ];
    for (from, to, field) in cases {
        assert!(demo.contains(from), "{from}");
        let e = sizing::parse_requirements(&demo.replacen(from, to, 1), "req.ron")
            .err()
            .unwrap_or_else(|| panic!("{to} was accepted"))
            .to_string();
        assert!(e.starts_with(&format!("req.ron: {field}: ")), "{to}: {e}");
    }
}

#[allow(clippy::too_many_arguments)]
fn requirements_text(
    stages: usize,
    target_decades: f64,
    max_avg_ua: f64,
    dev_pct: f64,
    ratio: &str,
    series: &str,
    power: f64,
    wv: f64,
    peak: bool,
) -> String {
    // A tube of our own: the reference gain puts δ ≈ 4 on each stage at 1000 V (invented).
    let ref_gain = 4f64.powi(stages as i32);
    let target = ref_gain * 10f64.powf(target_decades);
    let anode = if peak {
        format!(
            "(max_average: \"{max_avg_ua} uA\", max_peak: Some(\"5 mA\"), rate: Some(\"2 kHz\"), pulse_width: Some(\"10 ns\"))"
        )
    } else {
        format!("(max_average: \"{max_avg_ua} uA\", rate: Some(\"5 kHz\"))")
    };
    format!(
        r#"(
    name: "random",
    tube: (
        stages: {stages},
        gain: Reference(volts: "1000 V", gain: {ref_gain:e}, exponent: Some(0.75)),
        limits: (max_supply: "2000 V", max_gap: Some("400 V"), max_anode_current: "100 uA"),
        pulse_linearity: Some((peak_current: "50 mA", deviation: Some("2 %"), last_gap: "100 V")),
    ),
    supply: (polarity: CathodeNegative, max_volts: "2000 V", max_current: "3 mA"),
    load: (resistance: "50 ohm"),
    target: Gain({target:e}),
    anode: {anode},
    deviation: "{dev_pct} %",
    ratio: {ratio},
    resistors: (series: {series}, tolerance: "1 %", power: "{power} W", working_voltage: "{wv} V"),
    capacitors: Some((series: E6, droop: "1 %")),
)"#
    )
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 12, .. ProptestConfig::default() })]

    /// Sizing round trip: the sized design, read back and analysed by the core solve, meets every
    /// requirement it was sized for (property over random requirements in a feasible range).
    #[test]
    fn sized_designs_meet_their_requirements(
        stages in 8usize..=12,
        target_decades in -0.7f64..0.7,
        max_avg_ua in 0.5f64..5.0,
        dev_pct in 1.0f64..5.0,
        ratio in prop::sample::select(vec!["Equal", "Tapered", "FrontHeavy"]),
        series in prop::sample::select(vec!["E12", "E24", "E96"]),
        power in prop::sample::select(vec![0.25f64, 0.5]),
        wv in prop::sample::select(vec![200.0f64, 350.0]),
        peak in any::<bool>(),
    ) {
        let text = requirements_text(stages, target_decades, max_avg_ua, dev_pct, ratio, series, power, wv, peak);
        let req = sizing::parse_requirements(&text, "random").map_err(|e| TestCaseError::fail(e.to_string()))?;
        let s = sizing::size(&req).map_err(|e| TestCaseError::fail(format!("{e}\n{text}")))?;
        assert_meets(&req, &s).map_err(|e| TestCaseError::fail(format!("{e}\n{}", s.text)))?;
    }
}

// ---------------------------------------------------------------------------------------------
// Tolerance statistics
// ---------------------------------------------------------------------------------------------

/// A 10-stage design with an equal divider (all gaps 470 kΩ), invented numbers.
fn equal_design() -> design::Design {
    let text = std::fs::read_to_string(crate_path("designs/rooftop-paddle.ron"))
        .unwrap()
        .replace("R(\"1M\"), R(\"470k\")", "R(\"470k\"), R(\"470k\")");
    let d = design::parse_str(&text, "equal").unwrap();
    assert!(d.elements.windows(2).all(|w| w[0] == w[1]));
    d
}

/// Monte Carlo with only resistor tolerances and an equal ratio: the gain's relative spread
/// matches first-order propagation σ²_lnG = Σ (∂lnG/∂lnR_i)² σ_i² (standard error propagation)
/// within 5 %. With 20 000 samples the standard error of a standard deviation is 1/√(2N) = 0.5 %.
#[test]
fn monte_carlo_spread_matches_first_order_propagation() {
    let d = equal_design();
    let cfg = SpreadConfig::resistors_only(20_000, 7);
    let s = spread::run(&d, &cfg, &|_| {}).unwrap();
    // First order, by central differences on the core's small-signal gain.
    let a = dynode::analysis::analyse(&d).unwrap();
    let sigma = d.resistor_tolerance / cfg.sigmas;
    let mut var = 0.0;
    for i in 0..a.network.parts.len() {
        let mut up = a.network.clone();
        let mut dn = a.network.clone();
        let h = 1e-4;
        if let dynode::solve::network::Part::Resistor(g) = a.network.parts[i] {
            up.parts[i] = dynode::solve::network::Part::Resistor(g / (1.0 + h));
            dn.parts[i] = dynode::solve::network::Part::Resistor(g / (1.0 - h));
        }
        let deriv = (up.small_signal_gain().ln() - dn.small_signal_gain().ln())
            / ((1.0 + h).ln() - (1.0 - h).ln());
        var += (deriv * sigma).powi(2);
    }
    let first_order = var.sqrt();
    assert!(
        rel(s.gain_rel_sd, first_order) < 0.05,
        "Monte Carlo {} vs first order {}",
        s.gain_rel_sd,
        first_order
    );
    assert!(rel(s.gain_rel_sd_first_order, first_order) < 1e-3);
    assert_eq!(s.failed, 0);
}

/// Same seed, same result whatever the thread count (one stream per sample index); another seed
/// gives another result.
#[test]
fn spread_is_deterministic_for_a_seed() {
    let d = crate::common::demo_designs()
        .into_iter()
        .next()
        .map(|p| design::load(&p).unwrap())
        .unwrap();
    let cfg = SpreadConfig {
        samples: 3000,
        linearity_samples: 4,
        ..SpreadConfig::default()
    };
    let one = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap()
        .install(|| spread::run(&d, &cfg, &|_| {}).unwrap());
    let two = rayon::ThreadPoolBuilder::new()
        .num_threads(2)
        .build()
        .unwrap()
        .install(|| spread::run(&d, &cfg, &|_| {}).unwrap());
    assert_eq!(one.gain, two.gain);
    assert_eq!(one.gaps, two.gaps);
    assert_eq!(one.yields, two.yields);
    let other = spread::run(
        &d,
        &SpreadConfig {
            seed: 8,
            ..cfg.clone()
        },
        &|_| {},
    )
    .unwrap();
    assert_ne!(one.gain, other.gain);
}

/// With the tube's gain spread switched on alone, the spread of ln G is that spread (log-normal
/// by construction) and it is ranked first.
#[test]
fn tube_gain_spread_dominates_when_it_is_the_only_one() {
    let d = equal_design();
    let cfg = SpreadConfig {
        tube_gain_sigma: 0.3,
        ..SpreadConfig::resistors_only(8000, 3)
    };
    let s = spread::run(&d, &cfg, &|_| {}).unwrap();
    assert!(s.influences[0].parameter.contains("tube gain"));
    // Percentiles of a log-normal: p99/p50 = exp(2.326 σ) (standard normal quantile 2.326).
    let ratio = s.small_signal_gain.p99 / s.small_signal_gain.p50;
    assert!(rel(ratio.ln(), 2.326 * 0.3) < 0.05, "{ratio}");
}

// ---------------------------------------------------------------------------------------------
// Supply quality
// ---------------------------------------------------------------------------------------------

/// Ahmed §6.5: G ∝ V^(α n), so a 0.1 % supply change gives α·n × 0.1 % gain change; for this
/// 10-stage tube with k = 0.75 that is 0.75 %.
#[test]
fn a_tenth_of_a_percent_on_the_supply_moves_the_gain_k_n_tenths() {
    let mut d = equal_design();
    let a = dynode::analysis::analyse(&d).unwrap();
    let kn = a.network.tube.k * d.tube.stages as f64;
    assert!(rel(a.sensitivity, kn) < 1e-6, "{} vs {kn}", a.sensitivity);
    // Through the core solve at a small anode current: G(1.001 V)/G(V).
    let mut ws = Workspace::default();
    let ik = 1e-13;
    let g1 = a.network.solve_raw(ik, None, &mut ws).unwrap().gain();
    let mut up = a.network.clone();
    up.supply *= 1.001;
    let g2 = up.solve_raw(ik, None, &mut ws).unwrap().gain();
    assert!(rel(g2 / g1 - 1.0, kn * 1e-3) < 0.01, "{}", g2 / g1 - 1.0);
    // And the supply-quality figures.
    d.supply_quality = Some(design::SupplyQuality {
        drift: Some(0.001),
        gain_stability: Some(0.0075),
        ..Default::default()
    });
    let s = stability::assess(&d, a.sensitivity);
    assert!(rel(s.drift_gain.unwrap(), kn * 0.001) < 1e-6);
    assert!(rel(s.needed_supply_stability, 0.001) < 1e-6);
    assert_eq!(s.meets, Some(true));
}

// ---------------------------------------------------------------------------------------------
// Sweeps
// ---------------------------------------------------------------------------------------------

/// A supply sweep follows the power law G ∝ V^(k n) (Ahmed §6.5) point to point.
#[test]
fn supply_sweep_follows_the_power_law() {
    let d = equal_design();
    let axis = sweep::parse_axis("supply.volts=900V..1500V:13").unwrap();
    assert_eq!(axis.values.len(), 13);
    assert!(rel(axis.values[12], 1500.0) < 1e-12 && rel(axis.values[1], 950.0) < 1e-12);
    let s = sweep::run(&d, &[axis]);
    let kn = 0.75 * 10.0;
    for w in s.rows.windows(2) {
        let r = w[1].small_signal_gain.unwrap() / w[0].small_signal_gain.unwrap();
        let expect = (w[1].supply_volts / w[0].supply_volts).powf(kn);
        // 1e-8: the tube model rounds max(V, 0) over 0.01 V (tube::SMOOTH_VOLTS), which shifts
        // each stage's voltage by about (0.01 V)²/(4 V) ≈ 2.5e-9 relative at 100 V.
        assert!(rel(r, expect) < 1e-8, "{r} vs {expect}");
    }
    // Divider current is Ohm's law: V / ΣR.
    let total = 11.0 * 470e3;
    assert!(rel(s.rows[0].divider_amps.unwrap(), 900.0 / total) < 1e-12);
}

/// One base, one figure: the sweep's ±1 % column equals the report's first ±1 % crossing of
/// the same base (within the refinement's 1e-7 of the deviation), and a point whose operating
/// gain is off by 1 % or more is not judged "ok" (the column's own limit).
#[test]
fn sweep_and_report_agree_on_linearity() {
    let d = equal_design();
    let a = dynode::analysis::analyse(&d).unwrap();
    let l = &a.linearity;
    let report = [l.plus_1pct, l.minus_1pct]
        .into_iter()
        .flatten()
        .fold(f64::INFINITY, f64::min);
    let axis = sweep::parse_axis("operating.anode_current=1uA..3uA:2").unwrap();
    let s = sweep::run(&d, &[axis]);
    let ours = s.rows[0].linearity_1pct_amps.unwrap();
    // 1e-6: both stop within 1e-9 of the 1 % deviation, whose slope against ln(I) is about
    // 1e-2 here, so about 1e-7 in current.
    assert!(rel(ours, report) < 1e-6, "sweep {ours} vs report {report}");
    let far = sweep::parse_axis(&format!(
        "operating.anode_current={}A..{}A:2",
        report * 0.5,
        report * 3.0
    ))
    .unwrap();
    let s = sweep::run(&d, &[far]);
    assert_eq!(s.rows[0].verdict, "ok", "{:?}", s.rows[0]);
    let dev = s.rows[1].deviation.unwrap();
    assert!(dev.abs() >= 0.01, "{dev}");
    assert!(
        s.rows[1].verdict.contains("at the operating point"),
        "{}",
        s.rows[1].verdict
    );
}

/// Log steps are geometric; two axes make a grid with the first axis outer.
#[test]
fn log_axes_and_grids() {
    let d = equal_design();
    let a = sweep::parse_axis("divider.gaps[10]=470k..4.7M:3:log").unwrap();
    assert!(rel(a.values[1], 470e3 * 10f64.sqrt()) < 1e-12);
    let b = sweep::parse_axis("operating.anode_current=1uA..3uA:2").unwrap();
    let s = sweep::run(&d, &[a, b]);
    assert_eq!(s.rows.len(), 6);
    assert!(rel(s.rows[1].values[0], 470e3) < 1e-12 && rel(s.rows[1].values[1], 3e-6) < 1e-12);
    assert!(sweep::parse_axis("supply.vols=1..2:3").is_err());
    assert!(sweep::parse_axis("supply.volts=1kV..2kV").is_err());
    let bad = sweep::parse_axis("divider.gaps[40]=1M..2M:2").unwrap();
    assert!(sweep::check_axes(&d, &[bad]).is_err());
}

/// The CLI runs spread and sweep on a demo; a bad --vary is a usage error (exit 2).
#[test]
fn spread_and_sweep_commands_run() {
    let demo = crate_path("designs/rooftop-paddle.ron");
    let o = bin()
        .args([
            "spread",
            demo.to_str().unwrap(),
            "--samples",
            "500",
            "--linearity-samples",
            "5",
            "--format",
            "json",
        ])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    for key in [
        "cautions",
        "closing_caution",
        "gain",
        "gaps",
        "influences",
        "yields",
        "small_signal_gain",
    ] {
        assert!(v.get(key).is_some(), "missing {key}");
    }
    let o = bin()
        .args([
            "sweep",
            demo.to_str().unwrap(),
            "--vary",
            "supply.volts=900V..1500V:13",
        ])
        .output()
        .unwrap();
    assert!(o.status.success());
    let t = String::from_utf8_lossy(&o.stdout);
    assert!(t.contains("HIGH-VOLTAGE CAUTION") && t.contains("1.50 kV"));
    let o = bin()
        .args([
            "sweep",
            demo.to_str().unwrap(),
            "--vary",
            "supply.volts=900V..1500V",
        ])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
}

/// `--plots DIR` writes the spread histograms and the sweep figures as SVG and PNG (the PNG
/// signature is the one fixed by the PNG specification, ISO/IEC 15948).
#[test]
fn spread_and_sweep_write_their_figures() {
    let demo = crate_path("designs/rooftop-paddle.ron");
    let dir = temp_dir("size-plots");
    let o = bin()
        .args([
            "spread",
            demo.to_str().unwrap(),
            "--samples",
            "2000",
            "--linearity-samples",
            "2",
            "-q",
            "-o",
        ])
        .arg(dir.join("spread.txt"))
        .arg("--plots")
        .arg(dir.join("figs"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let o = bin()
        .args([
            "sweep",
            demo.to_str().unwrap(),
            "--vary",
            "supply.volts=900V..1500V:7",
            "-q",
            "-o",
        ])
        .arg(dir.join("sweep.txt"))
        .arg("--plots")
        .arg(dir.join("figs"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    for name in [
        "spread-gain",
        "spread-deviation",
        "spread-supply",
        "sweep-gain",
        "sweep-linearity",
    ] {
        let svg = std::fs::read_to_string(dir.join("figs").join(format!("{name}.svg"))).unwrap();
        assert!(svg.contains("<svg") && svg.contains("</svg>"), "{name}.svg");
        let png = std::fs::read(dir.join("figs").join(format!("{name}.png"))).unwrap();
        assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n", "{name}.png");
    }
}

/// Capacitors sized for a continuous rate hold it: a 1 MHz stream of 150 pC pulses (issue #11's
/// case, where sizing for one pulse fitted 39 pF and 47 pF). Reference: brute force, 3000
/// Poisson pulses (seed 11, not the sizer's) through the full time-domain solve of the sized
/// base; each pulse's drop is each capacitor's lowest voltage in the pulse's window below its
/// value before the train, after ten of the slowest time constants. The 99th percentile of
/// that drop, less the steady DC shift at the average current (the divider's part, which no
/// capacitor removes; the periodic steady state is checked against a long run in
/// tests/train.rs), must be within the 1 % droop asked for, with 5 % for the sample's
/// statistics.
#[test]
fn capacitors_sized_for_a_rate_hold_poisson_bunching() {
    let text = std::fs::read_to_string(crate_path("designs/requirements/paddle-rebuild.ron"))
        .unwrap()
        .replace(
            r#"anode: (max_average: "3 uA", max_peak: Some("20 mA"), rate: Some("1 kHz"), pulse_width: Some("10 ns")),"#,
            r#"anode: (max_average: "150 uA", max_peak: Some("15 mA"), rate: Some("1 MHz"), pulse_width: Some("10 ns")),"#,
        )
        .replace(r#"max_anode_current: "100 uA""#, r#"max_anode_current: "200 uA""#)
        .replace(r#"max_current: "1 mA""#, r#"max_current: "20 mA""#)
        .replace(r#"deviation: "1 %","#, r#"deviation: "3 %","#)
        .replace(r#"Some("1 W")"#, r#"Some("20 W")"#)
        .replace(r#"power: "0.25 W", working_voltage: "250 V""#, r#"power: "2 W", working_voltage: "500 V""#);
    assert!(
        text.contains("1 MHz") && text.contains("20 W"),
        "the demo moved"
    );
    let req = sizing::parse_requirements(&text, "rate").unwrap();
    let s = sizing::size(&req).unwrap();
    assert!(s.reasoning.iter().any(|r| r.contains("Poisson arrivals")));
    let d = &s.design;
    let tube = dynode::model::tube::TubeModel::from_spec(&d.tube).unwrap();
    let base = dynode::solve::transient::Base::from_design(d, tube.clone());
    let mut spec = d.train.clone().expect("a train block");
    spec.pattern = dynode::design::train::Pattern::Poisson(1e6, 3000, 11);
    let (nv, _) = base.quiescent_state().unwrap();
    let gaps: Vec<f64> = (1..=d.tube.stages + 1).map(|j| nv[j] - nv[j - 1]).collect();
    let g0 = tube.gain_for_gaps(&gaps);
    let qk = dynode::budget::pulsetrain::cathode_charge(spec.size, &spec.shape, g0);
    let arrivals = spec.pattern.arrivals();
    let run = base
        .run(
            &arrivals,
            &spec.shape,
            qk,
            &dynode::solve::transient::RunOptions {
                recovery_band: None,
                ..Default::default()
            },
        )
        .unwrap();
    let steady = dynode::budget::pulsetrain::steady_state(d, &base, &spec, qk, g0)
        .unwrap()
        .unwrap();
    let tau = base.slowest_time_constant().unwrap();
    let ncaps = run.caps.len();
    assert_eq!(ncaps, s.capacitors.len());
    for (k, cap) in run.caps.iter().enumerate() {
        let dynode::design::CapStyle::Across(g) = d.decoupling[k].style else {
            panic!("sized bases decouple across gaps");
        };
        // The same gap voltage the shift is a fraction of (before the train).
        let gap = run.elements_initial[g - 1].abs();
        let mut drops: Vec<f64> = (0..arrivals.len())
            .filter(|i| arrivals[*i] > 10.0 * tau)
            .map(|i| (cap.initial - run.window_cap_min[i * ncaps + k]) / gap)
            .collect();
        assert!(
            drops.len() > 1000,
            "{} pulses after the settling",
            drops.len()
        );
        drops.sort_by(f64::total_cmp);
        let q99 = drops[(0.99 * drops.len() as f64).ceil() as usize - 1];
        let beyond = q99 - steady.shift_fraction[k];
        assert!(beyond <= 0.01 * 1.05, "capacitor {k}: {beyond} of its gap");
    }
}

/// `size`, the train section and the parts list rate the same capacitors alike, by the trade's
/// rule (common practice, from memory): order the smallest common rating (50, 63, 100, 160,
/// 200, 250, 400, 500, 630 V, 1, 1.5, 2 kV …) that is at least 1.5 times the voltage the part
/// holds. The sized demo is analysed with its own train, so all three see the same capacitors.
#[test]
fn size_train_and_parts_list_rate_each_capacitor_alike() {
    const COMMON: [f64; 12] = [
        50.0, 63.0, 100.0, 160.0, 200.0, 250.0, 400.0, 500.0, 630.0, 1000.0, 1500.0, 2000.0,
    ];
    let trade_rule = |volts: f64| {
        *COMMON
            .iter()
            .find(|r| **r >= 1.5 * volts.abs())
            .expect("a small base's capacitors stay under 2 kV")
    };
    let text =
        std::fs::read_to_string(crate_path("designs/requirements/paddle-rebuild.ron")).unwrap();
    let req = sizing::parse_requirements(&text, "demo").unwrap();
    let s = sizing::size(&req).unwrap();
    assert!(!s.capacitors.is_empty(), "the demo decouples its last gaps");
    let mut from_size: Vec<f64> = Vec::new();
    for c in &s.capacitors {
        let gap = s.analysis.gaps[c.gap - 1].volts;
        assert_eq!(c.rating, trade_rule(gap), "size: gap {} at {gap} V", c.gap);
        from_size.push(c.rating);
    }
    let train = s
        .analysis
        .train
        .as_ref()
        .expect("the sized design has a train");
    let sizing = train.sizing.as_ref().expect("the train section sizes them");
    let mut from_train: Vec<f64> = Vec::new();
    for c in &sizing.caps {
        assert_eq!(
            c.rating_volts,
            trade_rule(c.holds_volts),
            "train: {}",
            c.label
        );
        from_train.push(c.rating_volts);
    }
    let mut from_parts: Vec<f64> = Vec::new();
    for line in dynode::budget::parts::list(&s.analysis) {
        if line.kind == dynode::budget::parts::Kind::Capacitor && line.volts < 2000.0 {
            let r = line.voltage_rating.expect("a capacitor has a rating");
            assert_eq!(r, trade_rule(line.volts), "parts: {:?}", line.designators);
            from_parts.extend(std::iter::repeat_n(r, line.count));
        }
    }
    for v in [&mut from_size, &mut from_train, &mut from_parts] {
        v.sort_by(f64::total_cmp);
    }
    assert_eq!(
        from_size, from_train,
        "size and train rate the same capacitors alike"
    );
    assert_eq!(
        from_size, from_parts,
        "size and the parts list rate them alike"
    );
}
