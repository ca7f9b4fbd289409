//! What users look at and pass on: figures, HTML, Markdown, JSON schema, netlist, output hygiene.

use std::process::Command;

use crate::common::{crate_path, demo_designs, ngspice_available, ngspice_file, temp_dir};

fn dynode() -> Command {
    Command::new(env!("CARGO_BIN_EXE_dynode"))
}

/// How many figures the report of a demo has, from the library itself.
fn figure_count(design: &str) -> usize {
    let d = dynode::design::load(&crate_path(design)).unwrap();
    let a = dynode::analysis::analyse(&d).unwrap();
    dynode::report::figures::all(&a).len()
}

/// Decode a PNG and return (width, height, variance of the grey level).
fn png_stats(path: &std::path::Path) -> (u32, u32, f64) {
    let decoder = png::Decoder::new(std::fs::File::open(path).unwrap());
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut buf).unwrap();
    let bytes = &buf[..info.buffer_size()];
    let channels = info.color_type.samples();
    let greys: Vec<f64> = bytes
        .chunks(channels)
        .map(|p| p.iter().take(3).map(|&c| f64::from(c)).sum::<f64>() / 3.0)
        .collect();
    let mean = greys.iter().sum::<f64>() / greys.len() as f64;
    let var = greys.iter().map(|g| (g - mean).powi(2)).sum::<f64>() / greys.len() as f64;
    (info.width, info.height, var)
}

#[test]
fn every_demo_renders_every_figure_as_svg_and_png() {
    // PNG specification (W3C/ISO 15948): the file must decode; a blank image has no variance.
    for design in demo_designs() {
        let dir = temp_dir(&format!(
            "plots-{}",
            design.file_stem().unwrap().to_string_lossy()
        ));
        let out = dynode()
            .args(["report", "-q", "--plots"])
            .arg(&dir)
            .arg(&design)
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let mut stems: Vec<String> = std::fs::read_dir(&dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
            .collect();
        stems.sort();
        let d = dynode::design::load(&design).unwrap();
        let a = dynode::analysis::analyse(&d).unwrap();
        let figs = dynode::report::figures::all(&a);
        let names: Vec<String> = figs.iter().map(|f| f.name.clone()).collect();
        for core in ["gaps", "gain-curve", "linearity"] {
            assert!(names.iter().any(|n| n == core), "{core} is always drawn");
        }
        for name in &names {
            let svg = std::fs::read_to_string(dir.join(format!("{name}.svg"))).unwrap();
            assert!(
                svg.contains("<svg") && svg.contains("</svg>"),
                "{name}.svg is whole"
            );
            assert!(svg.contains("<text"), "{name}.svg has text");
            let (w, h, var) = png_stats(&dir.join(format!("{name}.png")));
            let fig = figs.iter().find(|f| &f.name == name).unwrap();
            assert_eq!((w, h), dynode::report::plot::size(fig), "{name}.png size");
            assert!(var > 200.0, "{name}.png looks blank (grey variance {var})");
        }
        assert!(
            !stems.iter().any(|s| s.contains(".tmp")),
            "no temporary files left: {stems:?}"
        );
    }
}

#[test]
fn plots_refuse_to_overwrite_without_force() {
    let dir = temp_dir("plots-force");
    let design = crate_path("designs/rooftop-paddle.ron");
    let run = |force: bool| {
        let mut c = dynode();
        c.args(["report", "-q", "--plots"]).arg(&dir).arg(&design);
        if force {
            c.arg("--force");
        }
        c.output().unwrap()
    };
    assert!(run(false).status.success());
    let again = run(false);
    assert_eq!(again.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&again.stderr).contains("--force"));
    assert!(run(true).status.success());
}

#[test]
fn markdown_and_html_carry_the_cautions_first_and_last() {
    for design in demo_designs() {
        for (format, first) in [
            ("markdown", "HIGH-VOLTAGE CAUTION"),
            ("html", "High-voltage caution"),
        ] {
            let out = dynode()
                .args(["report", "--format", format])
                .arg(&design)
                .output()
                .unwrap();
            assert!(out.status.success());
            let text = String::from_utf8(out.stdout).unwrap();
            let caution = text.find(first).expect("a caution block");
            let table = text.find("K–D1").expect("a gap table");
            assert!(
                caution < table,
                "{format}: the caution comes before the results"
            );
            let last = text.rfind("HIGH VOLTAGE").unwrap();
            assert!(
                last > text.rfind("Warnings").unwrap(),
                "{format}: a caution comes last"
            );
            assert!(text.contains("K–D1"), "{format}: gap table");
        }
    }
}

