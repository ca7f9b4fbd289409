//! Plausibility warnings: each one triggered by a design made for it, shown in every report
//! format (text, JSON, and whatever formats `report::Format` gains), and never blocking: the
//! report is still written, exit 0, and exit 1 only with `--strict`.
//!
//! Sources of the thresholds are named beside each case: the tube's own ratings (from the
//! design), common practice (divider current at least ten times the anode current, capacitor
//! rating at least the voltage it holds), IEC 60115-1 (resistor rated voltage, from memory) and
//! IEC 60204-1 §6.2.4 (5 s to 60 V after switch-off, from memory).

use dynode::warning::{Code, Warning};
use dynode::{analysis, design, report};

/// A valid 10-stage cathode-negative design of our own (invented numbers) that raises no
/// warning; each case changes one thing in it.
pub const BASE: &str = r#"(
    name: "Warning base: 10-stage tube, cathode-negative (invented numbers)",
    tube: (
        stages: 10,
        gain: Reference(volts: "1000 V", gain: 1.0e6, exponent: Some(0.75)),
        reference_ratio: Some([2, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1]),
        collection: Some("90 %"),
        limits: (
            max_supply: "1500 V",
            max_gap: Some("300 V"),
            max_anode_current: "100 uA",
        ),
        pulse_linearity: Some((peak_current: "30 mA", deviation: Some("2 %"), last_gap: "90 V")),
    ),
    supply: (
        volts: "-1100 V",
        polarity: CathodeNegative,
        current_limit: Some("1 mA"),
    ),
    divider: (
        gaps: [R("1M"), R("470k"), R("470k"), R("470k"), R("470k"), R("470k"),
               R("470k"), R("470k"), R("470k"), R("470k"), R("470k")],
        decoupling: [
            Across(gap: 10, value: "4.7 nF", rating: Some("500 V")),
            Across(gap: 11, value: "10 nF", rating: Some("500 V")),
        ],
    ),
    load: (
        resistance: "50 ohm",
        capacitance: Some("15 pF"),
    ),
    resistors: Some((power: "0.25 W", working_voltage: "250 V", tolerance: Some("1 %"))),
    operating: Some((anode_current: "2 uA")),
)"#;

/// `BASE` with each `(from, to)` replaced; every `from` must occur exactly once.
pub fn variant(changes: &[(&str, &str)]) -> String {
    let mut text = BASE.to_string();
    for (from, to) in changes {
        assert_eq!(
            text.matches(from).count(),
            1,
            "`{from}` must occur once in BASE"
        );
        text = text.replace(from, to);
    }
    text
}

