//! Golden reports: every demo design's text and JSON report, kept in `tests/golden/`.
//!
//! These are not checks against an outside source: they pin the figures so that a restructuring
//! cannot move a number silently. A change of a figure must be deliberate and explained in the
//! commit that makes it; refresh the files with `DYNODE_BLESS=1 cargo test golden`.
//! Text must match byte for byte; JSON numbers within 1e-9 relative (the last digits of a
//! floating-point sum may differ between compilers), everything else exactly.

use crate::common::{crate_path, demo_designs};
use dynode::{analysis, design, report};

fn bless() -> bool {
    std::env::var_os("DYNODE_BLESS").is_some()
}

/// First place where two JSON values differ, numbers compared within 1e-9 relative.
fn json_diff(a: &serde_json::Value, b: &serde_json::Value, path: &str) -> Option<String> {
    use serde_json::Value as V;
    match (a, b) {
        (V::Number(x), V::Number(y)) => {
            let (x, y) = (x.as_f64()?, y.as_f64()?);
            let ok = x == y || (x - y).abs() <= 1e-9 * x.abs().max(y.abs());
            (!ok).then(|| format!("{path}: {x} now, {y} in the golden file"))
        }
        (V::Object(x), V::Object(y)) => {
            for k in x.keys().chain(y.keys()) {
                match (x.get(k), y.get(k)) {
                    (Some(p), Some(q)) => {
                        if let Some(d) = json_diff(p, q, &format!("{path}.{k}")) {
                            return Some(d);
                        }
                    }
                    _ => return Some(format!("{path}.{k}: present on one side only")),
                }
            }
            None
        }
        (V::Array(x), V::Array(y)) => {
            if x.len() != y.len() {
                return Some(format!("{path}: {} items now, {} golden", x.len(), y.len()));
            }
            x.iter()
                .zip(y)
                .enumerate()
                .find_map(|(i, (p, q))| json_diff(p, q, &format!("{path}[{i}]")))
        }
        _ => (a != b).then(|| format!("{path}: {a} now, {b} in the golden file")),
    }
}

#[test]
fn every_demo_report_matches_its_golden_file() {
    let dir = crate_path("tests/golden");
    std::fs::create_dir_all(&dir).expect("golden dir");
    let mut failures = Vec::new();
    for path in demo_designs() {
        let stem = path.file_stem().unwrap().to_string_lossy().to_string();
        let text = std::fs::read_to_string(&path).expect("demo readable");
        let d = design::parse_str(&text, &format!("designs/{stem}.ron")).expect("demo parses");
        let a = analysis::analyse(&d).expect("demo analyses");
        let txt = report::render(&a, report::Format::Text).expect("renders");
        let json = report::render(&a, report::Format::Json).expect("no non-finite figure");
        let (txt_path, json_path) = (
            dir.join(format!("{stem}.txt")),
            dir.join(format!("{stem}.json")),
        );
        if bless() {
            std::fs::write(&txt_path, &txt).expect("write golden");
            std::fs::write(&json_path, &json).expect("write golden");
            continue;
        }
        let Ok(golden_txt) = std::fs::read_to_string(&txt_path) else {
            failures.push(format!("{stem}: no golden text (run with DYNODE_BLESS=1)"));
            continue;
        };
        if golden_txt != txt {
            let line = golden_txt
                .lines()
                .zip(txt.lines())
                .position(|(g, n)| g != n)
                .map_or(txt.lines().count().min(golden_txt.lines().count()), |i| i);
            failures.push(format!(
                "{stem}.txt differs from line {}: now {:?}, golden {:?}",
                line + 1,
                txt.lines().nth(line).unwrap_or(""),
                golden_txt.lines().nth(line).unwrap_or("")
            ));
        }
        let golden_json: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&json_path).unwrap_or_default())
                .unwrap_or(serde_json::Value::Null);
        let now: serde_json::Value = serde_json::from_str(&json).expect("JSON parses");
        if let Some(d) = json_diff(&now, &golden_json, &stem) {
            failures.push(d);
        }
    }
    assert!(
        failures.is_empty(),
        "reports moved (refresh with DYNODE_BLESS=1 only if the change is meant):\n{}",
        failures.join("\n")
    );
}
