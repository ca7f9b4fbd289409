//! Shared helpers for the integration tests.
#![allow(dead_code)]

use std::path::{Path, PathBuf};

/// Path of a file in the crate.
pub fn crate_path(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

/// The demo designs shipped in designs/.
pub fn demo_designs() -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(crate_path("designs"))
        .expect("designs/ exists")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "ron"))
        .collect();
    v.sort();
    v
}

/// A fresh temporary directory for one test.
pub fn temp_dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("dynode-test-{}-{}", name, std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).expect("temp dir");
    d
}

/// Whether ngspice is on PATH. Under CI its absence is a failure, elsewhere a printed skip.
pub fn ngspice_available(test: &str) -> bool {
    let ok = std::process::Command::new("ngspice")
        .arg("--version")
        .output()
        .is_ok_and(|o| o.status.success());
    if !ok {
        if std::env::var_os("CI").is_some() {
            panic!("{test}: ngspice is required under CI (apt-get install -y ngspice)");
        }
        eprintln!(
            "{test}: SKIPPED, ngspice not found (install it from the distribution's packages)"
        );
    }
    ok
}

/// Relative difference.
pub fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(1e-300)
}

/// Fail on any number that is not finite or any null outside the documented nullable paths
/// (serde_json writes a NaN as null); the list of nullable paths lives in `tests/finite.rs`.
pub fn assert_all_numbers_finite(v: &serde_json::Value, path: &str) {
    if let Some(bad) = crate::finite::json_unexpected_null(v) {
        panic!("{path}: {bad}");
    }
}

/// Run ngspice in batch mode on the netlist file `path` and return what it printed on standard
/// output and standard error; fails the test when ngspice does not run or exits with a failure.
pub fn ngspice_file(path: &std::path::Path) -> (String, String) {
    let out = std::process::Command::new("ngspice")
        .arg("-b")
        .arg(path)
        .output()
        .expect("ngspice runs");
    let stdout = String::from_utf8_lossy(&out.stdout).into_owned();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(out.status.success(), "ngspice failed:\n{stdout}\n{stderr}");
    (stdout, stderr)
}

/// Run ngspice in batch mode on the netlist `text` (written as `dir/name.cir`) and return what
/// it printed; fails the test when ngspice fails or reports an error.
pub fn ngspice_batch(text: &str, dir: &std::path::Path, name: &str) -> String {
    let path = dir.join(format!("{name}.cir"));
    std::fs::write(&path, text).unwrap();
    let (stdout, stderr) = ngspice_file(&path);
    assert!(
        !stderr.to_lowercase().contains("error"),
        "ngspice reported an error:\n{stderr}"
    );
    stdout
}

/// The first two columns of a file ngspice wrote with `set wr_singlescale` and `wrdata`: time
/// and the one vector asked for.
pub fn wrdata_columns(path: &std::path::Path) -> (Vec<f64>, Vec<f64>) {
    let text = std::fs::read_to_string(path).expect("ngspice wrote its data file");
    let mut t = Vec::new();
    let mut v = Vec::new();
    for line in text.lines() {
        let cols: Vec<f64> = line
            .split_whitespace()
            .filter_map(|x| x.parse().ok())
            .collect();
        if cols.len() >= 2 {
            t.push(cols[0]);
            v.push(cols[1]);
        }
    }
    (t, v)
}

/// The value of a `meas` result `name = value` in ngspice's output.
pub fn meas(stdout: &str, name: &str) -> f64 {
    stdout
        .lines()
        .find_map(|l| {
            let mut it = l.split_whitespace();
            (it.next() == Some(name) && it.next() == Some("="))
                .then(|| it.next().and_then(|v| v.parse::<f64>().ok()))
                .flatten()
        })
        .unwrap_or_else(|| panic!("ngspice printed no {name}:\n{stdout}"))
}
