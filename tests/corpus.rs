//! A seeded corpus of hostile designs and option sets (issue #12), run through every command
//! and format by the real binary as a child process.
//!
//! Property, for each of the `CASES` runs: exit code 0–3, no panic, no NaN or infinity in what
//! is printed or written (JSON through `finite::json_unexpected_null`, every other format
//! through `finite::text_non_finite_except`), at most `CPU_LIMIT` of processor time and
//! `RSS_LIMIT` of peak resident memory (the child's own figures from wait4(2), so the test's
//! other threads do not count), and no run left hanging (`WALL_LIMIT`, then killed and failed).
//!
//! Cases are made by a SplitMix64 generator (Steele, Lea and Flood 2014; the generator the
//! train patterns use) from a fixed seed: each takes a demo design (or the demo requirements),
//! replaces some of its quantities by hostile values (range edges, overflow, underflow, zeros,
//! odd spellings, invisible characters) and picks a command, a format and options.

use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use crate::common::{crate_path, demo_designs, temp_dir};
use crate::finite;

const BIN: &str = env!("CARGO_BIN_EXE_dynode");
/// Number of runs (the issue asks for at least 300).
const CASES: u64 = 320;
const SEED: u64 = 0x1512_2026;
/// Bounds per run: processor time (user + system) and peak resident memory, as the issue
/// asks ("under 10 s and 1 GB each"); the wall-clock limit only catches a hang on a loaded
/// machine.
const CPU_LIMIT: Duration = Duration::from_secs(10);
const RSS_LIMIT_KB: i64 = 1024 * 1024;
const WALL_LIMIT: Duration = Duration::from_secs(60);

struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n as u64) as usize
    }
    fn pick<'a>(&mut self, v: &[&'a str]) -> &'a str {
        v[self.below(v.len())]
    }
    fn chance(&mut self, one_in: usize) -> bool {
        self.below(one_in) == 0
    }
}

/// Hostile replacement numbers: range edges, overflow, underflow, zero, negative zero.
const NUMBERS: &[&str] = &[
    "0",
    "-0",
    "1",
    "5e-324",
    "1e-300",
    "1e-15",
    "1e-9",
    "0.999",
    "1.0000001",
    "10",
    "1e10",
    "1.1e10",
    "1e155",
    "1e300",
    "1.7e308",
    "-1e300",
    "2.5",
    "7",
    "1e6",
];
/// Hostile unit spellings and prefixes (the unit is appended to a number from NUMBERS or
/// replaces the unit of the value).
const PREFIXES: &[&str] = &[
    "", "q", "y", "a", "f", "p", "n", "u", "µ", "m", "c", "k", "M", "Meg", "meg", "G", "T", "P",
    "E", "Q", "kilo", "x",
];
/// Whole hostile values.
const WHOLE: &[&str] = &[
    "\"4n7\"",
    "\"0.47Meg\"",
    "\"1meg\"",
    "\"1 kilovolt\"",
    "\"4.7 k\u{2126}\"",
    "\"-0 V\"",
    "\"\u{FEFF}100 V\"",
    "\"1\u{200B}00 nF\"",
    "\"10 us\"",
    "\"1 km\"",
    "\"300 nm\"",
    "\"2500 nm\"",
    "\"100 pm\"",
    "\"1 ms\"",
    "\"10 ms\"",
    "\"10 km\"",
    "\"1e-300 s\"",
    "\"1e300 Hz\"",
    "\"5e-324 F\"",
    "\"NaN\"",
    "\"inf V\"",
    "\"1,100 V\"",
    "\"\"",
];

/// Split `value` (the text of a quoted quantity, e.g. `4.7 nF`) into number and unit.
fn unit_of(value: &str) -> &str {
    let end = value
        .find(|c: char| !(c.is_ascii_digit() || matches!(c, '.' | '-' | '+' | 'e' | 'E' | ' ')))
        .unwrap_or(value.len());
    let unit = &value[end..];
    // Drop a prefix letter when a unit symbol follows.
    let mut chars = unit.chars();
    match (chars.next(), chars.as_str()) {
        (Some(c), rest) if !rest.is_empty() && "fpnuµmkMGT".contains(c) => rest,
        _ => unit,
    }
}