fn collapse(s: &str) -> String {
    s.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// Analyse `text` and return its warnings, after checking that one warning has `code` and
/// `words` in its message and that, with wrapping undone, the words appear in the report of
/// every format, and in JSON as `{code, message}`.
fn warns(text: &str, code: Code, words: &[&str]) -> Vec<Warning> {
    let d = design::parse_str(text, "case.ron").expect("the case design is valid");
    let a = analysis::analyse(&d).expect("the case design solves");
    let hit = a
        .warnings
        .iter()
        .any(|w| w.code == code && words.iter().all(|x| w.message.contains(x)));
    assert!(hit, "no {code} warning with {words:?} in {:#?}", a.warnings);
    for format in report::Format::ALL.iter() {
        let out = collapse(&report::render(&a, *format).expect("no non-finite figure"));
        for w in words {
            assert!(out.contains(w), "{format:?} report lacks `{w}`");
        }
    }
    let json = report::json::to_value(&a);
    let listed = json["warnings"].as_array().expect("warnings array");
    assert!(
        listed.iter().any(|w| w["code"] == code.as_str()
            && words
                .iter()
                .all(|x| w["message"].as_str().unwrap_or("").contains(x))),
        "JSON warnings lack {code} with {words:?}"
    );
    a.warnings
}

#[test]
fn the_base_design_raises_no_warning() {
    // Otherwise every case below would pass for the wrong reason.
    let d = design::parse_str(BASE, "base.ron").expect("valid");
    let a = analysis::analyse(&d).expect("solves");
    assert!(a.warnings.is_empty(), "{:#?}", a.warnings);
}

#[test]
fn gap_over_the_tube_limit_under_load() {
    // The tube's gap rating (the design's own tube.limits.max_gap). With no current K–D1 holds
    // 193 V (1 MΩ of 5.7 MΩ on 1100 V, Ohm's law); at 40 µA the lower gaps sag and it rises
    // above 195 V, so the check passes and the warning must speak.
    let text = variant(&[
        (r#"max_gap: Some("300 V")"#, r#"max_gap: Some("195 V")"#),
        (r#"anode_current: "2 uA""#, r#"anode_current: "40 uA""#),
    ]);
    warns(
        &text,
        Code::GapAboveTubeLimit,
        &["Gap 1 (K–D1)", "above the tube's gap limit of 195 V"],
    );
    let d = design::parse_str(&text, "case.ron").expect("valid");
    let json = report::json::to_value(&analysis::analyse(&d).expect("solves"));
    assert_eq!(json["gaps"][0]["over_gap_limit"], true);
}

#[test]
fn anode_current_over_the_rating() {
    // The tube's average anode-current rating (tube.limits.max_anode_current = 100 µA).
    warns(
        &variant(&[(r#"anode_current: "2 uA""#, r#"anode_current: "150 uA""#)]),
        Code::AnodeCurrentAboveRating,
        &["average anode current 150 µA is above the tube's rating of 100 µA"],
    );
}

#[test]
fn divider_current_below_ten_times_the_anode_current() {
    // Common practice: the divider carries at least ten times the average anode current.
    // 1100 V / 5.7 MΩ = 193 µA (Ohm's law) against 30 µA is 6.4×.
    warns(
        &variant(&[(r#"anode_current: "2 uA""#, r#"anode_current: "30 uA""#)]),
        Code::DividerCurrentLow,
        &["divider current 193 µA is less than ten times the anode current 30.0 µA"],
    );
}

#[test]
fn resistor_power_over_rating() {
    // P = V²/R: K–D1 holds 193 V on 1 MΩ, 37.3 mW, above a 30 mW part (Joule's law).
    warns(
        &variant(&[(r#"power: "0.25 W""#, r#"power: "0.03 W""#)]),
        Code::ResistorOverPower,
        &["Gap 1 (K–D1) dissipates 37.3 mW, above the resistor's 30.0 mW rating"],
    );
}

#[test]
fn resistor_voltage_over_rating() {
    // Rated voltage min(√(P·R), working voltage) (IEC 60115-1, from memory): min(500 V, 150 V).
    warns(
        &variant(&[(r#"working_voltage: "250 V""#, r#"working_voltage: "150 V""#)]),
        Code::ResistorOverVoltage,
        &[
            "Gap 1 (K–D1) puts 193 V across its resistor",
            "rated voltage of 150 V",
        ],
    );
}

#[test]
fn capacitor_rating_below_the_gap_voltage() {
    // Common practice: a capacitor is rated at least for the voltage it holds (90 V here).
    warns(
        &variant(&[(
            r#"value: "10 nF", rating: Some("500 V")"#,
            r#"value: "10 nF", rating: Some("50 V")"#,
        )]),
        Code::CapacitorOverVoltage,
        &[
            "decoupling across gap 11",
            "is rated 50.0 V but holds 89.9 V",
        ],
    );
}

#[test]
fn bleed_time_over_five_seconds() {
    // IEC 60204-1 §6.2.4 (from memory): 60 V within 5 s. 1 µF on 5.7 MΩ: τ = 5.7 s, and
    // 1100 V → 60 V takes τ·ln(1100/60) = 16.6 s (RC discharge law).
    warns(
        &variant(&[(
            r#"current_limit: Some("1 mA"),"#,
            r#"current_limit: Some("1 mA"), output_capacitance: Some("1 uF"),"#,
        )]),
        Code::BleedDownSlow,
        &[
            "Bleed-down to 60 V takes 16.6 s",
            "over the 5 s of IEC 60204-1",
        ],
    );
}

#[test]
fn warnings_never_block_and_strict_turns_them_into_exit_1() {
    let dir = crate::common::temp_dir("strict");
    let design = dir.join("hot.ron");
    std::fs::write(
        &design,
        variant(&[(r#"anode_current: "2 uA""#, r#"anode_current: "150 uA""#)]),
    )
    .expect("write");
    let bin = env!("CARGO_BIN_EXE_dynode");
    let out = dir.join("r.txt");
    let o = std::process::Command::new(bin)
        .args([
            "report",
            design.to_str().expect("utf-8"),
            "-o",
            out.to_str().expect("utf-8"),
        ])
        .output()
        .expect("runs");
    assert_eq!(o.status.code(), Some(0), "warnings must not block");
    assert!(
        collapse(&std::fs::read_to_string(&out).expect("written"))
            .contains("above the tube's rating")
    );
    let o = std::process::Command::new(bin)
        .args(["report", design.to_str().expect("utf-8"), "--strict"])
        .output()
        .expect("runs");
    assert_eq!(o.status.code(), Some(1), "--strict with warnings exits 1");
    assert!(
        !o.stdout.is_empty(),
        "the report is still printed under --strict"
    );
}

#[test]
fn check_shows_the_warnings_too() {
    let dir = crate::common::temp_dir("check-warns");
    let design = dir.join("weak.ron");
    // 193 µA of divider current against 30 µA (common practice: at least ten times).
    std::fs::write(
        &design,
        variant(&[(r#"anode_current: "2 uA""#, r#"anode_current: "30 uA""#)]),
    )
    .expect("write");
    let o = std::process::Command::new(env!("CARGO_BIN_EXE_dynode"))
        .args(["check", design.to_str().expect("utf-8")])
        .output()
        .expect("runs");
    assert_eq!(o.status.code(), Some(0));
    let out = String::from_utf8_lossy(&o.stdout);
    assert!(
        out.contains("warning: The divider current 193 µA is less than ten times"),
        "{out}"
    );
}

#[test]
fn steady_light_that_would_saturate_the_tube() {
    // Photons per second × QE × e × gain (docs/physics.md §7): 1 µW of room-level light at
    // 450 nm on a bialkali cathode asks for far more than the tube's average-current rating.
    let demo =
        std::fs::read_to_string(crate::common::crate_path("designs/rooftop-paddle.ron")).unwrap();
    let line = demo
        .lines()
        .find(|l| l.trim_start().starts_with("background:"))
        .expect("the demo has a background line");
    let text = demo.replace(
        line,
        r#"        background: Some(Power(power: "1 uW", wavelength: "450 nm")),"#,
    );
    let d = design::parse_str(&text, "bright.ron").unwrap();
    let a = analysis::analyse(&d).unwrap();
    let w = a
        .warnings
        .iter()
        .find(|w| w.message.contains("Steady light on this energised tube"))
        .expect("the saturation warning is raised");
    assert_eq!(w.code, Code::BackgroundLightAboveRating);
    assert!(w.message.contains("× its limit"));
    for format in report::Format::ALL.iter() {
        let out = report::render(&a, *format).expect("no non-finite figure");
        assert!(
            collapse(&out).contains("Steady light on this energised tube"),
            "{format:?} shows it"
        );
    }
}

#[test]
fn warning_codes_are_unique_and_match_the_documented_list() {
    // The codes are a published contract (docs/json.md, "Warning codes"): the table there must
    // list exactly the codes the program can raise, in the same order, each once.
    let doc = std::fs::read_to_string(crate::common::crate_path("docs/json.md")).unwrap();
    let start = doc
        .find("## Warning codes")
        .expect("docs/json.md has a Warning codes section");
    let section = &doc[start..];
    let end = section[3..].find("\n## ").map_or(section.len(), |i| i + 3);
    let documented: Vec<&str> = section[..end]
        .lines()
        .filter_map(|l| l.strip_prefix("| `"))
        .filter_map(|l| l.split('`').next())
        .collect();
    let program: Vec<&str> = Code::ALL.iter().map(|c| c.as_str()).collect();
    assert_eq!(documented, program, "docs/json.md and Code::ALL differ");
    let unique: std::collections::BTreeSet<&str> = program.iter().copied().collect();
    assert_eq!(unique.len(), program.len(), "a code is used twice");
}

#[test]
fn the_base_design_with_many_faults_gives_each_its_own_code() {
    // Two conditions at once (150 µA against a 100 µA rating and a 193 µA divider, common
    // practice asks 10×): each is its own warning with its own code, in both text and JSON.
    let text = variant(&[(r#"anode_current: "2 uA""#, r#"anode_current: "150 uA""#)]);
    let d = design::parse_str(&text, "case.ron").expect("valid");
    let a = analysis::analyse(&d).expect("solves");
    let codes: Vec<Code> = a.warnings.iter().map(|w| w.code).collect();
    assert!(codes.contains(&Code::AnodeCurrentAboveRating), "{codes:?}");
    assert!(codes.contains(&Code::DividerCurrentLow), "{codes:?}");
    let json = report::json::to_value(&a);
    let listed: Vec<&str> = json["warnings"]
        .as_array()
        .expect("array")
        .iter()
        .map(|w| w["code"].as_str().expect("code is a string"))
        .collect();
    assert_eq!(
        listed,
        codes.iter().map(|c| c.as_str()).collect::<Vec<_>>(),
        "JSON lists the same warnings in the same order"
    );
}
