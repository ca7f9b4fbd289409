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

/// Keys the JSON schema allows to be null (a limit not reached, a rating not given).
pub const NULLABLE_KEYS: &[&str] = &[
    "plus_1pct_amps",
    "minus_1pct_amps",
    "plus_5pct_amps",
    "minus_5pct_amps",
    "peak_over_deviation",
    "peak_over_amps",
    "stopped",
    "fit_rms_ln_gain",
    "power_rating_watts",
    "rated_volts",
    "delta",
    "rating_volts",
    "bleed_seconds",
    "shield_touch_amps",
    // supply_quality: null when the design's supply.quality block does not give the figure
    "ripple_volts",
    "ripple_gain",
    "drift",
    "drift_gain",
    "setting_accuracy",
    "setting_gain",
    "meets",
    // train (DEVELOPERS.md, "Train JSON")
    "train",
    "recovery_s",
    "average_anode_amps",
    "pct1_amps",
    "pct5_amps",
    "pct1_sign",
    "pct5_sign",
    "train_pulse_deviation",
    "sizing",
    "taper",
    "pulse",
    // signal budget: the same list as tests/finite.rs
    "photoelectrons_per_pulse",
    "pulse",
    "readable",
    "signal",
    "rise_10_90_s",
    "fall_90_10_s",
    "fwhm_s",
    "displayed_rise_s",
    "current_rise_s",
    "instrument_rise_s",
    "instrument_model",
    "echoes",
    "timing",
    "noise_jitter_s",
    "total_jitter_s",
    "walk_s",
    "average_anode_amps",
    "background",
    "photodiode",
    "load_window_ohms",
    "load_sweep_note",
    "snr",
    "verdict",
    "meets_rise_need",
    "first_echo",
];

/// Walk a JSON value and fail on any number that is not finite (serde_json writes NaN as null,
/// so also fail on nulls in places where a number was computed: those are listed by key).
pub fn assert_all_numbers_finite(v: &serde_json::Value, path: &str) {
    match v {
        serde_json::Value::Number(n) => {
            let x = n.as_f64().expect("number");
            assert!(x.is_finite(), "{path} = {x}");
        }
        serde_json::Value::Array(a) => {
            for (i, x) in a.iter().enumerate() {
                assert_all_numbers_finite(x, &format!("{path}[{i}]"));
            }
        }
        serde_json::Value::Object(o) => {
            for (k, x) in o {
                // serde_json writes a NaN as null: a null is allowed only where the schema says
                // a figure may not exist.
                assert!(
                    !x.is_null() || NULLABLE_KEYS.contains(&k.as_str()),
                    "{path}.{k} is null (a NaN or a missing figure)"
                );
                assert_all_numbers_finite(x, &format!("{path}.{k}"));
            }
        }
        _ => {}
    }
}