/// Replace some quoted quantities and bare numbers of `text` by hostile values.
fn mutate(text: &str, rng: &mut Rng) -> String {
    let mut out = String::with_capacity(text.len() + 64);
    // No edit at all for some cases: hostile options on a valid design.
    let edits = rng.below(3);
    // Positions of quoted quantities ("4.7 nF") and bare numbers after ": " or "(".
    let mut spots: Vec<(usize, usize, bool)> = Vec::new();
    let bytes = text.as_bytes();
    let mut i = 0;
    let mut in_comment = false;
    while i < bytes.len() {
        let c = bytes[i];
        if c == b'\n' {
            in_comment = false;
        } else if c == b'/' && bytes.get(i + 1) == Some(&b'/') {
            in_comment = true;
        }
        if !in_comment && c == b'"' {
            let end = text[i + 1..].find('"').map_or(bytes.len(), |e| i + 1 + e);
            let inner = &text[i + 1..end.min(bytes.len())];
            if inner.starts_with(|ch: char| ch.is_ascii_digit() || ch == '-') {
                spots.push((i, end + 1, true));
            }
            i = end + 1;
            continue;
        }
        if !in_comment
            && c.is_ascii_digit()
            && i > 0
            && matches!(bytes[i - 1], b' ' | b'(' | b'[')
            && (i < 2 || bytes[i - 2] != b'"')
        {
            let end = text[i..]
                .find(|ch: char| !(ch.is_ascii_digit() || matches!(ch, '.' | 'e' | '-')))
                .map_or(bytes.len(), |e| i + e);
            spots.push((i, end, false));
            i = end;
            continue;
        }
        i += 1;
    }
    let mut chosen: Vec<usize> = (0..edits)
        .filter(|_| !spots.is_empty())
        .map(|_| rng.below(spots.len()))
        .collect();
    chosen.sort_unstable();
    chosen.dedup();
    let mut last = 0;
    for k in chosen {
        let (a, b, quoted) = spots[k];
        out.push_str(&text[last..a]);
        let replacement = if quoted {
            let value = &text[a + 1..b - 1];
            let number_end = value
                .find(|c: char| !(c.is_ascii_digit() || matches!(c, '.' | '-' | '+' | 'e' | 'E')))
                .unwrap_or(value.len());
            let number: Option<f64> = value[..number_end].parse().ok();
            if rng.chance(2)
                && let Some(x) = number
            {
                // Plausible but extreme: the same quantity scaled, so that many are accepted.
                let factor = rng.pick(&["1e-3", "0.1", "0.5", "2", "10", "100", "1000"]);
                let f: f64 = factor.parse().expect("factor");
                format!("\"{:e}{}\"", x * f, &value[number_end..])
            } else if rng.chance(3) {
                rng.pick(WHOLE).to_string()
            } else {
                let unit = unit_of(&text[a + 1..b - 1]);
                let sep = if rng.chance(2) { " " } else { "" };
                format!(
                    "\"{}{sep}{}{unit}\"",
                    rng.pick(NUMBERS),
                    if rng.chance(3) {
                        rng.pick(PREFIXES)
                    } else {
                        ""
                    }
                )
            }
        } else {
            // A bare number: counts (stages, pulses, seeds) and plain figures (gains, weights).
            rng.pick(&[
                "0", "1", "2", "20", "21", "1000", "5e-324", "1e10", "1.7e308", "1e300",
            ])
            .to_string()
        };
        out.push_str(&replacement);
        last = b;
    }
    out.push_str(&text[last..]);
    out
}

