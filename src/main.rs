//! The `dynode` command line: parse arguments, call the library, map results to exit codes.
//!
//! Exit codes: 0 done; 1 the design breaks a limit and `--strict` was given; 2 bad input or
//! usage; 3 a solve failed. Data goes to stdout, messages to stderr.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use dynode::analysis::{self, AnalysisError};
use dynode::design;
use dynode::netlist::{self, NetlistOptions};
use dynode::output;
use dynode::report::{self, Format};
use dynode::units::{self, Kind};

/// Exit codes, documented in README.md.
#[derive(Debug, Clone, Copy)]
enum Exit {
    Ok = 0,
    Strict = 1,
    BadInput = 2,
    SolveFailed = 3,
}

#[derive(Parser)]
#[command(
    name = "dynode",
    version,
    about = "Design and check photomultiplier-tube bases: divider, gain, linearity, safety.",
    after_help = "Example:\n  dynode report designs/rooftop-paddle.ron\n  dynode report designs/rooftop-paddle.ron --format json -o paddle.json\n  dynode size designs/requirements/paddle-rebuild.ron -o paddle-sized.ron\n  dynode spread designs/rooftop-paddle.ron --samples 100000 --seed 7\n  dynode sweep designs/rooftop-paddle.ron --vary supply.volts=900V..1500V:13\n\nHIGH VOLTAGE: the circuits this tool describes can kill. See SAFETY.md."
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(clap::Args)]
struct OutputArgs {
    /// Write to FILE instead of stdout (atomically; never over an input file).
    #[arg(short, long, value_name = "FILE")]
    output: Option<PathBuf>,
    /// Replace FILE if it exists.
    #[arg(long)]
    force: bool,
    /// Print no messages on stderr (errors still print).
    #[arg(short, long)]
    quiet: bool,
}

/// Output formats of `spread` and `sweep` (tables, not reports).
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
enum DataFormat {
    /// Plain text for a terminal or a lab notebook.
    Text,
    /// JSON, SI base units (keys in docs/json.md).
    Json,
}

