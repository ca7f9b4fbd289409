//! The report in its four formats says the same thing: every demo's HTML and Markdown are
//! built of headings, paragraphs and real tables (no preformatted dump), and each section's
//! key figures print with the same digits in the text, the HTML and the Markdown.
//!
//! The anchor for each figure is the JSON report (SI base units, full precision): the figure is
//! printed the way the report's engineering formatting prints it and looked for in the text
//! line and in the table row that carry it. This is a consistency check across formats, not a
//! physics check; the physics of each figure is checked in its own test module.

use std::process::Command;

use crate::common::{crate_path, demo_designs, temp_dir};
use dynode::units::format_eng;
use dynode::{analysis, design, report};

struct Rendered {
    stem: String,
    text: String,
    html: String,
    md: String,
    json: serde_json::Value,
}

/// Every demo's report in text, HTML, Markdown and JSON, as `dynode report` writes it by
/// default (with the train where the design has one).
fn every_demo() -> Vec<(Rendered, analysis::Analysis)> {
    demo_designs()
        .into_iter()
        .map(|path| {
            let stem = path.file_stem().unwrap().to_string_lossy().to_string();
            let src = std::fs::read_to_string(&path).expect("demo readable");
            let d = design::parse_str(&src, &format!("designs/{stem}.ron")).expect("demo parses");
            let a = analysis::analyse(&d).expect("demo analyses");
            let r = |f| report::render(&a, f).expect("renders");
            let rendered = Rendered {
                text: r(report::Format::Text),
                html: r(report::Format::Html),
                md: r(report::Format::Markdown),
                json: serde_json::from_str(&r(report::Format::Json)).expect("JSON parses"),
                stem,
            };
            (rendered, a)
        })
        .collect()
}

/// The HTML table row whose first cell is `label`, searched from `from` on.
fn html_row<'a>(html: &'a str, from: &str, label: &str) -> &'a str {
    let start = html
        .find(from)
        .unwrap_or_else(|| panic!("no {from:?} in the HTML"));
    let key = format!("<tr><td>{label}</td>");
    let i = start
        + html[start..]
            .find(&key)
            .unwrap_or_else(|| panic!("no HTML row {label:?} after {from:?}"));
    let j = i + html[i..].find("</tr>").expect("row ends");
    &html[i..j]
}

/// The Markdown table line whose first cell is `label`, searched from `from` on.
fn md_row<'a>(md: &'a str, from: &str, label: &str) -> &'a str {
    let start = md
        .find(from)
        .unwrap_or_else(|| panic!("no {from:?} in the Markdown"));
    md[start..]
        .lines()
        .find(|l| l.starts_with(&format!("| {label} |")))
        .unwrap_or_else(|| panic!("no Markdown row {label:?} after {from:?}"))
}

/// The text line that starts (after its indent) with `label`, searched from `from` on.
fn text_line<'a>(text: &'a str, from: &str, label: &str) -> &'a str {
    let start = text
        .find(from)
        .unwrap_or_else(|| panic!("no {from:?} in the text"));
    text[start..]
        .lines()
        .find(|l| l.trim_start().starts_with(label))
        .unwrap_or_else(|| panic!("no text line {label:?} after {from:?}"))
}

/// A figure printed by engineering formatting must show the same number and unit in the text
/// line, the HTML row (number and unit cells) and the Markdown row.
#[allow(clippy::too_many_arguments)]
fn same_figure(
    r: &Rendered,
    what: &str,
    value: f64,
    unit: &str,
    text_from: &str,
    text_label: &str,
    doc_from: (&str, &str),
    doc_label: &str,
) {
    let printed = format_eng(value, unit);
    let (number, prefixed) = printed.rsplit_once(' ').expect("number and unit");
    let line = text_line(&r.text, text_from, text_label);
    assert!(
        line.contains(&printed),
        "{}: {what}: text line {line:?} lacks {printed:?}",
        r.stem
    );
    let row = html_row(&r.html, doc_from.0, doc_label);
    assert!(
        row.contains(&format!(">{number}</td><td>{prefixed}</td>")),
        "{}: {what}: HTML row {row:?} lacks {printed:?}",
        r.stem
    );
    let row = md_row(&r.md, doc_from.1, doc_label);
    assert!(
        row.contains(&format!("| {number} | {prefixed} |")),
        "{}: {what}: Markdown row {row:?} lacks {printed:?}",
        r.stem
    );
}

