//! Output that cannot be turned against the user: planted links, device nodes, hostile file
//! names, a full disk and a closed pipe (issue #12). Each test states the property it checks.

use std::path::Path;
use std::process::{Command, Output, Stdio};

use crate::common::{crate_path, temp_dir};

const BIN: &str = env!("CARGO_BIN_EXE_dynode");

fn run(args: &[&str]) -> Output {
    Command::new(BIN).args(args).output().expect("run dynode")
}

fn copy_demo(dir: &Path, name: &str) -> String {
    let design = dir.join(name);
    std::fs::copy(crate_path("designs/laser-burst-counter.ron"), &design).expect("copy demo");
    design.to_str().expect("utf-8").to_string()
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).to_string()
}

#[cfg(unix)]
#[test]
fn a_planted_link_at_the_output_is_refused_even_with_force() {
    // Property: a symbolic link at the output path is never written through, with or without
    // --force, and a dangling one at a figure name is not replaced.
    let dir = temp_dir("planted-link");
    let design = copy_demo(&dir, "d.ron");
    let victim = dir.join("victim.txt");
    std::fs::write(&victim, "keep me").expect("victim");
    let link = dir.join("out.txt");
    std::os::unix::fs::symlink(&victim, &link).expect("symlink");
    for force in [false, true] {
        let mut args = vec!["report", &design, "-o", link.to_str().expect("utf-8")];
        if force {
            args.push("--force");
        }
        let o = run(&args);
        assert_eq!(o.status.code(), Some(2), "force {force}: {}", stderr(&o));
        assert!(stderr(&o).contains("symbolic link"), "{}", stderr(&o));
        assert_eq!(std::fs::read_to_string(&victim).expect("read"), "keep me");
        assert!(std::fs::symlink_metadata(&link).expect("link").is_symlink());
    }
    let figs = dir.join("figs");
    std::fs::create_dir(&figs).expect("figs");
    std::os::unix::fs::symlink(dir.join("nowhere"), figs.join("gaps.svg")).expect("dangling");
    for force in [false, true] {
        let mut args = vec!["report", &design, "--plots", figs.to_str().expect("utf-8")];
        if force {
            args.push("--force");
        }
        let o = run(&args);
        assert_eq!(o.status.code(), Some(2), "force {force}: {}", stderr(&o));
        assert!(
            !dir.join("nowhere").exists(),
            "a dangling link was followed"
        );
        assert!(o.stdout.is_empty(), "a refusal writes nothing");
    }
}

#[cfg(unix)]
#[test]
fn the_temporary_file_name_is_not_predictable() {
    // The former temporary name was `.NAME.PID.tmp` beside the target: plant a link there
    // (this process's id, as the write runs in-process) and check that the write neither
    // follows it nor leaves anything but the target and the planted link.
    let dir = temp_dir("tmp-name");
    let victim = dir.join("victim.txt");
    std::fs::write(&victim, "keep me").expect("victim");
    let planted = dir.join(format!(".r.txt.{}.tmp", std::process::id()));
    std::os::unix::fs::symlink(&victim, &planted).expect("symlink");
    let target = dir.join("r.txt");
    dynode::cli::output::write_atomic(&target, b"report", &[], false).expect("write");
    assert_eq!(std::fs::read_to_string(&victim).expect("read"), "keep me");
    assert_eq!(std::fs::read_to_string(&target).expect("read"), "report");
    let mut names: Vec<String> = std::fs::read_dir(&dir)
        .expect("dir")
        .map(|e| e.expect("entry").file_name().to_string_lossy().to_string())
        .collect();
    names.sort();
    let mut expected = vec![
        planted
            .file_name()
            .expect("name")
            .to_string_lossy()
            .to_string(),
        "r.txt".to_string(),
        "victim.txt".to_string(),
    ];
    expected.sort();
    assert_eq!(names, expected);
    // A second write without --force meets the file and refuses; with it, replaces.
    assert!(dynode::cli::output::write_atomic(&target, b"again", &[], false).is_err());
    dynode::cli::output::write_atomic(&target, b"again", &[], true).expect("force");
    assert_eq!(std::fs::read_to_string(&target).expect("read"), "again");
}