#[derive(Subcommand)]
enum Command {
    /// Solve the divider with the tube's currents and print the full report.
    #[command(
        after_help = "Examples:\n  dynode report designs/rooftop-paddle.ron\n  dynode report designs/rooftop-paddle.ron --format json -o paddle.json\n  dynode report designs/rooftop-paddle.ron --format html -o paddle.html --plots figures/"
    )]
    Report {
        /// The design file (RON).
        design: PathBuf,
        /// Output format.
        #[arg(short, long, value_enum, default_value_t = Format::Text)]
        format: Format,
        /// Exit with code 1 when the design breaks a limit (any warning).
        #[arg(long)]
        strict: bool,
        /// Also write every figure as SVG and PNG into DIR (stable names, e.g. linearity.png).
        #[arg(long, value_name = "DIR")]
        plots: Option<PathBuf>,
        #[command(flatten)]
        out: OutputArgs,
    },
    /// Check a design file and say what is wrong, without solving.
    #[command(after_help = "Example:\n  dynode check designs/rooftop-paddle.ron")]
    Check {
        /// The design file (RON).
        design: PathBuf,
    },
    /// Print a shell completion script (bash, zsh, fish, elvish, powershell).
    #[command(
        after_help = "Example:\n  dynode completions bash > ~/.local/share/bash-completion/completions/dynode"
    )]
    Completions {
        /// The shell.
        shell: clap_complete::Shell,
    },
    /// Solve the base in time under the design's pulse train: per-pulse gain, droop, recovery,
    /// pulse linearity, capacitor sizing and a tapered comparison.
    /// List the built-in cathode curves and windows: peak, cut-offs and where the numbers come from.
    #[command(after_help = "Example:\n  dynode cathodes")]
    Cathodes,
    /// Compare light sources and cathodes: QE, photoelectrons, pulse peak and verdict for a
    /// list of wavelengths against every built-in cathode and the design's own.
    #[command(
        after_help = "Examples:\n  dynode light-match designs/laser-timing.ron\n  dynode light-match designs/rooftop-paddle.ron --lines 405,520,650 --photons 2000"
    )]
    LightMatch {
        /// The design file (RON): its gain, load, readout and light pulse shape are used.
        design: PathBuf,
        /// Wavelengths in nm, comma separated (default: twelve common laser and LED lines).
        #[arg(long, value_delimiter = ',', value_name = "NM,NM,...")]
        lines: Vec<f64>,
        /// Photons reaching the cathode per pulse (default: the design's light, else 1000).
        #[arg(long, value_name = "N")]
        photons: Option<f64>,
    },
    #[command(
        after_help = "Example:\n  dynode train designs/laser-burst-counter.ron\n  dynode train designs/laser-burst-counter.ron --pulses 200 --train-only --format json"
    )]
    Train {
        /// The design file (RON), with a `train` block.
        design: PathBuf,
        /// Output format.
        #[arg(short, long, value_enum, default_value_t = Format::Text)]
        format: Format,
        /// Replace the pattern's pulse count (bursts keep their number of bursts).
        #[arg(long, value_name = "N")]
        pulses: Option<usize>,
        /// Solve the train only: skip the pulse-linearity scan, sizing and taper comparison.
        #[arg(long)]
        train_only: bool,
        #[command(flatten)]
        out: OutputArgs,
    },
    /// Write a SPICE netlist of the solved network (behavioural dynode sources).
    #[command(
        after_help = "Example:\n  dynode netlist designs/rooftop-paddle.ron -o base.cir\n  ngspice -b base.cir"
    )]
    Netlist {
        /// The design file (RON).
        design: PathBuf,
        /// Average anode current to set the cathode current for (default: the design's).
        #[arg(long, value_name = "CURRENT")]
        anode_current: Option<String>,
        /// Write a transient netlist of the design's pulse train (`.tran`, one `meas` per pulse)
        /// instead of the DC operating point.
        #[arg(long, conflicts_with = "anode_current")]
        train: bool,
        /// With --train: replace the pattern's pulse count.
        #[arg(long, value_name = "N", requires = "train")]
        pulses: Option<usize>,
        /// Write a transient netlist of the supply's voltage multiplier (supply.multiplier)
        /// under the base's load at the operating point, run to its steady state, instead.
        #[arg(long, conflicts_with_all = ["anode_current", "train"])]
        supply: bool,
        #[command(flatten)]
        out: OutputArgs,
    },
    /// Tolerance statistics: Monte Carlo over parts, supply and tube spread.
    #[command(
        after_help = "Example:\n  dynode spread designs/rooftop-paddle.ron --samples 100000 --seed 7\n  dynode spread designs/rooftop-paddle.ron --resistor-tolerance 5% --tube-gain-sigma 0 --format json -o spread.json\n\nTolerances are read as --sigmas standard deviations of a normal distribution (default 3)."
    )]
    Spread {
        /// The design file (RON).
        design: PathBuf,
        /// Number of samples.
        #[arg(long, default_value_t = 100_000)]
        samples: usize,
        /// Seed; the result is the same for a seed whatever the thread count.
        #[arg(long, default_value_t = 7)]
        seed: u64,
        /// Resistor tolerance (default: the design's resistors.tolerance).
        #[arg(long, value_name = "FRACTION", value_parser = ratio)]
        resistor_tolerance: Option<f64>,
        /// Zener voltage tolerance.
        #[arg(long, value_name = "FRACTION", value_parser = ratio, default_value = "5%")]
        zener_tolerance: f64,
        /// Capacitor tolerance.
        #[arg(long, value_name = "FRACTION", value_parser = ratio, default_value = "10%")]
        capacitor_tolerance: f64,
        /// How many standard deviations a tolerance stands for.
        #[arg(long, default_value_t = 3.0)]
        sigmas: f64,
        /// Supply setting accuracy (default: supply.quality.setting_accuracy, else 0.5 %).
        #[arg(long, value_name = "FRACTION", value_parser = ratio)]
        supply_setting: Option<f64>,
        /// Supply drift bound, uniform (default: supply.quality.drift, else none).
        #[arg(long, value_name = "FRACTION", value_parser = ratio)]
        supply_drift: Option<f64>,
        /// Standard deviation of ln(tube gain) between tubes (0 to switch off).
        #[arg(long, value_name = "SIGMA", default_value_t = dynode::spread::DEFAULT_TUBE_GAIN_SIGMA)]
        tube_gain_sigma: f64,
        /// Standard deviation of the secondary-emission exponent k.
        #[arg(long, value_name = "SIGMA", default_value_t = dynode::spread::DEFAULT_EXPONENT_SIGMA)]
        exponent_sigma: f64,
        /// Charge per anode pulse, for the droop figures (e.g. "200pC").
        #[arg(long, value_name = "CHARGE")]
        pulse_charge: Option<String>,
        /// Yield: largest |DC deviation| at the operating point.
        #[arg(long, value_name = "FRACTION", value_parser = ratio)]
        max_deviation: Option<f64>,
        /// Yield: small-signal gain window around the target.
        #[arg(long, value_name = "FRACTION", value_parser = ratio)]
        gain_window: Option<f64>,
        /// Take the target gain, allowed deviation, droop and pulse charge from a requirements file.
        #[arg(long, value_name = "FILE")]
        requirements: Option<PathBuf>,
        /// Samples on which the linearity curve is traced.
        #[arg(long, default_value_t = 200)]
        linearity_samples: usize,
        /// Output format.
        #[arg(short, long, value_enum, default_value_t = DataFormat::Text)]
        format: DataFormat,
        /// Also write the histograms as SVG and PNG into DIR (spread-gain.png, …).
        #[arg(long, value_name = "DIR")]
        plots: Option<PathBuf>,
        #[command(flatten)]
        out: OutputArgs,
    },
    /// Vary one or two fields of the design and tabulate gain, divider current, linearity, pulse.
    #[command(
        after_help = "Example:\n  dynode sweep designs/rooftop-paddle.ron --vary supply.volts=900V..1500V:13\n  dynode sweep designs/rooftop-paddle.ron --vary divider.gaps[11]=470k..2M:9:log --vary operating.anode_current=1uA..20uA:4\n  dynode sweep designs/rooftop-paddle.ron --vary 'divider.gaps[*]=0.33..1:5'\n\nGaps count from 1 (gap 1 = K–D1) as in the design file; divider.gaps[*] scales every divider resistor.\nFields: supply.volts, divider.gaps[i], divider.gaps[*], load.resistance, tube.gain.exponent, operating.anode_current, … (docs/design-file.md lists them all)."
    )]
    Sweep {
        /// The design file (RON).
        design: PathBuf,
        /// PATH=START..END:COUNT[:log]; give it once or twice (a grid).
        #[arg(long, value_name = "SPEC", required = true)]
        vary: Vec<String>,
        /// Output format.
        #[arg(short, long, value_enum, default_value_t = DataFormat::Text)]
        format: DataFormat,
        /// Also write the figures as SVG and PNG into DIR (sweep-gain.png, sweep-linearity.png).
        #[arg(long, value_name = "DIR")]
        plots: Option<PathBuf>,
        #[command(flatten)]
        out: OutputArgs,
    },
    /// Set two or more designs side by side: gap voltages, divider current, gain, linearity
    /// limits, pulse, verdicts, dissipation, stored charge, bleed-down; differences marked.
    #[command(
        after_help = "Example:\n  dynode compare designs/rooftop-paddle.ron paddle-1M.ron\n  dynode compare a.ron b.ron c.ron --format json -o compare.json"
    )]
    Compare {
        /// The design files (RON), two or more.
        #[arg(required = true, num_args = 2..)]
        designs: Vec<PathBuf>,
        /// Output format.
        #[arg(short, long, value_enum, default_value_t = DataFormat::Text)]
        format: DataFormat,
        #[command(flatten)]
        out: OutputArgs,
    },
    /// Write a commented starter design from a few answers or a named starting point.
    #[command(
        after_help = "Examples:\n  dynode new --from paddle -o my-paddle.ron\n  dynode new --stages 12 --supply 1600V --divider tapered --light laser --readout scope -o timing.ron\n  dynode new --list\n\nEvery number it writes is an invented starting value, marked for replacing with your own."
    )]
    New {
        /// Start from a named starting point (`--list` shows them); other flags change it.
        #[arg(long, value_name = "NAME")]
        from: Option<String>,
        /// List the starting points and exit.
        #[arg(long)]
        list: bool,
        /// Number of dynodes.
        #[arg(long, value_name = "N")]
        stages: Option<usize>,
        /// Supply voltage magnitude (e.g. "1100V").
        #[arg(long, value_name = "VOLTS")]
        supply: Option<String>,
        /// Anode at +HV instead of the cathode at −HV.
        #[arg(long)]
        anode_positive: bool,
        /// Built-in cathode curve (`dynode cathodes` lists them).
        #[arg(long, value_name = "NAME")]
        cathode: Option<String>,
        /// Divider style.
        #[arg(long, value_enum)]
        divider: Option<dynode::starter::DividerStyle>,
        /// Divider current with no tube current (e.g. "200uA").
        #[arg(long, value_name = "CURRENT")]
        divider_current: Option<String>,
        /// What lights the cathode.
        #[arg(long, value_enum)]
        light: Option<dynode::starter::LightKind>,
        /// What reads the pulse.
        #[arg(long, value_enum)]
        readout: Option<dynode::starter::ReadoutKind>,
        #[command(flatten)]
        out: OutputArgs,
    },
    /// Show the HTML report on a page on this machine, solved again whenever the file is saved.
    #[command(
        after_help = "Example:\n  dynode serve designs/rooftop-paddle.ron\n  (open http://127.0.0.1:8040/ and edit the file; Ctrl-C stops)\n\nListens on the loopback address only: nothing off this machine can reach the page."
    )]
    Serve {
        /// The design file (RON).
        design: PathBuf,
        /// Port on 127.0.0.1 (0: any free port, printed at start).
        #[arg(long, default_value_t = 8040)]
        port: u16,
    },
    /// Size a base from a requirements file: supply, divider, preferred values, capacitors.
    #[command(
        after_help = "Example:\n  dynode size designs/requirements/paddle-rebuild.ron -o paddle-sized.ron\n  dynode report paddle-sized.ron\n\nThe requirements schema is in docs/design-file.md (\"Requirements file\")."
    )]
    Size {
        /// The requirements file (RON).
        requirements: PathBuf,
        /// Write the design here (required; never over an existing file without --force).
        #[arg(short, long, value_name = "FILE")]
        output: PathBuf,
        /// Replace FILE if it exists.
        #[arg(long)]
        force: bool,
        /// Print no summary on stderr (errors still print).
        #[arg(short, long)]
        quiet: bool,
    },
}