fn f(v: &serde_json::Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("a number, found {v}"))
}

#[test]
fn html_and_markdown_hold_tables_and_no_preformatted_text_for_every_demo() {
    let demos = every_demo();
    assert!(demos.len() >= 10, "the demos are found");
    for (r, a) in &demos {
        let s = &r.stem;
        assert!(
            !r.html.contains("<pre"),
            "{s}: HTML holds preformatted text"
        );
        assert!(
            !r.md.contains("```") && !r.md.contains("~~~"),
            "{s}: Markdown holds a code fence"
        );
        // Every section of the report is there as a heading followed by blocks.
        for sec in report::extra_sections(a) {
            let h = format!("<h2>{}</h2>", sec.title);
            assert!(r.html.contains(&h), "{s}: HTML section {h}");
            assert!(
                r.md.contains(&format!("\n## {}\n", sec.title)),
                "{s}: Markdown section {}",
                sec.title
            );
            assert!(!sec.blocks.is_empty(), "{s}: {} has blocks", sec.title);
        }
        // The cautions first and last in both.
        for (doc, first) in [(&r.html, "caution-first"), (&r.md, "HIGH-VOLTAGE CAUTION")] {
            let first = doc.find(first).expect("opening caution");
            let table = doc
                .find("<table")
                .or_else(|| doc.find("|---|"))
                .expect("a table");
            assert!(first < table, "{s}: caution before the tables");
            let last = doc.rfind("HIGH VOLTAGE").expect("closing caution");
            assert!(
                last > doc
                    .rfind("</table>")
                    .or_else(|| doc.rfind("|---|"))
                    .unwrap(),
                "{s}: caution after the tables"
            );
        }
        // `dynode train` in HTML and Markdown: the same blocks, no dump either.
        if a.train.is_some() {
            let html = report::train::render(a, report::Format::Html).unwrap();
            let md = report::train::render(a, report::Format::Markdown).unwrap();
            assert!(
                !html.contains("<pre") && html.contains("<table>"),
                "{s}: train HTML"
            );
            assert!(
                !md.contains("```") && md.contains("|---|"),
                "{s}: train Markdown"
            );
        }
    }
}

