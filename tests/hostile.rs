//! Hostile input as property tests, so CI exercises what the fuzz target explores at length
//! (fuzz/README.md): arbitrary bytes, and valid designs mutated byte by byte or
//! value by value, go through parse, validation, solve and every report format. Nothing may
//! panic; a design that is refused is refused with a message naming the file; a design that is
//! accepted reports finite figures only.

use dynode::{analysis, design, report};
use proptest::prelude::*;

use crate::finite::{json_unexpected_null, text_non_finite_except};
use crate::warnings::BASE;

/// The whole pipeline on `text`. Panics (the property's failure) on a panic inside, a message
/// that does not name the file, or a non-finite figure in any report.
fn pipeline(text: &str) {
    let d = match design::parse_str(text, "prop.ron") {
        Ok(d) => d,
        Err(e) => {
            let m = e.to_string();
            assert!(m.starts_with("prop.ron:"), "unlocated message: {m}");
            return;
        }
    };
    let a = match analysis::analyse(&d) {
        Ok(a) => a,
        Err(e) => {
            let m = e.to_string();
            assert!(m.starts_with("prop.ron: "), "unlocated message: {m}");
            return;
        }
    };
    for format in report::Format::ALL.iter() {
        let out = report::render(&a, *format).expect("no non-finite figure");
        if *format != report::Format::Json {
            let theirs = [
                d.name.as_str(),
                d.notes.as_deref().unwrap_or(""),
                d.source.as_str(),
            ];
            assert_eq!(
                text_non_finite_except(&out, &theirs),
                None,
                "{format:?} report"
            );
        }
    }
    assert_eq!(
        json_unexpected_null(&report::json::to_value(&a)),
        None,
        "JSON report"
    );
    let netlist = dynode::report::netlist::write(
        &d,
        &a.network.tube,
        &dynode::report::netlist::NetlistOptions {
            cathode_amps: a.op.cathode_amps,
            control_block: true,
        },
    );
    let theirs = [
        d.name.as_str(),
        d.notes.as_deref().unwrap_or(""),
        d.source.as_str(),
    ];
    assert_eq!(text_non_finite_except(&netlist, &theirs), None, "netlist");
}

/// One edit of a text: insert, delete or replace a few bytes at a place.
#[derive(Debug, Clone)]
enum Edit {
    Insert(usize, String),
    Delete(usize, usize),
    Replace(usize, String),
}

fn arb_edit() -> impl Strategy<Value = Edit> {
    // Pieces worth inserting: the language's own punctuation and words, odd numbers, odd text.
    let piece = prop_oneof![
        prop::sample::select(vec![
            "(",
            ")",
            "[",
            "]",
            ",",
            ":",
            "\"",
            "Some(",
            "None",
            "R(\"1M\")",
            "NaN",
            "inf",
            "-",
            "1e308",
            "1e-308",
            "0",
            "-0",
            "u",
            "k",
            "M",
            " V",
            " nF",
            "//",
            "/*",
            "\u{feff}",
            "\u{0}",
            "é",
            "stages: 20,",
            "gaps: [],",
        ])
        .prop_map(str::to_string),
        "[ -~]{1,6}",
    ];
    prop_oneof![
        (any::<usize>(), piece.clone()).prop_map(|(at, s)| Edit::Insert(at, s)),
        (any::<usize>(), 1usize..8).prop_map(|(at, n)| Edit::Delete(at, n)),
        (any::<usize>(), piece).prop_map(|(at, s)| Edit::Replace(at, s)),
    ]
}

fn apply(text: &str, edits: &[Edit]) -> String {
    let mut bytes = text.as_bytes().to_vec();
    for e in edits {
        let len = bytes.len().max(1);
        match e {
            Edit::Insert(at, s) => {
                let at = at % len;
                bytes.splice(at..at, s.bytes());
            }
            Edit::Delete(at, n) => {
                let at = at % len;
                let end = (at + n).min(bytes.len());
                bytes.drain(at.min(end)..end);
            }
            Edit::Replace(at, s) => {
                let at = at % len;
                let end = (at + s.len()).min(bytes.len());
                bytes.splice(at.min(end)..end, s.bytes());
            }
        }
    }
    // Edits may split a multi-byte character; the pipeline takes text, as `design::load` does
    // after its UTF-8 check.
    String::from_utf8_lossy(&bytes).into_owned()
}