#[cfg(unix)]
#[test]
fn a_device_node_or_directory_is_never_an_output() {
    // Property: -o accepts only a regular file or nothing, even with --force.
    let dir = temp_dir("device");
    let design = copy_demo(&dir, "d.ron");
    for target in ["/dev/null", "/dev/full", dir.to_str().expect("utf-8")] {
        for cmd in ["report", "netlist"] {
            let o = run(&[cmd, &design, "-o", target, "--force"]);
            assert_eq!(
                o.status.code(),
                Some(2),
                "{cmd} -o {target}: {}",
                stderr(&o)
            );
            assert!(stderr(&o).contains("not a regular file"), "{}", stderr(&o));
        }
    }
}

#[cfg(unix)]
#[test]
fn a_hostile_file_name_stays_a_comment_and_literal_text() {
    // A design file name with line breaks, a backtick and markup: the netlist keeps it on one
    // comment line (ngspice runs `.control … shell` lines), Markdown shows it as text.
    let dir = temp_dir("hostile-name");
    let name = "x`\n.control\nshell touch PWNED\n.endc\n# injected <b>bold\r.ron";
    let design = copy_demo(&dir, name);
    let o = run(&["netlist", &design]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let net = String::from_utf8(o.stdout).expect("utf-8");
    for line in net.lines() {
        if line.contains("PWNED") || line.contains("injected") {
            assert!(
                line.starts_with('*'),
                "user text escaped its comment: {line:?}"
            );
        }
        assert!(!line.contains('\r'), "carriage return in {line:?}");
    }
    let controls = net
        .lines()
        .filter(|l| l.trim_start().starts_with(".control"));
    assert_eq!(controls.count(), 1, "one control block, the tool's own");
    let o = run(&["report", &design, "--format", "markdown"]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let md = String::from_utf8(o.stdout).expect("utf-8");
    assert!(
        !md.lines().any(|l| l.starts_with("# injected")),
        "a heading was injected"
    );
    assert!(!md.contains("<b>"), "raw HTML got through");
    assert!(
        !md.lines().any(|l| l.starts_with("shell")),
        "a line was injected"
    );
    let o = run(&["report", &design, "--format", "html"]);
    let html = String::from_utf8(o.stdout).expect("utf-8");
    assert!(!html.contains("<b>bold"), "raw HTML got through");
}

/// Every command that prints, with arguments.
fn printing_commands(design: &str) -> Vec<Vec<String>> {
    let s = |v: &[&str]| v.iter().map(|x| x.to_string()).collect::<Vec<_>>();
    let mut v = Vec::new();
    for f in ["text", "json", "html", "markdown"] {
        v.push(s(&["report", design, "--format", f]));
    }
    v.push(s(&["check", design]));
    v.push(s(&["cathodes"]));
    v.push(s(&["light-match", design]));
    v.push(s(&["completions", "bash"]));
    v.push(s(&["netlist", design]));
    v.push(s(&["train", design, "--pulses", "3", "--train-only"]));
    v.push(s(&["spread", design, "--samples", "200"]));
    v.push(s(&[
        "sweep",
        design,
        "--vary",
        "supply.volts=1000V..1200V:3",
    ]));
    v
}

#[cfg(unix)]
#[test]
fn a_full_disk_is_an_error_with_a_message() {
    // Property: standard output on /dev/full (ENOSPC) gives exit 2 and one line naming the
    // problem, never exit 0 with the output lost, never a panic.
    let dir = temp_dir("dev-full");
    let design = copy_demo(&dir, "d.ron");
    for args in printing_commands(&design) {
        let full = std::fs::OpenOptions::new()
            .write(true)
            .open("/dev/full")
            .expect("/dev/full");
        let o = Command::new(BIN)
            .args(&args)
            .stdout(full)
            .output()
            .expect("run");
        let err = stderr(&o);
        assert_eq!(o.status.code(), Some(2), "{args:?}: {err}");
        assert!(err.contains("cannot write"), "{args:?}: {err}");
        assert!(!err.contains("panicked"), "{args:?}: {err}");
        assert_eq!(
            err.lines().filter(|l| l.contains("error")).count(),
            1,
            "{err}"
        );
    }
}

#[cfg(unix)]
#[test]
fn a_closed_pipe_ends_quietly_without_a_panic() {
    // Property: a reader that has gone (`| head -c10`) ends the run without a panic (exit
    // 101) and without exit 0 claiming the output was delivered when it was not.
    let dir = temp_dir("closed-pipe");
    let design = copy_demo(&dir, "d.ron");
    for args in printing_commands(&design) {
        // A pipe whose reader has gone before the run starts, so that every write meets it.
        let (reader, writer) = std::io::pipe().expect("pipe");
        drop(reader);
        let o = Command::new(BIN)
            .args(&args)
            .stdout(writer)
            .stderr(Stdio::piped())
            .output()
            .expect("run");
        let err = stderr(&o);
        assert_eq!(o.status.code(), Some(2), "{args:?}: {err}");
        assert!(!err.contains("panicked"), "{args:?}: {err}");
    }
}

#[cfg(unix)]
#[test]
fn terminal_escape_sequences_never_reach_the_reader() {
    // Property: terminal control sequences (ESC [2J clears the screen, ESC ]0; retitles the
    // window, a carriage return overwrites a line; the ECMA-48 control functions) never reach
    // whoever reads the output. In a design's name they are refused at the field; in the file
    // name they come out with every control character other than a line break or a tab
    // replaced, on standard output, in a written file and in messages.
    let controls = |bytes: &[u8]| {
        String::from_utf8_lossy(bytes)
            .chars()
            .filter(|c| c.is_control() && *c != '\n' && *c != '\t')
            .count()
    };
    let dir = temp_dir("terminal-escapes");
    let text = std::fs::read_to_string(crate_path("designs/rooftop-paddle.ron")).expect("demo");
    let hostile = text.replacen(
        "name: \"Rooftop cosmic-ray paddle (demo, invented numbers)\"",
        "name: \"paddle \\u{1b}[2J\\u{1b}]0;owned\\u{7} line\\rover \\u{9b}31m\"",
        1,
    );
    assert!(hostile.contains("owned"), "the demo's name line moved");
    let named = dir.join("named.ron");
    std::fs::write(&named, hostile).expect("write design");
    let o = run(&["check", named.to_str().expect("utf-8")]);
    assert_eq!(
        o.status.code(),
        Some(2),
        "a control character in the name is refused"
    );
    assert!(stderr(&o).contains("name"), "{}", stderr(&o));
    assert_eq!(
        controls(&o.stderr),
        0,
        "the refusal quotes no control character"
    );

    let design = dir.join("esc\u{1b}[2J\u{1b}]0;owned\u{7}\r.ron");
    std::fs::write(&design, &text).expect("write design");
    let design = design.to_str().expect("utf-8");
    for format in ["text", "markdown", "html", "json"] {
        let o = run(&["report", design, "--format", format]);
        assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
        assert_eq!(controls(&o.stdout), 0, "{format} on standard output");
        assert!(
            String::from_utf8_lossy(&o.stdout).contains("owned"),
            "the file name is still shown"
        );
    }
    let out = dir.join("r.txt");
    let o = run(&["report", design, "-o", out.to_str().expect("utf-8")]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    assert_eq!(
        controls(&std::fs::read(&out).expect("report")),
        0,
        "written file"
    );
    assert_eq!(controls(&o.stderr), 0, "the 'wrote' message");
    let o = run(&["check", &format!("{design}.missing")]);
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(controls(&o.stderr), 0, "an error message naming the file");
}