/// A command line for a design at `design` (the output file and figure directory under
/// `dir`), chosen from every command and format.
fn command_for(design: &str, dir: &Path, rng: &mut Rng) -> Vec<String> {
    let s = |v: &[&str]| v.iter().map(|x| x.to_string()).collect::<Vec<_>>();
    let out = dir.join("out").to_str().expect("utf-8").to_string();
    let plots = dir.join("figs").to_str().expect("utf-8").to_string();
    let format = rng.pick(&["text", "json", "html", "markdown"]);
    match rng.below(12) {
        0..=2 => s(&["report", design, "--format", format, "-o", &out]),
        3 => s(&["report", design, "--format", "json", "--plots", &plots]),
        4 => s(&["check", design]),
        5 => {
            let current = rng.pick(&["1 fA", "2 uA", "1e-300 A", "10 A", "1e300 A", "4u7"]);
            s(&["netlist", design, "--anode-current", current])
        }
        6 => {
            let pulses = rng.pick(&["1", "2", "50", "300"]);
            let mut v = s(&["train", design, "--pulses", pulses, "--train-only"]);
            v.extend(s(&[
                "--format",
                rng.pick(&["text", "json", "html", "markdown"]),
            ]));
            v
        }
        7 => {
            let samples = rng.pick(&["1", "2", "300", "2000"]);
            let mut v = s(&["spread", design, "--samples", samples, "--format", "json"]);
            if rng.chance(3) {
                v.extend(s(&["--plots", &plots]));
            }
            if rng.chance(3) {
                v.extend(s(&["--sigmas", rng.pick(&["1e-300", "10", "1e300", "3"])]));
            }
            v
        }
        8 | 9 => {
            let spec = rng.pick(&[
                "supply.volts=1e-300..1e300:3:log",
                "supply.volts=900V..1500V:5",
                "operating.anode_current=1e-300A..1e300A:4:log",
                "operating.anode_current=1fA..10A:6:log",
                "tube.gain.gain=1.0000001..1e10:4:log",
                "tube.gain.gain=1e-300..1.7e308:3:log",
                "load.coupling=5e-324F..1nF:3",
                "load.resistance=1..1G:5:log",
                "divider.stray=1fF..1nF:4:log",
                "tube.gain.exponent=0.2..1.5:4",
                "divider.gaps[0]=1..100G:4:log",
                "tube.collection=1e-9..1:3",
                "resistors.power=1mW..100W:3:log",
            ]);
            let mut v = s(&["sweep", design, "--vary", spec, "--format", "json"]);
            if rng.chance(2) {
                v.extend(s(&["--plots", &plots]));
            }
            v
        }
        10 => {
            let lines = rng.pick(&["100,2500", "99.9", "405,520", "1e300", "300,1e-300"]);
            let photons = rng.pick(&["1e-300", "1", "1e20", "1.1e20", "1e300"]);
            s(&[
                "light-match",
                design,
                "--lines",
                lines,
                "--photons",
                photons,
            ])
        }
        _ => s(&["report", design, "--format", format]),
    }
}

/// Case number, command line, the run, and the files it wrote.
type Outcome = (u64, Vec<String>, Run, Vec<(PathBuf, Vec<u8>)>);

struct Run {
    code: Option<i32>,
    cpu: Duration,
    wall: Duration,
    rss_kb: i64,
    stdout: Vec<u8>,
    stderr: String,
}

/// Run the binary and measure the child's own processor time and peak memory with wait4(2).
// The child is reaped by wait4 below, which also reports its resource use; `Child::wait` would
// reap it without them.
#[allow(clippy::zombie_processes)]
fn run_measured(args: &[String]) -> Run {
    let start = Instant::now();
    let mut child = Command::new(BIN)
        .args(args)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("spawn");
    let mut out = child.stdout.take().expect("stdout");
    let mut err = child.stderr.take().expect("stderr");
    let reader = std::thread::spawn(move || {
        let mut v = Vec::new();
        let _ = out.read_to_end(&mut v);
        v
    });
    let err_reader = std::thread::spawn(move || {
        let mut v = Vec::new();
        let _ = err.read_to_end(&mut v);
        v
    });
    let pid = child.id() as libc::pid_t;
    let mut status: libc::c_int = 0;
    // SAFETY: a zeroed rusage is a valid value of this plain C struct.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    let mut killed = false;
    loop {
        // SAFETY: wait4 on our own child's pid with valid pointers to locals; the child is
        // reaped here and never by `Child::wait`.
        let r = unsafe { libc::wait4(pid, &mut status, libc::WNOHANG, &mut usage) };
        if r == pid {
            break;
        }
        assert!(r == 0, "wait4 failed for {args:?}");
        if !killed && start.elapsed() > WALL_LIMIT {
            // SAFETY: signalling our own child, not yet reaped.
            unsafe { libc::kill(pid, libc::SIGKILL) };
            killed = true;
        }
        std::thread::sleep(Duration::from_millis(2));
    }
    let wall = start.elapsed();
    let tv = |t: libc::timeval| Duration::new(t.tv_sec as u64, t.tv_usec as u32 * 1000);
    let code = if libc::WIFEXITED(status) {
        Some(libc::WEXITSTATUS(status))
    } else {
        None
    };
    Run {
        code,
        cpu: tv(usage.ru_utime) + tv(usage.ru_stime),
        wall,
        rss_kb: usage.ru_maxrss,
        stdout: reader.join().expect("stdout reader"),
        stderr: String::from_utf8_lossy(&err_reader.join().expect("stderr reader")).to_string(),
    }
}