#[test]
fn html_is_self_contained() {
    let out = dynode()
        .args(["report", "--format", "html"])
        .arg(crate_path("designs/rooftop-paddle.ron"))
        .output()
        .unwrap();
    let html = String::from_utf8(out.stdout).unwrap();
    assert!(!html.contains("<script"), "no scripts needed to read it");
    for src in ["src=\"http", "href=\"http", "@import", "<link", "<img"] {
        assert!(!html.contains(src), "no external resource: {src}");
    }
    let expected = figure_count("designs/rooftop-paddle.ron");
    assert!(expected >= 3);
    assert_eq!(
        html.matches("<svg").count(),
        expected,
        "every figure inline"
    );
}

/// Every key in the first column of the JSON schema table in docs/json.md.
fn documented_keys() -> Vec<String> {
    let doc = std::fs::read_to_string(crate_path("docs/json.md")).unwrap();
    let start = doc
        .find("## JSON schema")
        .expect("docs/json.md has a JSON schema section");
    let section = &doc[start..];
    let end = section[3..].find("\n## ").map_or(section.len(), |i| i + 3);
    let mut keys = Vec::new();
    for line in section[..end].lines().filter(|l| l.starts_with("| `")) {
        for cell in line.split('|').skip(1).take(2) {
            let mut rest = cell;
            while let Some(i) = rest.find('`') {
                let after = &rest[i + 1..];
                let Some(j) = after.find('`') else { break };
                let key = &after[..j];
                if key.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
                    keys.push(key.to_string());
                }
                rest = &after[j + 1..];
            }
        }
    }
    keys.sort();
    keys.dedup();
    keys
}

fn collect_keys(v: &serde_json::Value, out: &mut std::collections::BTreeSet<String>) {
    match v {
        serde_json::Value::Object(o) => {
            for (k, x) in o {
                out.insert(k.clone());
                collect_keys(x, out);
            }
        }
        serde_json::Value::Array(a) => a.iter().for_each(|x| collect_keys(x, out)),
        _ => {}
    }
}

#[test]
fn every_documented_json_key_is_present_for_every_demo() {
    let keys = documented_keys();
    assert!(
        keys.len() > 30,
        "the schema table lists the keys ({})",
        keys.len()
    );
    let mut demos_with_warnings = 0;
    for design in demo_designs() {
        let out = dynode()
            .args(["report", "--format", "json"])
            .arg(&design)
            .output()
            .unwrap();
        assert!(out.status.success());
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        assert_eq!(v["schema_version"], dynode::report::json::SCHEMA_VERSION);
        let mut present = std::collections::BTreeSet::new();
        collect_keys(&v, &mut present);
        // A warning's keys exist only where there is a warning; they are checked on each one.
        let warning_keys = ["code", "message"];
        for k in keys.iter().filter(|k| !warning_keys.contains(&k.as_str())) {
            assert!(
                present.contains(k),
                "{}: documented key `{k}` is missing",
                design.display()
            );
        }
        let warnings = v["warnings"].as_array().expect("warnings is an array");
        for w in warnings {
            for k in warning_keys {
                assert!(
                    w[k].is_string(),
                    "{}: warning lacks `{k}`",
                    design.display()
                );
            }
        }
        demos_with_warnings += usize::from(!warnings.is_empty());
        crate::common::assert_all_numbers_finite(&v, "$");
    }
    assert!(
        demos_with_warnings > 0,
        "some demo shows the warnings' keys"
    );
}

#[test]
fn netlist_command_runs_in_ngspice_without_warnings() {
    if !ngspice_available("netlist_command") {
        return;
    }
    for design in demo_designs() {
        let dir = temp_dir(&format!(
            "netlist-{}",
            design.file_stem().unwrap().to_string_lossy()
        ));
        let cir = dir.join("base.cir");
        let out = dynode()
            .args(["netlist", "-q", "-o"])
            .arg(&cir)
            .arg(&design)
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let (stdout, stderr) = ngspice_file(&cir);
        let all = format!("{stdout}{stderr}").to_lowercase();
        assert!(!all.contains("error") && !all.contains("warning"), "{all}");
        assert!(all.contains("v(p"), "prints the anode potential");
    }
}