/// `eprintln!` that never panics: a message that cannot be shown is no reason to crash.
macro_rules! say {
    ($($t:tt)*) => {{
        let _ = writeln!(
            std::io::stderr(),
            "{}",
            dynode::report::printable(&format!($($t)*))
        );
    }};
}

fn fail(msg: impl std::fmt::Display, code: Exit) -> ExitCode {
    say!("dynode: error: {msg}");
    ExitCode::from(code as u8)
}

/// Write `bytes` to standard output and flush. A write that fails (a full disk) is an error
/// with a message and exit 2; a closed pipe (`| head`) ends quietly with exit 2, as the reader
/// has gone and no one is left to read a message.
fn print_out(bytes: &[u8]) -> Result<(), ExitCode> {
    let text = String::from_utf8_lossy(bytes);
    let bytes = dynode::report::printable(&text);
    let bytes = bytes.as_bytes();
    let mut stdout = std::io::stdout().lock();
    match stdout.write_all(bytes).and_then(|_| stdout.flush()) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => {
            Err(ExitCode::from(Exit::BadInput as u8))
        }
        Err(e) => Err(fail(
            format!("standard output: cannot write: {e}; the output is incomplete"),
            Exit::BadInput,
        )),
    }
}

/// [`print_out`] as the command's exit code.
fn print_exit(text: &str) -> ExitCode {
    match print_out(text.as_bytes()) {
        Ok(()) => ExitCode::from(Exit::Ok as u8),
        Err(code) => code,
    }
}

/// Read and check a design, and check that the output target may be written, before any
/// work is done (so that a refusal writes nothing).
fn load_for_output(design: &Path, out: &OutputArgs) -> Result<design::Design, ExitCode> {
    let d = dynode::commands::load_design(design).map_err(|e| fail(&e, command_exit(&e)))?;
    if let Some(p) = &out.output {
        output::check_target(p, &[design], out.force).map_err(|e| fail(e, Exit::BadInput))?;
    }
    Ok(d)
}

/// `--pulses` must be a count from 1 to the largest train.
fn check_pulses(pulses: Option<usize>) -> Result<(), ExitCode> {
    if pulses.is_some_and(|p| p == 0 || p > dynode::train::MAX_PULSES) {
        return Err(fail(
            format!(
                "--pulses: expected a count from 1 to {}",
                dynode::train::MAX_PULSES
            ),
            Exit::BadInput,
        ));
    }
    Ok(())
}