/// Every file the run wrote (the `-o` file and the figures), as text where it is text.
fn written(dir: &Path) -> Vec<(PathBuf, Vec<u8>)> {
    let mut v = Vec::new();
    for p in [dir.join("out")] {
        if let Ok(b) = std::fs::read(&p) {
            v.push((p, b));
        }
    }
    if let Ok(rd) = std::fs::read_dir(dir.join("figs")) {
        for e in rd.flatten() {
            let p = e.path();
            if p.extension().is_some_and(|x| x == "svg")
                && let Ok(b) = std::fs::read(&p)
            {
                v.push((p, b));
            }
        }
    }
    v
}

/// What is wrong with one output, if anything: a non-finite figure.
fn non_finite(bytes: &[u8], theirs: &[&str]) -> Option<String> {
    let text = String::from_utf8_lossy(bytes);
    let trimmed = text.trim_start();
    if trimmed.starts_with('{')
        && let Ok(v) = serde_json::from_str::<serde_json::Value>(trimmed)
    {
        return finite::json_unexpected_null(&v);
    }
    finite::text_non_finite_except(&text, theirs)
}

/// The cases of the issue itself, as (demo, text replaced, replacement, command after the
/// design path); `{out}` and `{figs}` stand for the case's output file and figure directory.
const ISSUE_CASES: &[(&str, &str, &str, &[&str])] = &[
    (
        "rooftop-paddle.ron",
        "gain: 1.0e6,",
        "gain: 1e307,",
        &["report", "--format", "html", "--plots", "{figs}"],
    ),
    (
        "rooftop-paddle.ron",
        "gain: 1.0e6,",
        "gain: 1.7e308,",
        &["report", "--format", "json"],
    ),
    (
        "rooftop-paddle.ron",
        "gain: 1.0e6,",
        "gain: 1e155,",
        &["netlist"],
    ),
    (
        "rooftop-paddle.ron",
        "gain: 1.0e6,",
        "gain: 1e10,",
        &["report", "--format", "html", "--plots", "{figs}"],
    ),
    (
        "rooftop-paddle.ron",
        "",
        "",
        &[
            "sweep",
            "--vary",
            "supply.volts=1e-300..1e300:3:log",
            "--plots",
            "{figs}",
        ],
    ),
    (
        "rooftop-paddle.ron",
        "",
        "",
        &[
            "sweep",
            "--vary",
            "operating.anode_current=1e-300A..1e300A:4:log",
            "--plots",
            "{figs}",
        ],
    ),
    (
        "rooftop-paddle.ron",
        "",
        "",
        &[
            "sweep",
            "--vary",
            "supply.volts=10V..100kV:5:log",
            "--plots",
            "{figs}",
        ],
    ),
    (
        "rooftop-paddle.ron",
        "",
        "",
        &["spread", "--samples", "10000000"],
    ),
    (
        "laser-timing.ron",
        "width: \"60 ps\"",
        "width: \"10 ms\"",
        &["check"],
    ),
    (
        "laser-timing.ron",
        "width: \"60 ps\"",
        "width: \"10 us\"",
        &["report", "--format", "html", "--plots", "{figs}"],
    ),
    (
        "laser-timing.ron",
        "length: \"1 m\"",
        "length: \"10 km\"",
        &["report", "--format", "html"],
    ),
    (
        "laser-timing.ron",
        "length: \"1 m\"",
        "length: \"1 km\"",
        &["report", "--format", "html", "--plots", "{figs}"],
    ),
    (
        "laser-timing.ron",
        "coupling: Some(\"0.1 %\")",
        "coupling: Some(5e-324)",
        &["report"],
    ),
    (
        "rooftop-paddle.ron",
        "",
        "",
        &["report", "-o", "/dev/full", "--force"],
    ),
];

fn issue_cases(root: &Path) -> Vec<(u64, PathBuf, Vec<String>)> {
    ISSUE_CASES
        .iter()
        .enumerate()
        .map(|(i, (demo, from, to, cmd))| {
            let text =
                std::fs::read_to_string(crate_path(&format!("designs/{demo}"))).expect("demo");
            assert!(
                from.is_empty() || text.contains(from),
                "{demo} holds {from}"
            );
            let text = if from.is_empty() {
                text
            } else {
                text.replacen(from, to, 1)
            };
            let dir = root.join(format!("issue{i:02}"));
            std::fs::create_dir_all(&dir).expect("case dir");
            let design = dir.join("d.ron");
            std::fs::write(&design, text).expect("write case");
            let fill = |a: &str| {
                a.replace("{out}", dir.join("out").to_str().expect("utf-8"))
                    .replace("{figs}", dir.join("figs").to_str().expect("utf-8"))
            };
            let mut args = vec![fill(cmd[0]), design.to_str().expect("utf-8").to_string()];
            args.extend(cmd[1..].iter().map(|a| fill(a)));
            (1000 + i as u64, dir, args)
        })
        .collect()
}