#[test]
fn output_refuses_the_input_and_existing_files() {
    let dir = temp_dir("hygiene");
    let design = dir.join("d.ron");
    std::fs::copy(crate_path("designs/rooftop-paddle.ron"), &design).unwrap();
    let before = std::fs::read(&design).unwrap();
    // Over the input, even with --force.
    let out = dynode()
        .args(["report", "--force", "-o"])
        .arg(&design)
        .arg(&design)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(
        std::fs::read(&design).unwrap(),
        before,
        "the input is untouched"
    );
    // Over an existing file without --force.
    let target = dir.join("r.txt");
    std::fs::write(&target, "keep me").unwrap();
    let out = dynode()
        .args(["report", "-o"])
        .arg(&target)
        .arg(&design)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(std::fs::read_to_string(&target).unwrap(), "keep me");
    // With --force it is replaced, and stdout stays empty (data goes to the file).
    let out = dynode()
        .args(["report", "--force", "-q", "-o"])
        .arg(&target)
        .arg(&design)
        .output()
        .unwrap();
    assert!(out.status.success());
    assert!(out.stdout.is_empty() && out.stderr.is_empty());
    assert!(
        std::fs::read_to_string(&target)
            .unwrap()
            .contains("HIGH-VOLTAGE CAUTION")
    );
}

#[test]
fn help_shows_an_example_and_completions_generate() {
    for args in [
        vec!["--help"],
        vec!["report", "--help"],
        vec!["netlist", "--help"],
        vec!["check", "--help"],
    ] {
        let out = dynode().args(&args).output().unwrap();
        assert!(out.status.success());
        let text = String::from_utf8(out.stdout).unwrap();
        assert!(text.contains("Example"), "{args:?} help shows an example");
    }
    let out = dynode().args(["completions", "bash"]).output().unwrap();
    assert!(out.status.success() && String::from_utf8_lossy(&out.stdout).contains("dynode"));
    // A usage error is exit code 2.
    let out = dynode().args(["report"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
}

/// Whether a headless Chromium is available (Debian package `chromium`).
fn chromium() -> Option<&'static str> {
    let found = ["chromium", "chromium-browser"].into_iter().find(|c| {
        Command::new(c)
            .arg("--version")
            .output()
            .is_ok_and(|o| o.status.success())
    });
    if found.is_none() {
        if std::env::var_os("CI").is_some() {
            panic!("headless Chromium is required under CI (apt-get install -y chromium)");
        }
        eprintln!("html_in_chromium: SKIPPED, chromium not found");
    }
    found
}

#[test]
fn html_report_renders_in_headless_chromium() {
    let Some(browser) = chromium() else { return };
    let dir = temp_dir("chromium");
    let report = dir.join("report.html");
    let out = dynode()
        .args(["report", "-q", "--format", "html", "-o"])
        .arg(&report)
        .arg(crate_path("designs/liquid-cell-tapered.ron"))
        .output()
        .unwrap();
    assert!(out.status.success());
    // The report itself has no scripts; the test adds one to a copy, to measure the figures
    // as the browser laid them out.
    let html = std::fs::read_to_string(&report).unwrap();
    let probe = html.replace(
        "</body>",
        "<script>document.body.setAttribute('data-probe', JSON.stringify(\
         Array.from(document.querySelectorAll('figure svg')).map(s => { const r = s.getBoundingClientRect(); \
         return [Math.round(r.width), Math.round(r.height)]; })));</script></body>",
    );
    let probe_path = dir.join("probe.html");
    std::fs::write(&probe_path, probe).unwrap();
    let profile = dir.join("profile");
    let run = Command::new(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--window-size=1200,900",
        ])
        .arg(format!("--user-data-dir={}", profile.display()))
        .arg("--dump-dom")
        .arg(format!("file://{}", probe_path.display()))
        .output()
        .unwrap();
    let dom = String::from_utf8_lossy(&run.stdout);
    assert!(
        dom.contains("High-voltage caution"),
        "the caution is in the rendered page"
    );
    assert!(
        dom.contains("K–D1") && dom.contains("D12–GND"),
        "the gap table is in the page"
    );
    let start = dom.find("data-probe=\"").expect("the probe ran") + "data-probe=\"".len();
    let end = start + dom[start..].find('"').unwrap();
    let sizes: Vec<(u32, u32)> =
        serde_json::from_str(&dom[start..end].replace("&quot;", "\"")).unwrap();
    assert_eq!(
        sizes.len(),
        figure_count("designs/liquid-cell-tapered.ron"),
        "every figure laid out"
    );
    for (w, h) in sizes {
        assert!(w > 300 && h > 150, "a figure has size {w}×{h}");
    }
}