fn analysis_exit(e: &AnalysisError) -> Exit {
    match e {
        AnalysisError::Tube { .. }
        | AnalysisError::Operating { .. }
        | AnalysisError::Contradiction { .. } => Exit::BadInput,
        AnalysisError::Solve { .. } => Exit::SolveFailed,
    }
}

fn command_exit(e: &dynode::commands::CommandError) -> Exit {
    match e.exit_code() {
        3 => Exit::SolveFailed,
        _ => Exit::BadInput,
    }
}

fn emit(text: &str, out: &OutputArgs, input: &Path) -> Result<(), ExitCode> {
    emit_from(text, out, &[input])
}

/// [`emit`] for a command that reads several inputs (none of which may be overwritten).
fn emit_from(text: &str, out: &OutputArgs, inputs: &[&Path]) -> Result<(), ExitCode> {
    match &out.output {
        Some(path) => {
            let text = dynode::report::printable(text);
            output::write_atomic(path, text.as_bytes(), inputs, out.force)
                .map_err(|e| fail(e, Exit::BadInput))?;
            if !out.quiet {
                say!("dynode: wrote {}", path.display());
            }
        }
        None => print_out(text.as_bytes())?,
    }
    Ok(())
}

fn ratio(text: &str) -> Result<f64, String> {
    match units::parse(text, Kind::Ratio) {
        Ok(v) if (0.0..1.0).contains(&v) => Ok(v),
        Ok(v) => Err(format!(
            "expected a fraction from 0 up to (not including) 100 %, found {} %",
            units::show_number(v * 100.0)
        )),
        Err(e) => Err(e.to_string()),
    }
}

#[allow(clippy::too_many_arguments)]
fn run_spread(
    design: &Path,
    mut cfg: dynode::spread::SpreadConfig,
    pulse_charge: Option<String>,
    requirements: Option<PathBuf>,
    format: DataFormat,
    plots: Option<PathBuf>,
    out: &OutputArgs,
) -> ExitCode {
    use indicatif::{ProgressBar, ProgressStyle};
    use std::io::IsTerminal;
    let d = match design::load(design) {
        Ok(d) => d,
        Err(e) => return fail(e, Exit::BadInput),
    };
    let mut inputs: Vec<&Path> = vec![design];
    if let Some(r) = &requirements {
        inputs.push(r.as_path());
    }
    if let Some(p) = &out.output
        && let Err(e) = output::check_target(p, &inputs, out.force)
    {
        return fail(e, Exit::BadInput);
    }
    let (lo, hi) = dynode::limits::SPREAD_SAMPLES;
    if !(lo..=hi).contains(&cfg.samples) {
        return fail(
            format!("--samples: expected {lo} to {hi}, found {}", cfg.samples),
            Exit::BadInput,
        );
    }
    if cfg.linearity_samples > dynode::limits::SPREAD_LINEARITY_SAMPLES {
        return fail(
            format!(
                "--linearity-samples: expected 0 to {} (each costs about 80 solves), found {}",
                dynode::limits::SPREAD_LINEARITY_SAMPLES,
                cfg.linearity_samples
            ),
            Exit::BadInput,
        );
    }
    if !dynode::limits::SPREAD_SIGMAS.contains(cfg.sigmas) {
        return fail(
            format!(
                "--sigmas: expected a number of standard deviations per tolerance from {}, found {}",
                dynode::limits::SPREAD_SIGMAS.describe(),
                units::show_number(cfg.sigmas)
            ),
            Exit::BadInput,
        );
    }
    if !(cfg.tube_gain_sigma.is_finite() && (0.0..3.0).contains(&cfg.tube_gain_sigma)) {
        return fail("--tube-gain-sigma: expected 0 to 3", Exit::BadInput);
    }
    if !(cfg.exponent_sigma.is_finite() && (0.0..0.2).contains(&cfg.exponent_sigma)) {
        return fail("--exponent-sigma: expected 0 to 0.2", Exit::BadInput);
    }
    if let Some(t) = &pulse_charge {
        match units::parse(t, Kind::Charge) {
            Ok(q) if q > 0.0 => cfg.pulse_charge = Some(q),
            Ok(_) => return fail("--pulse-charge: expected a positive charge", Exit::BadInput),
            Err(e) => return fail(format!("--pulse-charge: {e}"), Exit::BadInput),
        }
    }
    if let Some(r) = &requirements {
        let file = r.display().to_string();
        let text = match design::read_text(r, "requirements") {
            Ok(t) => t,
            Err(e) => return fail(e, Exit::BadInput),
        };
        let req = match dynode::sizing::parse_requirements(&text, &file) {
            Ok(r) => r,
            Err(e) => return fail(&e, size_exit(&e)),
        };
        cfg.target_gain = Some(req.target_gain);
        cfg.max_deviation = cfg.max_deviation.or(Some(req.deviation));
        cfg.supply_max_volts = Some(req.supply_max_volts);
        if let Some((_, droop)) = req.capacitors {
            cfg.max_droop = Some(droop);
        }
        if cfg.pulse_charge.is_none() {
            cfg.pulse_charge = req
                .pulse_charge
                .or(req.max_peak.zip(req.pulse_width).map(|(i, w)| i * w))
                .or(req.rate.map(|r| req.max_average / r));
        }
    }
    let bar = if std::io::stderr().is_terminal() && !out.quiet {
        let b = ProgressBar::new(cfg.samples as u64);
        if let Ok(style) = ProgressStyle::with_template("{bar:40} {pos}/{len} samples ({eta} left)")
        {
            b.set_style(style);
        }
        Some(b)
    } else {
        None
    };
    let progress = |done: usize| {
        if let Some(b) = &bar {
            b.set_position(done as u64);
        }
    };
    let result = dynode::spread::run(&d, &cfg, &progress);
    if let Some(b) = &bar {
        b.finish_and_clear();
    }
    let s = match result {
        Ok(s) => s,
        Err(e) => return fail(&e, analysis_exit(&e)),
    };
    if s.failed >= s.config.samples {
        return fail(
            format!(
                "{}: every one of the {} samples failed to solve; no statistics to show (are the tolerances far too wide?)",
                d.source, s.config.samples
            ),
            Exit::SolveFailed,
        );
    }
    let text = match format {
        DataFormat::Json => match report::spread::json(&s) {
            Ok(t) => t,
            Err(e) => return fail(e, Exit::SolveFailed),
        },
        DataFormat::Text => report::spread::text(&s),
    };
    if let Err(code) = emit(&text, out, design) {
        return code;
    }
    if let Some(dir) = &plots {
        let figs = report::spread::figures(&s);
        if let Err(code) = write_plots(dir, &figs, &inputs, out) {
            return code;
        }
    }
    ExitCode::from(Exit::Ok as u8)
}