#[test]
fn each_sections_key_figures_print_the_same_digits_in_text_html_and_markdown() {
    let (mut signal, mut train, mut supply, mut active) = (0, 0, 0, 0);
    for (r, _) in &every_demo() {
        let j = &r.json;
        // Signal budget: the pulse's peak at the load (at the instrument, or at the front
        // end's input where there is one).
        if let Some(peak) = j["pulse"]["peak_volts"].as_f64() {
            same_figure(
                r,
                "peak at the load",
                peak,
                "V",
                "PULSE AT THE LOAD",
                "peak ",
                ("<h3>Pulse at the load", "### Pulse at the load"),
                "peak at the load",
            );
            signal += 1;
        }
        // Pulse train: the average anode current and, per decoupling capacitor, the
        // steady-state droop as a percentage of its gap.
        let t = &j["train"];
        if !t.is_null() {
            if let Some(avg) = t["average_anode_amps"].as_f64() {
                same_figure(
                    r,
                    "train average current",
                    avg,
                    "A",
                    "PULSE TRAIN",
                    "average anode current",
                    ("<h2>Pulse train", "## Pulse train"),
                    "average anode current",
                );
            }
            if let Some(ss) = t["steady_state"].as_object() {
                let droop = ss["droop_fraction"].as_array().unwrap();
                for (k, d) in t["droop"].as_array().unwrap().iter().enumerate() {
                    let label = d["label"].as_str().unwrap();
                    let x = format!("{:.3}", f(&droop[k]) * 100.0);
                    let line = text_line(&r.text, "capacitor (drop, % of its gap)", label);
                    assert!(
                        line.contains(&format!("{x} %")),
                        "{}: steady droop {x} % not in {line:?}",
                        r.stem
                    );
                    let row = html_row(&r.html, "<h3>Steady state", label);
                    assert!(
                        row.contains(&format!("<td class=\"num\">{x}</td>")),
                        "{}: steady droop {x} not in HTML {row:?}",
                        r.stem
                    );
                    let row = md_row(&r.md, "### Steady state", label);
                    assert!(
                        row.starts_with(&format!("| {label} | {x} |")),
                        "{}: steady droop {x} not in Markdown {row:?}",
                        r.stem
                    );
                    train += 1;
                }
            }
        }
        // Supply as built: the mean output at the base.
        if let Some(v) = j["supply_model"]["output_volts"].as_f64() {
            same_figure(
                r,
                "mean output at the base",
                v,
                "V",
                "SUPPLY AS BUILT",
                "mean output at the base",
                ("<h2>Supply as built", "## Supply as built"),
                "mean output at the base",
            );
            supply += 1;
        }
        // Transistor-held stages: the supply current with followers, and each follower's
        // current (the column's unit is the one these figures share).
        let s = &j["active_stages"];
        if !s.is_null() {
            let printed = format_eng(f(&s["supply_amps"]), "A");
            let (number, unit) = printed.rsplit_once(' ').unwrap();
            let line = text_line(
                &r.text,
                "TRANSISTOR-HELD",
                "supply current at the operating point",
            );
            assert!(
                line.contains(&printed),
                "{}: {line:?} lacks {printed}",
                r.stem
            );
            let from = ("<h2>Transistor-held", "## Transistor-held");
            let label = "supply current at the operating point";
            let row = html_row(&r.html, from.0, label);
            assert!(
                row.contains(&format!("<td>{unit}</td><td class=\"num\">{number}</td>")),
                "{}: {row:?} lacks {printed}",
                r.stem
            );
            let row = md_row(&r.md, from.1, label);
            assert!(row.contains(&format!("| {unit} | {number} |")), "{row:?}");
            for fo in s["followers"].as_array().unwrap() {
                let printed = format_eng(f(&fo["amps"]), "A");
                let (number, unit) = printed.rsplit_once(' ').unwrap();
                let name = format!("D{}", fo["dynode"]);
                let line = text_line(&r.text, "TRANSISTOR-HELD", &format!("{name} "));
                assert!(
                    line.contains(&printed),
                    "{}: {line:?} lacks {printed}",
                    r.stem
                );
                assert!(
                    r.html.contains(&format!("current ({unit})</th>")),
                    "{}: follower current column in {unit}",
                    r.stem
                );
                let row = html_row(&r.html, from.0, &name);
                assert!(
                    row.contains(&format!(">{number}</td>")),
                    "{row:?} lacks {number}"
                );
                let row = md_row(&r.md, from.1, &name);
                assert!(
                    row.contains(&format!("| {number} |")),
                    "{row:?} lacks {number}"
                );
            }
            active += 1;
        }
    }
    // The demos exercise every section (so the checks above cannot pass by skipping).
    assert!(signal >= 5 && train >= 3 && supply >= 1 && active >= 1);
}

#[test]
fn report_markdown_links_the_figures_written_with_plots() {
    let dir = temp_dir("report-md-figures");
    let design = crate_path("designs/rooftop-paddle.ron");
    let run = |out: &str, plots: bool| {
        let mut c = Command::new(env!("CARGO_BIN_EXE_dynode"));
        c.args(["report", "--format", "markdown", "-q", "-o"])
            .arg(dir.join(out))
            .arg(&design);
        if plots {
            c.arg("--plots").arg(dir.join("figs"));
        }
        let o = c.output().unwrap();
        assert!(o.status.success(), "{o:?}");
        std::fs::read_to_string(dir.join(out)).unwrap()
    };
    let md = run("report.md", true);
    let heading = md.find("\n## Figures\n").expect("a Figures heading");
    assert!(
        heading < md.rfind("HIGH VOLTAGE").unwrap(),
        "the closing caution stays last"
    );
    let mut linked = 0;
    for e in std::fs::read_dir(dir.join("figs")).unwrap() {
        let name = e.unwrap().file_name().to_string_lossy().to_string();
        if !name.ends_with(".svg") {
            continue;
        }
        // A list item with an image link whose title is not empty, to the file as the reader
        // of report.md finds it (relative to its folder).
        let target = format!("](figs/{name})");
        let line = md[heading..]
            .lines()
            .find(|l| l.ends_with(&target))
            .unwrap_or_else(|| panic!("{name} is not linked"));
        assert!(
            line.starts_with("- ![") && !line.starts_with("- ![]"),
            "{line}"
        );
        linked += 1;
    }
    assert!(linked >= 5, "the figures are written and linked");
    // Without --plots there is nothing to link.
    let plain = run("plain.md", false);
    assert!(!plain.contains("## Figures"));
    let _ = std::fs::remove_dir_all(&dir);
}