#[test]
fn cathode_catalogue_lists_every_builtin_with_provenance() {
    let out = dynode().arg("cathodes").output().unwrap();
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    let n = dynode::model::cathode::builtin_cathodes().len();
    assert!(n >= 10, "ten built-in cathode classes ({n})");
    for c in dynode::model::cathode::builtin_cathodes() {
        assert!(text.contains(&c.key), "{} listed", c.key);
    }
    // Provenance is stated for every curve (they are typical curves from memory, not data).
    assert!(text.matches("from memory").count() >= n);
    assert!(
        text.contains(" nm") && text.contains(" %"),
        "peak and QE with units"
    );
}

#[test]
fn light_match_compares_six_or_more_lines_against_every_cathode() {
    let out = dynode()
        .arg("light-match")
        .arg(crate_path("designs/laser-timing.ron"))
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).unwrap();
    let lines: Vec<&str> = text
        .lines()
        .filter(|l| l.contains(" nm ") && !l.starts_with(' '))
        .collect();
    assert!(
        lines.len() >= 6,
        "at least six wavelengths: {}",
        lines.len()
    );
    // He-Ne says which medium its wavelength is given in (CIPM 2007: 632.9908 nm in vacuum).
    assert!(text.contains("632.8 nm") && text.contains("in air"));
    let cells = text.lines().filter(|l| l.contains("% of best")).count();
    assert!(cells >= lines.len() * dynode::model::cathode::builtin_cathodes().len());
    assert!(text.contains("HIGH VOLTAGE"), "the caution is printed");
    // A custom list and a bad one.
    let out = dynode()
        .args(["light-match", "--lines", "405,520,650,780,850,905"])
        .arg(crate_path("designs/laser-timing.ron"))
        .output()
        .unwrap();
    assert!(out.status.success());
    let out = dynode()
        .args(["light-match", "--lines", "-5"])
        .arg(crate_path("designs/laser-timing.ron"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn spread_and_sweep_write_html_and_markdown_tables_with_the_cautions() {
    // The document model's renderers (report::doc): real tables with units in the headers,
    // no preformatted text, the cautions first and last, the figure files linked with --plots.
    let dir = temp_dir("doc-formats");
    let design = crate_path("designs/rooftop-paddle.ron");
    let runs: [(&str, &[&str], &str); 2] = [
        (
            "sweep",
            &["--vary", "supply.volts=900V..1300V:3"],
            "| volts (V) | supply (V) |",
        ),
        (
            "spread",
            &["--samples", "300", "--linearity-samples", "0"],
            "| # | gap | 1 % (V) |",
        ),
    ];
    for (command, extra, md_head) in runs {
        for format in ["html", "md"] {
            let out_file = dir.join(format!("{command}.{format}"));
            let figs = dir.join(format!("{command}-{format}-figs"));
            let o = dynode()
                .arg(command)
                .arg(&design)
                .args(extra)
                .args(["--format", format, "-q", "-o"])
                .arg(&out_file)
                .arg("--plots")
                .arg(&figs)
                .output()
                .unwrap();
            assert!(o.status.success(), "{command} {format}: {:?}", o);
            let text = std::fs::read_to_string(&out_file).unwrap();
            let first = text
                .find(if format == "md" {
                    "HIGH-VOLTAGE CAUTION"
                } else {
                    "caution-first"
                })
                .expect("a caution block");
            let table = text
                .find(if format == "md" { "|---|" } else { "<table>" })
                .expect("a table");
            assert!(
                first < table,
                "{command} {format}: caution before the results"
            );
            let last = text.rfind("HIGH VOLTAGE").unwrap();
            assert!(
                last > text.rfind("|").unwrap_or(0),
                "{command} {format}: caution last"
            );
            assert!(
                !text.contains("<pre>"),
                "{command} {format}: no preformatted dump"
            );
            if format == "md" {
                assert!(
                    text.contains(md_head),
                    "{command}: header with units\n{text}"
                );
            } else {
                assert!(text.contains("(V)</th>"), "{command}: header with units");
            }
            // Every figure linked is a file that was written, found from the report's folder.
            let mut linked = 0;
            for name in std::fs::read_dir(&figs).unwrap() {
                let name = name.unwrap().file_name().to_string_lossy().to_string();
                if name.ends_with(".svg") {
                    let rel = format!("{command}-{format}-figs/{name}");
                    assert!(text.contains(&rel), "{command} {format} links {rel}");
                    linked += 1;
                }
            }
            assert!(linked > 0, "{command} {format}: some figure linked");
        }
    }
}