fn write_plots(
    dir: &Path,
    figs: &[dynode::plot::Figure],
    inputs: &[&Path],
    out: &OutputArgs,
) -> Result<(), ExitCode> {
    match output::write_figures(dir, figs, inputs, out.force) {
        Ok(paths) => {
            if !out.quiet {
                say!(
                    "dynode: wrote {} figure files in {}",
                    paths.len(),
                    dir.display()
                );
            }
            Ok(())
        }
        Err(e) => Err(fail(e, Exit::BadInput)),
    }
}

fn size_exit(e: &dynode::sizing::SizingError) -> Exit {
    use dynode::sizing::SizingError;
    match e {
        SizingError::Input(_) | SizingError::Tube { .. } | SizingError::Infeasible { .. } => {
            Exit::BadInput
        }
        SizingError::Analysis(a) => analysis_exit(a),
        SizingError::Train(_) => Exit::SolveFailed,
    }
}

fn run_size(requirements: &Path, output: &Path, force: bool, quiet: bool) -> ExitCode {
    use dynode::sizing;
    if let Err(e) = output::check_target(output, &[requirements], force) {
        return fail(e, Exit::BadInput);
    }
    let file = requirements.display().to_string();
    let text = match design::read_text(requirements, "requirements") {
        Ok(t) => t,
        Err(e) => return fail(e, Exit::BadInput),
    };
    let req = match sizing::parse_requirements(&text, &file) {
        Ok(r) => r,
        Err(e) => return fail(&e, size_exit(&e)),
    };
    let sized = match sizing::size(&req) {
        Ok(s) => s,
        Err(e) => return fail(&e, size_exit(&e)),
    };
    if let Err(e) = output::write_atomic(output, sized.text.as_bytes(), &[requirements], force) {
        return fail(e, Exit::BadInput);
    }
    if !quiet {
        let _ = write!(
            std::io::stderr(),
            "{}",
            dynode::report::printable(&sizing::summary(&sized))
        );
        say!(
            "dynode: wrote {}; check it with `dynode report {}`",
            output.display(),
            output.display()
        );
    }
    if sized.checks.iter().any(|c| !c.ok) {
        return fail(
            "the sized design misses a requirement (see CHECKS above)",
            Exit::SolveFailed,
        );
    }
    ExitCode::from(Exit::Ok as u8)
}