#[test]
fn hostile_corpus_through_every_command_is_bounded_and_finite() {
    let mut sources: Vec<PathBuf> = demo_designs();
    sources.push(crate_path("designs/requirements/paddle-rebuild.ron"));
    let texts: Vec<String> = sources
        .iter()
        .map(|p| std::fs::read_to_string(p).expect("demo"))
        .collect();
    let root = temp_dir("corpus");
    let mut rng = Rng(SEED);
    let mut cases = Vec::new();
    for i in 0..CASES {
        let k = rng.below(texts.len());
        let text = mutate(&texts[k], &mut rng);
        let dir = root.join(format!("case{i:03}"));
        std::fs::create_dir_all(&dir).expect("case dir");
        let design = dir.join("d.ron");
        std::fs::write(&design, &text).expect("write case");
        let design = design.to_str().expect("utf-8").to_string();
        let args = if sources[k].ends_with("paddle-rebuild.ron") {
            let out = dir.join("out").to_str().expect("utf-8").to_string();
            vec![
                "size".to_string(),
                design,
                "-o".to_string(),
                out,
                "-q".to_string(),
            ]
        } else {
            command_for(&design, &dir, &mut rng)
        };
        cases.push((i, dir, args));
    }
    cases.extend(issue_cases(&root));
    // Two runners, as the machine has two cores.
    let results: Vec<Outcome> = std::thread::scope(|scope| {
        let halves: Vec<_> = cases
            .chunks(cases.len().div_ceil(2))
            .map(|chunk| {
                scope.spawn(move || {
                    chunk
                        .iter()
                        .map(|(i, dir, args)| {
                            let run = run_measured(args);
                            let files = written(dir);
                            (*i, args.clone(), run, files)
                        })
                        .collect::<Vec<_>>()
                })
            })
            .collect();
        halves
            .into_iter()
            .flat_map(|h| h.join().expect("runner"))
            .collect()
    });
    let mut failures = Vec::new();
    let (mut max_cpu, mut max_wall, mut max_rss) = (Duration::ZERO, Duration::ZERO, 0i64);
    let mut by_code = [0usize; 4];
    for (i, args, run, files) in &results {
        max_cpu = max_cpu.max(run.cpu);
        max_wall = max_wall.max(run.wall);
        max_rss = max_rss.max(run.rss_kb);
        let mut problems = Vec::new();
        match run.code {
            Some(c @ 0..=3) => by_code[c as usize] += 1,
            other => problems.push(format!("exit {other:?}")),
        }
        if run.stderr.contains("panicked") {
            problems.push("a panic".to_string());
        }
        if run.cpu > CPU_LIMIT {
            problems.push(format!("{:.1} s of processor time", run.cpu.as_secs_f64()));
        }
        if run.rss_kb > RSS_LIMIT_KB {
            problems.push(format!("{} MB peak memory", run.rss_kb / 1024));
        }
        // The design's own text (its name, notes, path) may hold "NaN"; blank it.
        let path = args.get(1).cloned().unwrap_or_default();
        let theirs = [path.as_str()];
        if let Some(bad) = non_finite(&run.stdout, &theirs) {
            problems.push(format!("non-finite figure on stdout: {bad}"));
        }
        for (p, bytes) in files {
            if let Some(bad) = non_finite(bytes, &theirs) {
                problems.push(format!("non-finite figure in {}: {bad}", p.display()));
            }
        }
        if !problems.is_empty() {
            failures.push(format!(
                "case {i} {args:?}: {}\n  stderr: {}",
                problems.join("; "),
                run.stderr.lines().next().unwrap_or("")
            ));
        }
    }
    eprintln!(
        "corpus: {} runs, exits 0/1/2/3 = {:?}, slowest {:.2} s processor / {:.2} s wall, peak memory {} MB",
        results.len(),
        by_code,
        max_cpu.as_secs_f64(),
        max_wall.as_secs_f64(),
        max_rss / 1024
    );
    assert!(results.len() >= 300);
    // Both sides of the property must be exercised: hostile values accepted and refused.
    assert!(by_code[0] >= 30 && by_code[2] >= 30, "exits {by_code:?}");
    assert!(
        failures.is_empty(),
        "{} failure(s):\n{}",
        failures.len(),
        failures.join("\n")
    );
    let _ = std::fs::remove_dir_all(&root);
}
