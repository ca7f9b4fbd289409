//! Bad and hostile input through the real binary: every file of the corpus in
//! tests/bad_designs/ (one mistake each, named for it) is refused by every command that reads a
//! design with exit code 2, a message that names the place (`file:line:col` for syntax,
//! `file: field.path` for a rule of sense) and says what was expected, nothing on stdout and no
//! output file. Also: files that are not designs at all (huge, endless, a directory, missing), and
//! the "nothing lost" rules for -o (never over an input, never over a file without --force,
//! atomic replacement).
//!
//! The expectations are this project's own contract for its messages (README: exit codes;
//! docs/design-file.md), so the outside reference here is the corpus itself: each
//! row states by hand where the mistake is and which words must explain it.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use crate::common::{crate_path, temp_dir};

const BIN: &str = env!("CARGO_BIN_EXE_dynode");

/// Where a message must point.
#[derive(Debug, Clone, Copy)]
enum Place {
    /// `file:line:col:` (the RON parser's position, 1-based).
    At(usize, usize),
    /// `file: field.path:`.
    Field(&'static str),
    /// `file: cannot read the design:` (the file as a whole).
    File,
}
use Place::{At, Field, File};

/// The corpus: file → expected place → words the message must contain.
#[rustfmt::skip]
const CORPUS: &[(&str, Place, &[&str])] = &[
    ("binary_file.ron", File, &["UTF-8 text", "binary file"]),
    ("capacitor_duplicate.ron", Field("divider.decoupling[1]"), &["already fitted across gap 11", "one entry per place"]),
    ("capacitor_gap_zero.ron", Field("divider.decoupling[0].gap"), &["expected a gap number from 1", "found 0"]),
    ("capacitor_missing_dynode.ron", Field("divider.decoupling[0].dynode"), &["expected a dynode number from 1 to 10", "found 11"]),
    ("capacitor_missing_gap.ron", Field("divider.decoupling[1].gap"), &["expected a gap number from 1 (K–D1) to 11", "found 12"]),
    ("counting_negative_dark_rate.ron", Field("counting.dark_rate"), &["expected a positive frequency", "-400 Hz"]),
    ("followers_dynode_out_of_range.ron", Field("divider.followers.hold[1]"), &["expected a dynode number from 1 to 10", "found 11"]),
    ("frontend_noise_density_slip.ron", Field("front_end.noise_density"), &["outside the plausible range", "per √Hz"]),
    ("frontend_order_zero.ron", Field("front_end.order"), &["expected a whole number from 1 to 10", "found 0"]),
    ("gaps_empty.ron", Field("divider.gaps"), &["expected 11 elements", "found 0"]),
    ("gaps_too_few.ron", Field("divider.gaps"), &["expected 11 elements", "found 10"]),
    ("gaps_too_many.ron", Field("divider.gaps"), &["expected 11 elements", "found 12"]),
    ("inf_exponent.ron", Field("tube.gain.exponent"), &["from 0.2 to 1.5", "found inf"]),
    ("inf_text_voltage.ron", Field("supply.volts"), &["expected a voltage", "not a finite number"]),
    ("limit_gap_above_max.ron", Field("divider.gaps[0]"), &["429 V", "above tube.limits.max_gap = 300 V"]),
    ("limit_supply_above_max.ron", Field("supply.volts"), &["expected at most", "max_supply = 1.50 kV", "found 1.60 kV"]),
    ("limit_zeners_exceed_supply.ron", Field("divider.gaps"), &["Zener voltages add up to 1210 V", "no divider current"]),
    ("magnitude_absurd_resistor.ron", Field("divider.gaps[1]"), &["outside the plausible range", "check the unit prefix"]),
    ("magnitude_anode_current_absurd.ron", Field("operating.anode_current"), &["2.00 A cannot be reached", "saturates near"]),
    ("magnitude_collection_over_100.ron", Field("tube.collection"), &["expected a fraction above 0 % up to 100 %", "150 %"]),
    ("magnitude_exponent_absurd.ron", Field("tube.gain.exponent"), &["from 0.2 to 1.5", "found 7"]),
    ("magnitude_gain_below_one.ron", Field("tube.gain.gain"), &["expected a gain above 1", "found 0.5"]),
    ("magnitude_gain_overflow.ron", Field("tube.gain.gain"), &["expected a gain above 1 up to 1e10", "found 1.7e308"]),
    ("magnitude_huge_stages.ron", At(5, 17), &["too large"]),
    ("magnitude_multiplier_frequency.ron", Field("supply.multiplier.frequency"), &["outside the plausible range 10.0 Hz to 2.00 MHz", "40.0 MHz"]),
    ("magnitude_negative_capacitor.ron", Field("divider.decoupling[0].value"), &["expected a positive capacitance", "-4.7 nF"]),
    ("magnitude_negative_resistor.ron", Field("divider.gaps[1]"), &["expected a positive resistance", "-470k"]),
    ("magnitude_negative_stages.ron", Field("tube.stages"), &["expected 1 to 20 dynodes", "found -10"]),
    ("magnitude_negative_weight.ron", Field("tube.reference_ratio[1]"), &["expected a positive weight", "found -1"]),
    ("magnitude_supply_minus_zero.ron", Field("supply.volts"), &["at least 10 V in magnitude", "\"-0 V\""]),
    ("magnitude_supply_tiny.ron", Field("supply.volts"), &["at least 10 V", "-5 V"]),
    ("magnitude_too_many_stages.ron", Field("tube.stages"), &["expected 1 to 20 dynodes", "found 40"]),
    ("magnitude_zero_load.ron", Field("load.resistance"), &["expected a positive resistance", "0 ohm"]),
    ("magnitude_zero_resistor.ron", Field("divider.gaps[1]"), &["expected a positive resistance", "found \"0\""]),
    ("magnitude_zero_stages.ron", Field("tube.stages"), &["expected 1 to 20 dynodes", "found 0"]),
    ("multiplier_too_many_stages.ron", Field("supply.multiplier.stages"), &["from 1 (a doubler) to 6", "found 25"]),
    ("nan_gain.ron", Field("tube.gain.gain"), &["expected a gain above 1", "found NaN"]),
    ("nan_in_reference_ratio.ron", Field("tube.reference_ratio[1]"), &["expected a positive weight", "found NaN"]),
    ("nan_number_resistor.ron", Field("divider.gaps[1]"), &["expected a finite resistance", "found NaN"]),
    ("overflow_number.ron", Field("tube.limits.max_supply"), &["expected a finite voltage", "found inf"]),
    ("polarity_negative_with_positive_volts.ron", Field("supply.volts"), &["polarity is CathodeNegative", "expected a negative voltage"]),
    ("polarity_positive_with_negative_volts.ron", Field("supply.volts"), &["polarity is AnodePositive", "expected a positive voltage"]),
    ("reference_ratio_wrong_length.ron", Field("tube.reference_ratio"), &["expected 11 weights", "found 10"]),
    ("syntax_bom_inside.ron", At(4, 12), &["invisible character", "U+FEFF (a byte-order mark)"]),
    ("syntax_double_comma.ron", At(5, 20), &["two commas in a row"]),
    ("syntax_duplicate_field.ron", At(6, 9), &["`stages` is given twice"]),
    ("syntax_empty_file.ron", At(1, 1), &["holds no design", "RON struct"]),
    ("syntax_json_not_ron.ron", At(1, 1), &["looks like JSON", "RON"]),
    ("syntax_missing_comma.ron", At(6, 9), &["expected a comma"]),
    ("syntax_only_comment.ron", At(1, 20), &["holds no design", "only comments"]),
    ("syntax_trailing_garbage.ron", At(35, 2), &["text after the design's closing", "exactly one design"]),
    ("syntax_unclosed_paren.ron", At(34, 46), &["file ends before the design is complete", "closing `)`"]),
    ("syntax_unterminated_string.ron", At(19, 30), &["line 17 has an odd number of quotes", "not be closed"]),
    ("syntax_yaml_not_ron.ron", At(1, 1), &["expected `(` to open the design"]),
    ("table_empty.ron", Field("tube.gain.points"), &["at least 2 (voltage, gain) points", "found 0"]),
    ("table_gain_falling.ron", Field("tube.gain.points[1]"), &["expected the gain to rise with voltage"]),
    ("table_missing_column.ron", At(6, 55), &["tuple of size 2", "one element"]),
    ("table_single_point.ron", Field("tube.gain.points"), &["at least 2 (voltage, gain) points", "found 1"]),
    ("table_voltage_not_rising.ron", Field("tube.gain.points[2]"), &["increasing order", "1000 V after 1100 V"]),
    ("text_control_character.ron", Field("name"), &["expected plain text", "U+001B"]),
    ("transit_time_prefix_slip.ron", Field("tube.transit_time.time"), &["outside the plausible range", "40.0 µs"]),
    ("type_element_unknown.ron", At(22, 16), &["`Resistor` is not a valid choice", "`R`, `Zener`"]),
    ("type_gain_text.ron", At(6, 47), &["expected a plain number without quotes"]),
    ("type_gaps_not_a_list.ron", At(22, 14), &["expected a list in square brackets"]),
    ("type_missing_load.ron", At(31, 1), &["lacks the required field `load`"]),
    ("type_name_number.ron", At(3, 10), &["expected text in double quotes"]),
    ("type_option_without_some.ron", At(8, 20), &["`Some(...)`"]),
    ("type_polarity_text.ron", At(18, 19), &["without quotes", "CathodeNegative"]),
    ("type_polarity_unknown.ron", At(18, 19), &["`Negative` is not a valid choice", "`CathodeNegative`, `AnodePositive`"]),
    ("type_quantity_list.ron", At(10, 25), &["quantity", "found a sequence"]),
    ("type_stages_fraction.ron", At(5, 19), &["whole number", "without a decimal point"]),
    ("type_stages_text.ron", At(5, 16), &["whole number without quotes"]),
    ("unit_capacitance_for_resistance.ron", Field("divider.gaps[0]"), &["expected a resistance", "\"F\" is a capacitance, not a resistance"]),
    ("unit_missing_number_current.ron", Field("operating.anode_current"), &["with its unit", "\"2 uA\""]),
    ("unit_missing_text_capacitance.ron", Field("load.capacitance"), &["has no unit", "\"15 nF\""]),
    ("unit_missing_text_current.ron", Field("tube.limits.max_anode_current"), &["has no unit", "\"100 uA\""]),
    ("unit_percent_for_voltage.ron", Field("tube.pulse_linearity.last_gap"), &["a percentage, not a voltage"]),
    ("unit_prefix_slip_stray.ron", Field("divider.stray"), &["3 uF", "plausible range 1.00 fF to 1.00 nF", "unit prefix"]),
    ("unit_thousands_separator.ron", Field("supply.volts"), &["thousands separator", "\"1100 V\""]),
    ("unit_unknown_prefix.ron", Field("divider.decoupling[0].value"), &["\"x\" is not an SI prefix", "q r y z a f p n u/µ m c d (da) h k M G T P E Z Y R Q"]),
    ("unit_unknown_unit.ron", Field("tube.limits.max_supply"), &["\"Vlt\" is not a unit of voltage", "write V"]),
    ("unit_voltage_for_capacitance.ron", Field("divider.decoupling[0].value"), &["expected a capacitance", "\"V\" is a voltage, not a capacitance"]),
    ("unit_zero_width_space.ron", Field("supply.volts"), &["invisible character", "U+200B (zero-width space)"]),
    ("unknown_field_capacitor_voltage.ron", At(25, 46), &["unknown field `voltage`", "`rating`"]),
    ("unknown_field_divder.ron", At(21, 5), &["unknown field `divder`", "did you mean `divider`?"]),
    ("unknown_field_max_suply.ron", At(10, 13), &["unknown field `max_suply`", "did you mean `max_supply`?"]),
    ("unknown_field_stage.ron", At(5, 9), &["unknown field `stage`", "did you mean `stages`?"]),
    ("unknown_field_unrelated.ron", At(29, 5), &["unknown field `colour`", "expected one of `name`"]),
    ("utf16_text.ron", File, &["UTF-16", "save it as UTF-8"]),
    ("wiring_coupling_without_anode_resistor.ron", Field("load.anode_resistor"), &["blocks the anode's DC path", "anode resistor"]),
    ("wiring_positive_without_anode_resistor.ron", Field("load.anode_resistor"), &["polarity AnodePositive", "expected an anode resistor"]),
    ("wiring_positive_without_coupling.ron", Field("load.coupling"), &["AnodePositive needs a coupling capacitor"]),
    ("wiring_rating_without_coupling.ron", Field("load.coupling_rating"), &["no load.coupling capacitor"]),
];

/// Designs whose mistake shows only when solving: `sweep` solves each point of its grid and
/// says at each why it could not (the verdict column), rather than refusing the whole sweep.
const SOLVED_PER_POINT: &[&str] = &["magnitude_anode_current_absurd.ron"];

/// Every command that reads a design, with `{design}` and `{out}` placeholders. A command that
/// lands later adds its line here, so the whole corpus runs through it too.
#[rustfmt::skip]
const COMMANDS: &[&[&str]] = &[
    &["check", "{design}"],
    &["report", "{design}", "--format", "json", "-o", "{out}"],
    &["report", "{design}", "-o", "{out}"],
    &["report", "{design}", "--format", "html", "-o", "{out}"],
    &["report", "{design}", "--format", "markdown", "-o", "{out}"],
    // The figures directory must not be created for a bad design either.
    &["report", "{design}", "--plots", "{out}"],
    &["netlist", "{design}", "-o", "{out}"],
    &["train", "{design}", "-o", "{out}"],
    &["train", "{design}", "--format", "json", "--pulses", "1", "--train-only", "-o", "{out}"],
    &["spread", "{design}", "--samples", "50", "-o", "{out}"],
    &["spread", "{design}", "--samples", "50", "--plots", "{out}"],
    &["sweep", "{design}", "--vary", "supply.volts=900V..1500V:3", "-o", "{out}"],
    &["sweep", "{design}", "--vary", "supply.volts=900V..1500V:3", "--plots", "{out}"],
    &["compare", "{design}", "{design}", "-o", "{out}"],
    &["report", "{design}", "--format", "parts-csv", "-o", "{out}"],
];

fn run(args: &[&str]) -> Output {
    Command::new(BIN)
        .args(args)
        .output()
        .expect("the dynode binary runs")
}

fn run_command(template: &[&str], design: &Path, out: &Path) -> Output {
    let design = design.to_string_lossy();
    let out = out.to_string_lossy();
    let args: Vec<String> = template
        .iter()
        .map(|a| a.replace("{design}", &design).replace("{out}", &out))
        .collect();
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    run(&args)
}

/// The text a message must contain to name `place` in `file`.
fn place_text(file: &str, place: Place) -> String {
    match place {
        At(line, col) => format!("{file}:{line}:{col}: "),
        Field(path) => format!("{file}: {path}: "),
        File => format!("{file}: cannot read the design: "),
    }
}

/// Check one refused run; returns what is wrong with it, if anything.
fn refused(out: &Output, file: &str, place: Place, words: &[&str], written: &Path) -> Vec<String> {
    let mut wrong = Vec::new();
    let stderr = String::from_utf8_lossy(&out.stderr);
    if out.status.code() != Some(2) {
        wrong.push(format!("exit code {:?}, expected 2", out.status.code()));
    }
    if !stderr.starts_with("dynode: error: ") {
        wrong.push("the message does not start with `dynode: error: `".to_string());
    }
    let want = place_text(file, place);
    if !stderr.contains(&want) {
        wrong.push(format!("the message does not name the place `{want}`"));
    }
    for w in words {
        if !stderr.contains(w) {
            wrong.push(format!("the message lacks the words `{w}`"));
        }
    }
    if stderr.contains("panicked") || stderr.contains("RUST_BACKTRACE") {
        wrong.push("the binary panicked".to_string());
    }
    if !out.stdout.is_empty() {
        wrong.push("something was printed on stdout".to_string());
    }
    if written.exists() {
        wrong.push(format!("{} was written", written.display()));
    }
    if !wrong.is_empty() {
        wrong.push(format!("stderr was: {stderr}"));
    }
    wrong
}

fn corpus_dir() -> PathBuf {
    crate_path("tests/bad_designs")
}

#[test]
fn every_corpus_file_has_a_row_and_every_row_a_file() {
    let mut files: Vec<String> = std::fs::read_dir(corpus_dir())
        .expect("tests/bad_designs exists")
        .map(|e| e.expect("entry").file_name().to_string_lossy().to_string())
        .collect();
    files.sort();
    let mut rows: Vec<String> = CORPUS.iter().map(|(f, _, _)| f.to_string()).collect();
    rows.sort();
    assert_eq!(files, rows, "tests/bad_designs and the CORPUS table differ");
    // The issue asks for at least 40 bad designs.
    assert!(CORPUS.len() >= 40, "only {} bad designs", CORPUS.len());
}

#[test]
fn corpus_is_refused_with_a_located_message_by_every_command() {
    let dir = temp_dir("bad-corpus");
    let out = dir.join("out.txt");
    let mut failures = Vec::new();
    for (file, place, words) in CORPUS {
        let design = corpus_dir().join(file);
        let shown = design.to_string_lossy().to_string();
        for cmd in COMMANDS {
            let o = run_command(cmd, &design, &out);
            if cmd[0] == "sweep" && SOLVED_PER_POINT.contains(file) {
                // A sweep tabulates an impossible operating point at each point instead
                // (in the -o file, or on stdout when figures go to a directory).
                let table = if out.is_file() {
                    std::fs::read_to_string(&out).unwrap_or_default()
                } else {
                    String::from_utf8_lossy(&o.stdout).to_string()
                };
                if o.status.code() != Some(0)
                    || !table.contains("cannot be reached: the divider saturates near")
                {
                    failures.push(format!(
                        "{file} with sweep: the verdicts do not give the reason"
                    ));
                }
                let _ = std::fs::remove_file(&out);
                let _ = std::fs::remove_dir_all(&out);
                continue;
            }
            // The corpus has no train blocks: past loading, `train` stops at that first.
            let (place, words): (Place, &[&str]) =
                if cmd[0] == "train" && SOLVED_PER_POINT.contains(file) {
                    (Field("train"), &["no train block"])
                } else {
                    (*place, words)
                };
            let wrong = refused(&o, &shown, place, words, &out);
            if !wrong.is_empty() {
                failures.push(format!(
                    "{file} with `{}`:\n  {}",
                    cmd.join(" "),
                    wrong.join("\n  ")
                ));
            }
            let _ = std::fs::remove_file(&out);
        }
    }
    // No temporary file may be left behind by a refused run either.
    let left: Vec<_> = std::fs::read_dir(&dir).expect("temp dir").collect();
    assert!(left.is_empty(), "files left in {}: {left:?}", dir.display());
    assert!(
        failures.is_empty(),
        "{} failure(s):\n{}",
        failures.len(),
        failures.join("\n")
    );
}

#[test]
fn syntax_errors_quote_the_line_with_a_caret() {
    // The message shows the offending source line and a caret under the column ron reports.
    let design = corpus_dir().join("unknown_field_divder.ron");
    let o = run(&["check", &design.to_string_lossy()]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    let lines: Vec<&str> = stderr.lines().collect();
    assert!(lines.len() >= 3, "{stderr}");
    assert_eq!(lines[1], "   21 |     divder: (", "{stderr}");
    assert_eq!(lines[2], "      |     ^", "{stderr}");
}

/// A run on a path that is not a design file: exit 2, the path named, the given words.
fn refuses_path(name: &str, design: &Path, words: &[&str]) {
    let dir = temp_dir(name);
    let out = dir.join("out.json");
    let shown = design.to_string_lossy().to_string();
    for cmd in COMMANDS {
        let o = run_command(cmd, design, &out);
        let wrong = refused(&o, &shown, File, words, &out);
        assert!(
            wrong.is_empty(),
            "`{}`: {}",
            cmd.join(" "),
            wrong.join("\n")
        );
    }
}

#[test]
fn a_100_megabyte_file_is_refused_without_being_read() {
    // Generated here, never committed: a sparse file of 100 MB.
    let dir = temp_dir("huge");
    let huge = dir.join("huge.ron");
    let f = std::fs::File::create(&huge).expect("create");
    f.set_len(100 * 1024 * 1024).expect("set_len");
    drop(f);
    refuses_path(
        "huge-out",
        &huge,
        &["104857600 bytes", "at most 1048576 bytes"],
    );
}

#[cfg(unix)]
#[test]
fn an_endless_device_is_refused_after_the_size_limit() {
    // /dev/zero reports no length; the reader stops one byte past the limit.
    refuses_path(
        "zero-out",
        Path::new("/dev/zero"),
        &["more than 1048576 bytes"],
    );
}

#[test]
fn a_directory_is_refused() {
    refuses_path(
        "dir-out",
        &corpus_dir(),
        &["it is a directory", ".ron design file"],
    );
}

#[test]
fn a_missing_file_is_refused() {
    let missing = temp_dir("missing").join("no-such-design.ron");
    refuses_path("missing-out", &missing, &["No such file"]);
}

#[test]
fn a_byte_order_mark_is_tolerated() {
    // Some editors start UTF-8 files with U+FEFF; the design behind it is valid.
    let dir = temp_dir("bom");
    let design = dir.join("bom.ron");
    let mut bytes = vec![0xef, 0xbb, 0xbf];
    bytes.extend(std::fs::read(crate_path("designs/rooftop-paddle.ron")).expect("demo"));
    std::fs::write(&design, bytes).expect("write");
    let o = run(&["check", &design.to_string_lossy()]);
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
}

// ---------------------------------------------------------------------------------------------
// Nothing lost
// ---------------------------------------------------------------------------------------------

fn copy_demo(dir: &Path) -> PathBuf {
    let design = dir.join("paddle.ron");
    std::fs::copy(crate_path("designs/rooftop-paddle.ron"), &design).expect("copy demo");
    design
}

#[test]
fn output_over_the_input_is_refused_even_with_force() {
    let dir = temp_dir("over-input");
    let design = copy_demo(&dir);
    let before = std::fs::read(&design).expect("read");
    let mtime = std::fs::metadata(&design)
        .and_then(|m| m.modified())
        .expect("mtime");
    // The same file under another spelling of its path is still the input.
    let other_spelling = dir.join(".").join("paddle.ron");
    for target in [&design, &other_spelling] {
        for force in [false, true] {
            let mut args = vec!["report", design.to_str().expect("utf-8 path"), "-o"];
            args.push(target.to_str().expect("utf-8 path"));
            if force {
                args.push("--force");
            }
            let o = run(&args);
            let stderr = String::from_utf8_lossy(&o.stderr);
            assert_eq!(o.status.code(), Some(2), "{stderr}");
            assert!(
                stderr.contains("refusing to write over an input file"),
                "{stderr}"
            );
        }
    }
    assert_eq!(
        std::fs::read(&design).expect("read"),
        before,
        "the input changed"
    );
    let after = std::fs::metadata(&design)
        .and_then(|m| m.modified())
        .expect("mtime");
    assert_eq!(mtime, after, "the input was touched");
    let names: Vec<_> = std::fs::read_dir(&dir)
        .expect("dir")
        .map(|e| e.expect("e").file_name())
        .collect();
    assert_eq!(names.len(), 1, "extra files: {names:?}");
}

#[test]
fn output_over_an_existing_file_needs_force() {
    let dir = temp_dir("existing");
    let design = copy_demo(&dir);
    let target = dir.join("report.json");
    std::fs::write(&target, "a file the user keeps\n").expect("write");
    let args = [
        "report",
        design.to_str().expect("utf-8"),
        "--format",
        "json",
        "-o",
        target.to_str().expect("utf-8"),
    ];
    let o = run(&args);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("the file exists; pass --force"), "{stderr}");
    assert_eq!(
        std::fs::read_to_string(&target).expect("read"),
        "a file the user keeps\n"
    );

    let mut forced = args.to_vec();
    forced.push("--force");
    let o = run(&forced);
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let text = std::fs::read_to_string(&target).expect("read");
    let v: serde_json::Value =
        serde_json::from_str(&text).expect("the replaced file is a whole JSON report");
    assert!(v.get("closing_caution").is_some(), "the report is complete");
    // Only the design and the report remain: the temporary sibling was renamed away.
    let mut names: Vec<String> = std::fs::read_dir(&dir)
        .expect("dir")
        .map(|e| e.expect("e").file_name().to_string_lossy().to_string())
        .collect();
    names.sort();
    assert_eq!(names, ["paddle.ron", "report.json"]);
}

#[test]
fn output_into_a_missing_directory_fails_cleanly() {
    let dir = temp_dir("no-dir");
    let design = copy_demo(&dir);
    let target = dir.join("no-such-dir").join("r.txt");
    let o = run(&[
        "report",
        design.to_str().expect("utf-8"),
        "-o",
        target.to_str().expect("utf-8"),
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{stderr}");
    assert!(
        stderr.contains(&format!("{}: cannot write", target.display())),
        "{stderr}"
    );
    assert!(!dir.join("no-such-dir").exists());
}

#[cfg(unix)]
#[test]
fn an_interrupted_run_leaves_no_half_file() {
    // Interrupt the process (SIGTERM, as a shell or a service manager stops a job) at
    // spread-out moments of its run. Whatever the moment, the target is either absent or a
    // complete report (written to a hidden sibling, then renamed: POSIX rename(2) replaces the
    // name atomically), and no temporary file is left behind (the interrupt handler removes it).
    let dir = temp_dir("interrupt");
    let design = copy_demo(&dir);
    let target = dir.join("r.json");
    let mut complete = 0;
    for i in 0..12u64 {
        let _ = std::fs::remove_file(&target);
        let mut child = Command::new(BIN)
            .args([
                "report",
                design.to_str().expect("utf-8"),
                "--format",
                "json",
                "-o",
            ])
            .arg(&target)
            .stderr(std::process::Stdio::null())
            .spawn()
            .expect("spawn");
        std::thread::sleep(std::time::Duration::from_millis(i * i));
        let _ = Command::new("kill")
            .args(["-TERM", &child.id().to_string()])
            .status();
        let _ = child.wait();
        if target.exists() {
            let text = std::fs::read_to_string(&target).expect("read");
            let v: serde_json::Value = serde_json::from_str(&text)
                .unwrap_or_else(|e| panic!("half a file after a kill at {} ms: {e}", i * i));
            assert!(v.get("closing_caution").is_some());
            complete += 1;
        }
        for e in std::fs::read_dir(&dir).expect("dir") {
            let name = e.expect("e").file_name().to_string_lossy().to_string();
            assert!(
                name == "paddle.ron" || name == "r.json",
                "unexpected file {name} after an interrupt at {} ms",
                i * i
            );
        }
    }
    // The other side of the property, independent of how fast this machine is: a run left to
    // finish leaves the complete report.
    let _ = std::fs::remove_file(&target);
    let status = Command::new(BIN)
        .args([
            "report",
            design.to_str().expect("utf-8"),
            "--format",
            "json",
            "-q",
            "-o",
        ])
        .arg(&target)
        .status()
        .expect("run");
    assert!(status.success());
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&target).expect("read")).expect("whole");
    assert!(v.get("closing_caution").is_some());
    eprintln!("interrupted runs that had already finished: {complete} of 12");
}

#[test]
fn a_refused_figures_directory_leaves_no_report_behind() {
    let dir = temp_dir("plots-refused");
    let design = copy_demo(&dir);
    let report_path = dir.join("r.txt");
    let d = design.to_str().expect("utf-8");
    let r = report_path.to_str().expect("utf-8");
    // --plots naming a file, not a directory.
    let o = run(&["report", d, "-o", r, "--plots", d]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("--plots expects a directory"), "{stderr}");
    assert!(
        !report_path.exists(),
        "the report was written before the refusal"
    );
    // A figure file that exists, without --force.
    let figs = dir.join("figs");
    std::fs::create_dir(&figs).expect("mkdir");
    std::fs::write(figs.join("linearity.svg"), "keep me").expect("write");
    let o = run(&[
        "report",
        d,
        "-o",
        r,
        "--plots",
        figs.to_str().expect("utf-8"),
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{stderr}");
    assert!(
        stderr.contains("linearity.svg: the file exists; pass --force"),
        "{stderr}"
    );
    assert!(
        !report_path.exists(),
        "the report was written before the refusal"
    );
    assert_eq!(
        std::fs::read_to_string(figs.join("linearity.svg")).expect("read"),
        "keep me"
    );
    assert_eq!(
        std::fs::read_dir(&figs).expect("dir").count(),
        1,
        "figures were written"
    );
}

#[test]
fn an_unreachable_netlist_current_names_the_option() {
    // 5 mA from a 193 µA divider (1100 V / 5.7 MΩ, Ohm's law) is beyond its ceiling.
    let o = run(&[
        "netlist",
        &crate_path("designs/rooftop-paddle.ron").to_string_lossy(),
        "--anode-current",
        "5 mA",
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("rooftop-paddle.ron: --anode-current: an average anode current of 5.00 mA cannot be reached"), "{stderr}");
    assert!(o.stdout.is_empty());
}

#[test]
fn size_refuses_every_corpus_file_with_a_located_message() {
    // `size` reads a requirements file, not a design, so the corpus is wrong for it in other
    // words; it must still refuse each one with exit 2, the file and a place (line:col or a
    // field), and write nothing.
    let dir = temp_dir("size-corpus");
    let out = dir.join("sized.ron");
    let mut failures = Vec::new();
    for (file, _, _) in CORPUS {
        let design = corpus_dir().join(file);
        let shown = design.to_string_lossy().to_string();
        let o = run(&["size", &shown, "-o", &out.to_string_lossy()]);
        let stderr = String::from_utf8_lossy(&o.stderr);
        let rest = stderr
            .strip_prefix(&format!("dynode: error: {shown}"))
            .unwrap_or("");
        let located = rest.starts_with(": ")
            || rest
                .strip_prefix(':')
                .is_some_and(|r| r.starts_with(|c: char| c.is_ascii_digit()));
        if o.status.code() != Some(2) || !located || out.exists() || stderr.contains("panicked") {
            failures.push(format!("{file}: exit {:?}: {stderr}", o.status.code()));
        }
        let _ = std::fs::remove_file(&out);
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn size_reads_its_requirements_with_the_same_limits() {
    refuses_path_with(
        "size-zero",
        &["size", "/dev/zero", "-o", "{out}"],
        "/dev/zero",
        &["more than 1048576 bytes"],
    );
    refuses_path_with(
        "size-dir",
        &["size", "{dir}", "-o", "{out}"],
        "{dir}",
        &["it is a directory"],
    );
}

/// As [`refuses_path`] for one command template with `{out}` and `{dir}` (the corpus folder).
fn refuses_path_with(name: &str, template: &[&str], shown: &str, words: &[&str]) {
    let dir = temp_dir(name);
    let out = dir.join("out.ron");
    let corpus = corpus_dir().to_string_lossy().to_string();
    let args: Vec<String> = template
        .iter()
        .map(|a| {
            a.replace("{out}", &out.to_string_lossy())
                .replace("{dir}", &corpus)
        })
        .collect();
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    let o = run(&args);
    let shown = shown.replace("{dir}", &corpus);
    let wrong = refused(&o, &shown, File, words, &out);
    assert!(wrong.is_empty(), "{}", wrong.join("\n"));
}