fn run() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return ExitCode::from(if e.use_stderr() {
                Exit::BadInput as u8
            } else {
                0
            });
        }
    };
    match cli.command {
        Command::Completions { shell } => {
            use clap::CommandFactory;
            let mut script = Vec::new();
            clap_complete::generate(shell, &mut Cli::command(), "dynode", &mut script);
            match print_out(&script) {
                Ok(()) => ExitCode::from(Exit::Ok as u8),
                Err(code) => code,
            }
        }
        Command::Spread {
            design,
            samples,
            seed,
            resistor_tolerance,
            zener_tolerance,
            capacitor_tolerance,
            sigmas,
            supply_setting,
            supply_drift,
            tube_gain_sigma,
            exponent_sigma,
            pulse_charge,
            max_deviation,
            gain_window,
            requirements,
            linearity_samples,
            format,
            plots,
            out,
        } => {
            let cfg = dynode::spread::SpreadConfig {
                samples,
                seed,
                resistor_tolerance,
                sigmas,
                zener_tolerance,
                capacitor_tolerance,
                supply_setting,
                supply_drift,
                tube_gain_sigma,
                exponent_sigma,
                pulse_charge: None,
                max_deviation,
                gain_window,
                target_gain: None,
                max_droop: None,
                supply_max_volts: None,
                linearity_samples,
            };
            run_spread(
                &design,
                cfg,
                pulse_charge,
                requirements,
                format,
                plots,
                &out,
            )
        }
        Command::Sweep {
            design,
            vary,
            format,
            plots,
            out,
        } => {
            let d = match load_for_output(&design, &out) {
                Ok(d) => d,
                Err(code) => return code,
            };
            if vary.len() > 2 {
                return fail("--vary: give one or two parameters", Exit::BadInput);
            }
            let mut axes = Vec::new();
            for v in &vary {
                match dynode::sweep::parse_axis(v) {
                    Ok(a) => axes.push(a),
                    Err(e) => return fail(e, Exit::BadInput),
                }
            }
            if axes.iter().map(|a| a.values.len()).product::<usize>() > 100_000 {
                return fail("--vary: at most 100 000 points in all", Exit::BadInput);
            }
            if let Err(e) = dynode::sweep::check_axes(&d, &axes) {
                return fail(format!("--vary {e}"), Exit::BadInput);
            }
            let s = dynode::sweep::run(&d, &axes);
            let text = match format {
                DataFormat::Json => match report::sweep::json(&d, &s) {
                    Ok(t) => t,
                    Err(e) => return fail(e, Exit::SolveFailed),
                },
                DataFormat::Text => report::sweep::text(&d, &s),
            };
            if let Err(code) = emit(&text, &out, &design) {
                return code;
            }
            if let Some(dir) = &plots {
                let figs = report::sweep::figures(&s);
                if let Err(code) = write_plots(dir, &figs, &[design.as_path()], &out) {
                    return code;
                }
            }
            ExitCode::from(Exit::Ok as u8)
        }
        Command::Size {
            requirements,
            output,
            force,
            quiet,
        } => run_size(&requirements, &output, force, quiet),
        Command::Check { design } => match dynode::commands::check(&design) {
            Ok(text) => print_exit(&text),
            Err(e) => fail(&e, command_exit(&e)),
        },
        Command::Report {
            design,
            format,
            strict,
            plots,
            out,
        } => {
            let d = match load_for_output(&design, &out) {
                Ok(d) => d,
                Err(code) => return code,
            };
            let a = match analysis::analyse(&d) {
                Ok(a) => a,
                Err(e) => return fail(&e, analysis_exit(&e)),
            };
            let figs = plots.as_ref().map(|_| report::figures::all(&a));
            // Refuse a bad figures directory before the report is written.
            if let (Some(dir), Some(figs)) = (&plots, &figs)
                && let Err(e) = output::check_figures(dir, figs, &[design.as_path()], out.force)
            {
                return fail(e, Exit::BadInput);
            }
            let text = match report::render(&a, format) {
                Ok(t) => t,
                Err(e) => return fail(e, Exit::SolveFailed),
            };
            if let Err(code) = emit(&text, &out, &design) {
                return code;
            }
            if let (Some(dir), Some(figs)) = (&plots, &figs) {
                match output::write_figures(dir, figs, &[design.as_path()], out.force) {
                    Ok(paths) => {
                        if !out.quiet {
                            say!(
                                "dynode: wrote {} figure files in {}",
                                paths.len(),
                                dir.display()
                            );
                        }
                    }
                    Err(e) => return fail(e, Exit::BadInput),
                }
            }
            if strict && !a.warnings.is_empty() {
                if !out.quiet {
                    say!(
                        "dynode: {} warning(s) and --strict: exit 1",
                        a.warnings.len()
                    );
                }
                return ExitCode::from(Exit::Strict as u8);
            }
            ExitCode::from(Exit::Ok as u8)
        }
        Command::Compare {
            designs,
            format,
            out,
        } => {
            let inputs: Vec<&Path> = designs.iter().map(PathBuf::as_path).collect();
            if let Some(p) = &out.output
                && let Err(e) = output::check_target(p, &inputs, out.force)
            {
                return fail(e, Exit::BadInput);
            }
            match dynode::commands::compare(&designs, format == DataFormat::Json) {
                Ok(text) => match emit_from(&text, &out, &inputs) {
                    Ok(()) => ExitCode::from(Exit::Ok as u8),
                    Err(code) => code,
                },
                Err(e) => fail(&e, command_exit(&e)),
            }
        }
        Command::New {
            from,
            list,
            stages,
            supply,
            anode_positive,
            cathode,
            divider,
            divider_current,
            light,
            readout,
            out,
        } => {
            use dynode::starter::{Starter, starting_points};
            let points = starting_points();
            if list {
                let mut text = String::from("Starting points for `dynode new --from NAME`:\n");
                for (name, what, _) in &points {
                    text.push_str(&format!("  {name:<16} {what}\n"));
                }
                return print_exit(&text);
            }
            let mut s: Starter = match &from {
                Some(name) => match points.iter().find(|p| p.0 == name) {
                    Some(p) => p.2.clone(),
                    None => {
                        let names: Vec<&str> = points.iter().map(|p| p.0).collect();
                        return fail(
                            format!("--from {name}: expected one of {}", names.join(", ")),
                            Exit::BadInput,
                        );
                    }
                },
                None => points[0].2.clone(),
            };
            if from.is_none() {
                s.name = "New base (starter)".to_string();
            }
            if let Some(n) = stages {
                s.stages = n;
            }
            if let Some(v) = &supply {
                match units::parse(v, Kind::Voltage) {
                    Ok(x) => s.supply = x.abs(),
                    Err(e) => return fail(format!("--supply: {e}"), Exit::BadInput),
                }
            }
            if anode_positive {
                s.polarity = design::Polarity::AnodePositive;
            }
            if let Some(c) = cathode {
                s.cathode = c;
                s.window = None;
            }
            if let Some(d) = divider {
                s.divider = d;
            }
            if let Some(i) = &divider_current {
                match units::parse(i, Kind::Current) {
                    Ok(x) => s.divider_current = x,
                    Err(e) => return fail(format!("--divider-current: {e}"), Exit::BadInput),
                }
            }
            if let Some(l) = light {
                s.light = l;
            }
            if let Some(r) = readout {
                s.readout = r;
            }
            if let Some(p) = &out.output
                && let Err(e) = output::check_target(p, &[], out.force)
            {
                return fail(e, Exit::BadInput);
            }
            match dynode::commands::new_design(&s) {
                Ok(text) => match emit_from(&text, &out, &[]) {
                    Ok(()) => ExitCode::from(Exit::Ok as u8),
                    Err(code) => code,
                },
                Err(e) => fail(&e, command_exit(&e)),
            }
        }
        Command::Serve { design, port } => {
            let shown = design.display().to_string();
            match dynode::serve::run(&design, port, |addr| {
                say!("dynode: serving {shown} at http://{addr}/ (Ctrl-C stops)");
            }) {
                Ok(()) => ExitCode::from(Exit::Ok as u8),
                Err(e) => fail(&e, command_exit(&e)),
            }
        }
        Command::Cathodes => print_exit(&cathode_catalogue()),
        Command::LightMatch {
            design,
            lines,
            photons,
        } => light_match_command(&design, &lines, photons),
        Command::Train {
            design,
            format,
            pulses,
            train_only,
            out,
        } => {
            let d = match design::load(&design) {
                Ok(d) => d,
                Err(e) => return fail(e, Exit::BadInput),
            };
            if d.train.is_none() {
                return fail(
                    format!(
                        "{}: train: the design gives no train block; add one such as train: Some((size: Charge(\"100 pC\"), shape: Gaussian(fwhm: \"10 ns\"), pattern: Periodic(count: 20, rate: \"1 MHz\")))",
                        d.source
                    ),
                    Exit::BadInput,
                );
            }
            if let Err(code) = check_pulses(pulses) {
                return code;
            }
            if let Some(p) = &out.output
                && let Err(e) = output::check_target(p, &[design.as_path()], out.force)
            {
                return fail(e, Exit::BadInput);
            }
            let opts = dynode::pulsetrain::TrainOptions { pulses, train_only };
            let a = match analysis::analyse_with(&d, None) {
                Ok(a) => a,
                Err(e) => return fail(&e, analysis_exit(&e)),
            };
            let train = match dynode::pulsetrain::analyse(&d, &a.network.tube, &opts) {
                Ok(t) => t,
                Err(e) => return fail(format!("{}: {e}", d.source), Exit::SolveFailed),
            };
            let mut a = a;
            if let Some(t) = &train {
                a.warnings.extend(t.warnings.iter().cloned());
            }
            a.train = train;
            let text = match report::train::render(&a, format) {
                Ok(t) => t,
                Err(e) => return fail(e, Exit::SolveFailed),
            };
            if let Err(code) = emit(&text, &out, &design) {
                return code;
            }
            ExitCode::from(Exit::Ok as u8)
        }
        Command::Netlist {
            design,
            anode_current,
            train,
            pulses,
            supply,
            out,
        } => {
            let d = match load_for_output(&design, &out) {
                Ok(d) => d,
                Err(code) => return code,
            };
            let anode = match &anode_current {
                None => d.anode_current,
                Some(t) => match units::parse(t, Kind::Current) {
                    Ok(v) if dynode::limits::ANODE_CURRENT.contains(v) => {
                        dynode::units::ElectricCurrent::new::<uom::si::electric_current::ampere>(v)
                    }
                    Ok(v) => {
                        return fail(
                            format!(
                                "--anode-current: {} (the design file's range for operating.anode_current)",
                                dynode::limits::ANODE_CURRENT
                                    .check(v)
                                    .err()
                                    .unwrap_or_default()
                            ),
                            Exit::BadInput,
                        );
                    }
                    Err(e) => return fail(format!("--anode-current: {e}"), Exit::BadInput),
                },
            };
            let a = match analysis::analyse_with(&d, None) {
                Ok(a) => a,
                Err(e) => return fail(&e, analysis_exit(&e)),
            };
            if supply {
                let Some(m) = &d.multiplier else {
                    return fail(
                        format!(
                            "{}: supply.multiplier: --supply needs a multiplier block in the design's supply",
                            d.source
                        ),
                        Exit::BadInput,
                    );
                };
                let Some(sm) = &a.supply_model else {
                    return fail(
                        format!(
                            "{}: supply.multiplier: the multiplier's steady state could not be found",
                            d.source
                        ),
                        Exit::SolveFailed,
                    );
                };
                let text = netlist::write_multiplier(m, sm.steady.load_ohms, SUPPLY_PERIODS);
                if let Err(code) = emit(&text, &out, &design) {
                    return code;
                }
                return ExitCode::from(Exit::Ok as u8);
            }
            if train {
                let Some(spec) = &d.train else {
                    return fail(
                        format!(
                            "{}: train: --train needs a train block in the design",
                            d.source
                        ),
                        Exit::BadInput,
                    );
                };
                if let Err(code) = check_pulses(pulses) {
                    return code;
                }
                let pattern = pulses.map_or(spec.pattern, |p| spec.pattern.with_count(p));
                let base = dynode::transient::Base::from_design(&d, a.network.tube.clone());
                let g0 = match base.quiescent_state() {
                    Ok((nv, _)) => {
                        let gaps: Vec<f64> =
                            (1..=d.tube.stages + 1).map(|j| nv[j] - nv[j - 1]).collect();
                        a.network.tube.gain_for_gaps(&gaps)
                    }
                    Err(e) => return fail(format!("{}: {e}", d.source), Exit::SolveFailed),
                };
                let qk = dynode::pulsetrain::cathode_charge(spec.size, &spec.shape, g0);
                let text = netlist::write_transient(
                    &d,
                    &a.network.tube,
                    &pattern.arrivals(),
                    &spec.shape,
                    qk,
                    true,
                );
                if let Err(code) = emit(&text, &out, &design) {
                    return code;
                }
                return ExitCode::from(Exit::Ok as u8);
            }
            let mut ws = dynode::network::Workspace::default();
            let op = match a.network.solve_anode(anode, &mut ws) {
                Ok(op) => op,
                Err(e @ dynode::network::SolveError::Unreachable { .. }) => {
                    return fail(
                        format!("{}: --anode-current: {e}", d.source),
                        Exit::BadInput,
                    );
                }
                Err(e) => return fail(format!("{}: {e}", d.source), Exit::SolveFailed),
            };
            let text = netlist::write(
                &d,
                &a.network.tube,
                &NetlistOptions {
                    cathode_amps: op.cathode_amps,
                    control_block: true,
                },
            );
            if let Err(code) = emit(&text, &out, &design) {
                return code;
            }
            ExitCode::from(Exit::Ok as u8)
        }
    }
}