/// Values a field might be given, good and bad, for value-level mutation.
fn arb_quantity() -> impl Strategy<Value = String> {
    prop_oneof![
        (
            -1e4f64..1e4,
            prop::sample::select(vec![
                "", " V", " kV", " nF", " pF", " uA", " mA", " ohm", "k", "M", "G", " %", " W"
            ])
        )
            .prop_map(|(x, u)| format!("\"{x}{u}\"")),
        (-30.0f64..30.0).prop_map(|e| format!("\"1e{e:.0}\"")),
        (-1e6f64..1e6).prop_map(|x| format!("{x}")),
        prop::sample::select(vec![
            "\"\"",
            "\"NaN\"",
            "\"-inf V\"",
            "NaN",
            "inf",
            "0",
            "\"0\"",
            "\"1e999 V\""
        ])
        .prop_map(str::to_string),
    ]
}

/// The quoted quantities of BASE, in order, as (start, end) byte ranges.
fn quoted_values(text: &str) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    let mut i = 0;
    while let Some(a) = text[i..].find("\"") {
        let a = i + a;
        let Some(b) = text[a + 1..].find('"') else {
            break;
        };
        let b = a + 1 + b + 1;
        out.push((a, b));
        i = b;
    }
    out
}

proptest! {
    // Lean counts: a few seconds in all on two cores (the fuzz target runs millions).
    #![proptest_config(ProptestConfig { cases: 200, failure_persistence: None, .. ProptestConfig::default() })]

    #[test]
    fn arbitrary_bytes_never_panic(bytes in prop::collection::vec(any::<u8>(), 0..400)) {
        pipeline(&String::from_utf8_lossy(&bytes));
    }

    #[test]
    fn byte_mutations_of_a_valid_design_never_panic(edits in prop::collection::vec(arb_edit(), 1..4)) {
        pipeline(&apply(BASE, &edits));
    }

    #[test]
    fn value_mutations_of_a_valid_design_are_refused_or_finite(
        picks in prop::collection::vec((any::<prop::sample::Index>(), arb_quantity()), 1..4),
        stages in 1usize..=20,
    ) {
        let spans = quoted_values(BASE);
        let mut chosen: Vec<(usize, usize, String)> = picks
            .iter()
            .map(|(ix, q)| { let (a, b) = spans[ix.index(spans.len())]; (a, b, q.clone()) })
            .collect();
        chosen.sort_by_key(|c| std::cmp::Reverse(c.0));
        chosen.dedup_by_key(|c| c.0);
        let mut text = BASE.to_string();
        for (a, b, q) in chosen {
            text.replace_range(a..b, &q);
        }
        // Also vary the stage count with a matching gap list and reference ratio, so the
        // solver meets every chain length.
        let gaps = vec!["R(\"470k\")"; stages + 1].join(", ");
        let ratio = vec!["1"; stages + 1].join(", ");
        let text = text
            .replacen("stages: 10,", &format!("stages: {stages},"), 1)
            .replacen("reference_ratio: Some([2, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1]),", &format!("reference_ratio: Some([{ratio}]),"), 1);
        let text = match (text.find("gaps: ["), text.find("],\n        decoupling")) {
            (Some(a), Some(b)) => format!("{}gaps: [{gaps}{}", &text[..a], &text[b..]),
            _ => text,
        };
        pipeline(&text);
    }
}

#[test]
fn markup_in_the_design_text_is_printed_not_run() {
    // A title or notes holding HTML must come out as text in the HTML and Markdown reports
    // (HTML 5 §13.1: `<` starts a tag; escaping it as `&lt;` keeps it text; Markdown viewers
    // pass raw HTML through, CommonMark §6.6).
    let text = BASE.replacen(
        "name: \"Warning base: 10-stage tube, cathode-negative (invented numbers)\",",
        "name: \"<script>alert(1)</script>\", notes: Some(\"<img src=x onerror=alert(2)>\"),",
        1,
    );
    let d = design::parse_str(&text, "markup.ron").expect("valid");
    let a = analysis::analyse(&d).expect("solves");
    for format in [report::Format::Html, report::Format::Markdown] {
        let out = report::render(&a, format).expect("no non-finite figure");
        assert!(
            !out.contains("<script>alert"),
            "{format:?} lets a script tag through"
        );
        assert!(
            !out.contains("<img src=x"),
            "{format:?} lets an img tag through"
        );
        assert!(
            out.contains("&lt;script&gt;alert(1)&lt;/script&gt;"),
            "{format:?} drops the title"
        );
    }
}