/// Drive periods in `netlist --supply`: enough for a lightly loaded, filtered multiplier to
/// settle from the textbook's charges (the demo's within 0.5 % after some 3000).
const SUPPLY_PERIODS: usize = 4000;

fn main() -> ExitCode {
    output::install_interrupt_cleanup();
    run()
}

/// The text of `dynode cathodes`.
fn cathode_catalogue() -> String {
    use dynode::cathode::{Cathode, builtin_cathodes, builtin_windows};
    use std::fmt::Write as _;
    let mut out = String::new();
    let _ = writeln!(
        out,
        "Built-in photocathodes (approximate typical curves, from memory; load your tube's own table for real work)\n"
    );
    let _ = writeln!(
        out,
        "  {:<26} {:>9} {:>8} {:>17}  material, window",
        "key", "peak", "peak QE", "cut-offs (1 %)"
    );
    for c in builtin_cathodes() {
        let Some(k) = Cathode::builtin(&c.key, None) else {
            continue;
        };
        let (nm, qe) = k.peak();
        let (lo, hi) = k.cutoffs();
        let _ = writeln!(
            out,
            "  {:<26} {:>6.0} nm {:>6.1} % {:>7.0}–{:<6.0}nm  {}",
            c.key,
            nm,
            qe * 100.0,
            lo,
            hi,
            k.label
        );
    }
    let _ = writeln!(out, "\nWindows (use as tube.cathode window):");
    for w in builtin_windows() {
        let _ = writeln!(out, "  {:<26} {}", w.key, w.label);
    }
    let _ = writeln!(out, "\nProvenance:");
    for c in builtin_cathodes().iter().chain(builtin_windows()) {
        let _ = writeln!(out, "  {:<26} {}", c.key, c.provenance);
    }
    out
}

/// `dynode light-match`: wavelengths × cathodes.
fn light_match_command(design: &Path, lines: &[f64], photons: Option<f64>) -> ExitCode {
    use dynode::cathode::{Cathode, builtin_cathodes};
    use dynode::signal::{COMMON_LINES, Chain, light_match};
    use dynode::units::format_eng;
    use std::fmt::Write as _;
    let d = match design::load(design) {
        Ok(d) => d,
        Err(e) => return fail(e, Exit::BadInput),
    };
    use dynode::limits::{PHOTONS, WAVELENGTH};
    if let Some(bad) = lines.iter().find(|nm| !WAVELENGTH.contains(**nm * 1e-9)) {
        return fail(
            format!(
                "--lines: expected wavelengths in nm from {}, found {}",
                WAVELENGTH.describe(),
                units::show_number(*bad)
            ),
            Exit::BadInput,
        );
    }
    if let Some(p) = photons
        && !PHOTONS.contains(p)
    {
        return fail(
            format!(
                "--photons: expected a number of photons per pulse {}, found {}",
                PHOTONS.describe(),
                units::show_number(p)
            ),
            Exit::BadInput,
        );
    }
    let a = match analysis::analyse_with(&d, None) {
        Ok(a) => a,
        Err(e) => return fail(&e, analysis_exit(&e)),
    };
    let t = &a.network.tube;
    let chain = Chain {
        gain: a.op.gain(),
        collection: t.collection,
        excess_noise: t.excess_noise_factor(&a.op.tube_gap_volts()),
        divider_amps: a.quiescent_amps,
        max_anode_amps: d
            .tube
            .max_anode_current
            .get::<uom::si::electric_current::ampere>(),
        first_stage_gain: t.deltas(&a.op.tube_gap_volts()).next().unwrap_or(1.0),
    };
    let photons = photons
        .or(a.signal.as_ref().map(|s| s.photons_at_cathode))
        .unwrap_or(1000.0);
    let list: Vec<(f64, String)> = if lines.is_empty() {
        COMMON_LINES
            .iter()
            .map(|(nm, l)| (*nm, l.to_string()))
            .collect()
    } else {
        lines.iter().map(|nm| (*nm, String::new())).collect()
    };
    let mut cathodes = vec![d.signal.cathode.clone()];
    for c in builtin_cathodes() {
        if let Some(k) = Cathode::builtin(&c.key, None)
            && k.key != cathodes[0].key
        {
            cathodes.push(k);
        }
    }
    let rows = light_match(&d, &chain, &list, &cathodes, photons);
    let mut out = String::new();
    let _ = writeln!(out, "{}", dynode::safety::CLOSING_CAUTION);
    let count = |x: f64| {
        if x == 0.0 {
            "0".to_string()
        } else if x < 10.0 {
            format!("{x:.3}")
        } else if x < 1e5 {
            format!("{x:.0}")
        } else {
            format!("{x:.3e}")
        }
    };
    let _ = writeln!(
        out,
        "\nLight sources × cathodes for {}: {} photons at the cathode per pulse, gain {:.3e}, signal path {}",
        d.name,
        count(photons),
        chain.gain,
        dynode::signal::path_line(&d)
    );
    let _ = writeln!(
        out,
        "First cathode: the design's own ({}). Cells: QE / photoelectrons per pulse / peak at the load / verdict.\n",
        cathodes[0].label
    );
    for row in &rows {
        let _ = writeln!(out, "{:.1} nm {}", row.nm, row.label);
        let best = row
            .cells
            .iter()
            .map(|c| c.photoelectrons)
            .fold(0.0f64, f64::max);
        for c in &row.cells {
            let rel = if best > 0.0 {
                c.photoelectrons / best
            } else {
                0.0
            };
            let _ = writeln!(
                out,
                "  {:<26} QE {:>6.2} %  {:>10} pe  {:>10}  {:>5.0} % of best  {}",
                c.cathode,
                c.qe * 100.0,
                count(c.photoelectrons),
                format_eng(c.peak_volts, "V"),
                rel * 100.0,
                c.verdict.map_or("no readout given", |v| v.as_str())
            );
        }
    }
    let _ = writeln!(out, "\n{}", dynode::safety::CLOSING_CAUTION);
    print_exit(&out)
}
