//! One function per command that runs solves: check the arguments, call the library, write.
//!
//! Every function checks its inputs and output target before any work, so that a refusal
//! writes nothing, and returns `Ok(Exit)` or a [`CliError`] whose kind sets the exit code.

use std::path::{Path, PathBuf};

use super::args::{
    CompareArgs, DataFormat, NetlistArgs, NewArgs, OutputArgs, ReportArgs, SpreadArgs, SweepArgs,
    TableFormat, TrainArgs,
};
use super::{CliError, Exit, check_output, emit, print_text, say, write_plots};
use crate::analysis;
use crate::cli::output;
use crate::design;
use crate::report::doc;
use crate::report::netlist::{self, NetlistOptions};
use crate::report::{self, Format};
use crate::units::{self, Kind};
use std::io::Write;

/// Drive periods in `netlist --supply`: enough for a lightly loaded, filtered multiplier to
/// settle from the textbook's charges (the demo's within 0.5 % after some 3000).
const SUPPLY_PERIODS: usize = 4000;

/// Read and check a design, and check that the output target may be written, before any
/// work is done (so that a refusal writes nothing).
fn load_for_output(design: &Path, out: &OutputArgs) -> Result<design::Design, CliError> {
    let d = crate::cli::basic::load_design(design)?;
    check_output(out, &[design])?;
    Ok(d)
}

/// The figures' SVG files as (file, title) for a document to link: as the reader of the
/// output file finds them (relative to its directory when the figures lie below it), or as
/// given on the command line. Empty without `--plots`.
fn figure_links(
    dir: Option<&Path>,
    figs: Option<&[crate::report::plot::Figure]>,
    out: &OutputArgs,
) -> Vec<(String, String)> {
    let (Some(dir), Some(figs)) = (dir, figs) else {
        return Vec::new();
    };
    let base = out
        .output
        .as_deref()
        .and_then(Path::parent)
        .filter(|p| !p.as_os_str().is_empty());
    let dir = base.and_then(|b| dir.strip_prefix(b).ok()).unwrap_or(dir);
    figs.iter()
        .map(|f| {
            let file = dir.join(format!("{}.svg", f.name));
            (file.display().to_string(), f.title.clone())
        })
        .collect()
}

/// `--pulses` must be a count from 1 to the largest train.
fn check_pulses(pulses: Option<usize>) -> Result<(), CliError> {
    if pulses.is_some_and(|p| p == 0 || p > crate::design::train::MAX_PULSES) {
        return Err(CliError::bad(format!(
            "--pulses: expected a count from 1 to {}",
            crate::design::train::MAX_PULSES
        )));
    }
    Ok(())
}

/// `dynode report`.
pub fn report(args: ReportArgs) -> Result<Exit, CliError> {
    let ReportArgs {
        design,
        format,
        strict,
        plots,
        out,
    } = args;
    let d = load_for_output(&design, &out)?;
    let a = analysis::analyse(&d)?;
    let figs = plots.as_ref().map(|_| report::figures::all(&a));
    // Refuse a bad figures directory before the report is written.
    if let (Some(dir), Some(figs)) = (&plots, &figs) {
        output::check_figures(dir, figs, &[design.as_path()], out.force)?;
    }
    let format: Format = format.into();
    let text = if format == Format::Markdown {
        let links = figure_links(plots.as_deref(), figs.as_deref(), &out);
        report::markdown::render_linked(&a, &links)
    } else {
        report::render(&a, format)?
    };
    emit(&text, &out, &[&design])?;
    if let (Some(dir), Some(figs)) = (&plots, &figs) {
        write_plots(dir, figs, &[design.as_path()], &out)?;
    }
    if strict && !a.warnings.is_empty() {
        if !out.quiet {
            say!(
                "dynode: {} warning(s) and --strict: exit 1",
                a.warnings.len()
            );
        }
        return Ok(Exit::Strict);
    }
    Ok(Exit::Ok)
}

/// The spread's configuration from its arguments, with the ranges checked.
fn spread_config(a: &SpreadArgs) -> Result<crate::study::spread::SpreadConfig, CliError> {
    let mut cfg = crate::study::spread::SpreadConfig {
        samples: a.samples,
        seed: a.seed,
        resistor_tolerance: a.resistor_tolerance,
        sigmas: a.sigmas,
        zener_tolerance: a.zener_tolerance,
        capacitor_tolerance: a.capacitor_tolerance,
        supply_setting: a.supply_setting,
        supply_drift: a.supply_drift,
        tube_gain_sigma: a.tube_gain_sigma,
        exponent_sigma: a.exponent_sigma,
        pulse_charge: None,
        max_deviation: a.max_deviation,
        gain_window: a.gain_window,
        target_gain: None,
        max_droop: None,
        supply_max_volts: None,
        linearity_samples: a.linearity_samples,
    };
    let (lo, hi) = crate::design::limits::SPREAD_SAMPLES;
    if !(lo..=hi).contains(&cfg.samples) {
        return Err(CliError::bad(format!(
            "--samples: expected {lo} to {hi}, found {}",
            cfg.samples
        )));
    }
    if cfg.linearity_samples > crate::design::limits::SPREAD_LINEARITY_SAMPLES {
        return Err(CliError::bad(format!(
            "--linearity-samples: expected 0 to {} (each costs about 80 solves), found {}",
            crate::design::limits::SPREAD_LINEARITY_SAMPLES,
            cfg.linearity_samples
        )));
    }
    if !crate::design::limits::SPREAD_SIGMAS.contains(cfg.sigmas) {
        return Err(CliError::bad(format!(
            "--sigmas: expected a number of standard deviations per tolerance from {}, found {}",
            crate::design::limits::SPREAD_SIGMAS.describe(),
            units::show_number(cfg.sigmas)
        )));
    }
    if !(cfg.tube_gain_sigma.is_finite() && (0.0..3.0).contains(&cfg.tube_gain_sigma)) {
        return Err(CliError::bad("--tube-gain-sigma: expected 0 to 3"));
    }
    if !(cfg.exponent_sigma.is_finite() && (0.0..0.2).contains(&cfg.exponent_sigma)) {
        return Err(CliError::bad("--exponent-sigma: expected 0 to 0.2"));
    }
    if let Some(t) = &a.pulse_charge {
        match units::parse(t, Kind::Charge) {
            Ok(q) if q > 0.0 => cfg.pulse_charge = Some(q),
            Ok(_) => return Err(CliError::bad("--pulse-charge: expected a positive charge")),
            Err(e) => return Err(CliError::bad(format!("--pulse-charge: {e}"))),
        }
    }
    if let Some(r) = &a.requirements {
        let file = r.display().to_string();
        let text = design::read_text(r, "requirements")?;
        let req = crate::study::sizing::parse_requirements(&text, &file)?;
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
    Ok(cfg)
}

/// `dynode spread`.
pub fn spread(args: SpreadArgs) -> Result<Exit, CliError> {
    use indicatif::{ProgressBar, ProgressStyle};
    use std::io::IsTerminal;
    let design = args.design.clone();
    let d = design::load(&design)?;
    let mut inputs: Vec<&Path> = vec![&design];
    if let Some(r) = &args.requirements {
        inputs.push(r.as_path());
    }
    check_output(&args.out, &inputs)?;
    let cfg = spread_config(&args)?;
    let out = &args.out;
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
    let result = crate::study::spread::run(&d, &cfg, &progress);
    if let Some(b) = &bar {
        b.finish_and_clear();
    }
    let s = result?;
    if s.failed >= s.config.samples {
        return Err(CliError::solve(format!(
            "{}: every one of the {} samples failed to solve; no statistics to show (are the tolerances far too wide?)",
            d.source, s.config.samples
        )));
    }
    let figs = args.plots.as_ref().map(|_| report::spread::figures(&s));
    let links = figure_links(args.plots.as_deref(), figs.as_deref(), out);
    let text = match args.format {
        TableFormat::Json => report::spread::json(&s)?,
        TableFormat::Text => report::spread::text(&s),
        TableFormat::Html => doc::to_html(&report::spread::document(&s, &links)),
        TableFormat::Markdown => doc::to_markdown(&report::spread::document(&s, &links)),
    };
    emit(&text, out, &[&design])?;
    if let (Some(dir), Some(figs)) = (&args.plots, &figs) {
        write_plots(dir, figs, &inputs, out)?;
    }
    Ok(Exit::Ok)
}

/// `dynode sweep`.
pub fn sweep(args: SweepArgs) -> Result<Exit, CliError> {
    let SweepArgs {
        design,
        vary,
        format,
        plots,
        out,
    } = args;
    let d = load_for_output(&design, &out)?;
    if vary.len() > 2 {
        return Err(CliError::bad("--vary: give one or two parameters"));
    }
    let mut axes = Vec::new();
    for v in &vary {
        axes.push(
            crate::study::sweep::parse_axis(v).map_err(|e| CliError::bad(format!("--vary {e}")))?,
        );
    }
    if axes.iter().map(|a| a.values.len()).product::<usize>() > 100_000 {
        return Err(CliError::bad("--vary: at most 100 000 points in all"));
    }
    if let Err(e) = crate::study::sweep::check_axes(&d, &axes) {
        return Err(CliError::bad(format!("--vary {e}")));
    }
    let s = crate::study::sweep::run(&d, &axes);
    let figs = plots.as_ref().map(|_| report::sweep::figures(&s));
    let links = figure_links(plots.as_deref(), figs.as_deref(), &out);
    let text = match format {
        TableFormat::Json => report::sweep::json(&d, &s)?,
        TableFormat::Text => report::sweep::text(&d, &s),
        TableFormat::Html => doc::to_html(&report::sweep::document(&d, &s, &links)),
        TableFormat::Markdown => doc::to_markdown(&report::sweep::document(&d, &s, &links)),
    };
    emit(&text, &out, &[&design])?;
    if let (Some(dir), Some(figs)) = (&plots, &figs) {
        write_plots(dir, figs, &[design.as_path()], &out)?;
    }
    Ok(Exit::Ok)
}

/// `dynode size`.
pub fn size(
    requirements: &Path,
    output: &Path,
    force: bool,
    quiet: bool,
) -> Result<Exit, CliError> {
    use crate::study::sizing;
    output::check_target(output, &[requirements], force)?;
    let file = requirements.display().to_string();
    let text = design::read_text(requirements, "requirements")?;
    let req = sizing::parse_requirements(&text, &file)?;
    let sized = sizing::size(&req)?;
    output::write_atomic(output, sized.text.as_bytes(), &[requirements], force)?;
    if !quiet {
        let _ = write!(
            std::io::stderr(),
            "{}",
            crate::report::printable(&sizing::summary(&sized))
        );
        say!(
            "dynode: wrote {}; check it with `dynode report {}`",
            output.display(),
            output.display()
        );
    }
    if sized.checks.iter().any(|c| !c.ok) {
        return Err(CliError::solve(
            "the sized design misses a requirement (see CHECKS above)",
        ));
    }
    Ok(Exit::Ok)
}

/// `dynode compare`.
pub fn compare(args: CompareArgs) -> Result<Exit, CliError> {
    let CompareArgs {
        designs,
        format,
        out,
    } = args;
    let inputs: Vec<&Path> = designs.iter().map(PathBuf::as_path).collect();
    check_output(&out, &inputs)?;
    let text = crate::cli::basic::compare(&designs, format == DataFormat::Json)?;
    emit(&text, &out, &inputs)?;
    Ok(Exit::Ok)
}

/// `dynode new`.
pub fn new(args: NewArgs) -> Result<Exit, CliError> {
    use crate::design::starter::{Starter, starting_points};
    let points = starting_points();
    if args.list {
        let mut text = String::from("Starting points for `dynode new --from NAME`:\n");
        for (name, what, _) in &points {
            text.push_str(&format!("  {name:<16} {what}\n"));
        }
        return print_text(&text);
    }
    let mut s: Starter = match &args.from {
        Some(name) => match points.iter().find(|p| p.0 == name) {
            Some(p) => p.2.clone(),
            None => {
                let names: Vec<&str> = points.iter().map(|p| p.0).collect();
                return Err(CliError::bad(format!(
                    "--from {name}: expected one of {}",
                    names.join(", ")
                )));
            }
        },
        None => points[0].2.clone(),
    };
    if args.from.is_none() {
        s.name = "New base (starter)".to_string();
    }
    if let Some(n) = args.stages {
        s.stages = n;
    }
    if let Some(v) = &args.supply {
        match units::parse(v, Kind::Voltage) {
            Ok(x) => s.supply = x.abs(),
            Err(e) => return Err(CliError::bad(format!("--supply: {e}"))),
        }
    }
    if args.anode_positive {
        s.polarity = design::Polarity::AnodePositive;
    }
    if let Some(c) = args.cathode {
        s.cathode = c;
        s.window = None;
    }
    if let Some(d) = args.divider {
        s.divider = d.into();
    }
    if let Some(i) = &args.divider_current {
        match units::parse(i, Kind::Current) {
            Ok(x) => s.divider_current = x,
            Err(e) => return Err(CliError::bad(format!("--divider-current: {e}"))),
        }
    }
    if let Some(l) = args.light {
        s.light = l.into();
    }
    if let Some(r) = args.readout {
        s.readout = r.into();
    }
    check_output(&args.out, &[])?;
    let text = crate::cli::basic::new_design(&s)?;
    emit(&text, &args.out, &[])?;
    Ok(Exit::Ok)
}

/// `dynode train`.
pub fn train(args: TrainArgs) -> Result<Exit, CliError> {
    let TrainArgs {
        design,
        format,
        pulses,
        train_only,
        out,
    } = args;
    let d = design::load(&design)?;
    if d.train.is_none() {
        return Err(CliError::bad(format!(
            "{}: train: the design gives no train block; add one such as train: Some((size: Charge(\"100 pC\"), shape: Gaussian(fwhm: \"10 ns\"), pattern: Periodic(count: 20, rate: \"1 MHz\")))",
            d.source
        )));
    }
    check_pulses(pulses)?;
    check_output(&out, &[design.as_path()])?;
    let count = match (pulses, &d.train) {
        (Some(n), _) => n,
        (None, Some(t)) => t.pattern.arrivals_len(),
        (None, None) => 0,
    };
    let mut a = analysis::analyse_with(&d, None)?;
    let train = with_pulse_progress(count, out.quiet, |progress| {
        let opts = crate::budget::pulsetrain::TrainOptions {
            pulses,
            train_only,
            progress,
        };
        crate::budget::pulsetrain::analyse(&d, &a.network.tube, &opts)
    })
    .map_err(|e| {
        let hint = if e.to_string().contains("try fewer pulses") {
            " (--pulses N solves the first N)"
        } else {
            ""
        };
        CliError::solve(format!("{}: {e}{hint}", d.source))
    })?;
    if let Some(t) = &train {
        a.warnings.extend(t.warnings.iter().cloned());
    }
    a.train = train;
    let text = report::train::render(&a, Format::from(format))?;
    emit(&text, &out, &[&design])?;
    Ok(Exit::Ok)
}

/// Run `work` with a progress bar of the pulses reached when the train is long (at least
/// [`PROGRESS_PULSES`]) and standard error is a terminal; `work` gets the counter to pass on.
fn with_pulse_progress<T>(
    count: usize,
    quiet: bool,
    work: impl FnOnce(Option<&'static std::sync::atomic::AtomicUsize>) -> T,
) -> T {
    use indicatif::{ProgressBar, ProgressStyle};
    use std::io::IsTerminal;
    use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
    static REACHED: AtomicUsize = AtomicUsize::new(0);
    if quiet || count < PROGRESS_PULSES || !std::io::stderr().is_terminal() {
        return work(None);
    }
    REACHED.store(0, Ordering::Relaxed);
    let done = AtomicBool::new(false);
    let bar = ProgressBar::new(count as u64);
    if let Ok(style) = ProgressStyle::with_template("{bar:40} {pos}/{len} pulses ({eta} left)") {
        bar.set_style(style);
    }
    let out = std::thread::scope(|scope| {
        scope.spawn(|| {
            while !done.load(Ordering::Relaxed) {
                bar.set_position(REACHED.load(Ordering::Relaxed) as u64);
                std::thread::sleep(std::time::Duration::from_millis(100));
            }
        });
        let out = work(Some(&REACHED));
        done.store(true, Ordering::Relaxed);
        out
    });
    bar.finish_and_clear();
    out
}

/// Trains from this many pulses show progress on a terminal.
const PROGRESS_PULSES: usize = 20_000;

/// `dynode netlist`.
pub fn netlist(args: NetlistArgs) -> Result<Exit, CliError> {
    let NetlistArgs {
        design,
        anode_current,
        train,
        pulses,
        supply,
        out,
    } = args;
    let d = load_for_output(&design, &out)?;
    let anode = match &anode_current {
        None => d.anode_current,
        Some(t) => match units::parse(t, Kind::Current) {
            Ok(v) if crate::design::limits::ANODE_CURRENT.contains(v) => {
                crate::units::ElectricCurrent::new::<uom::si::electric_current::ampere>(v)
            }
            Ok(v) => {
                return Err(CliError::bad(format!(
                    "--anode-current: {} (the design file's range for operating.anode_current)",
                    crate::design::limits::ANODE_CURRENT
                        .check(v)
                        .err()
                        .unwrap_or_default()
                )));
            }
            Err(e) => return Err(CliError::bad(format!("--anode-current: {e}"))),
        },
    };
    let a = analysis::analyse_with(&d, None)?;
    if supply {
        let Some(m) = &d.multiplier else {
            return Err(CliError::bad(format!(
                "{}: supply.multiplier: --supply needs a multiplier block in the design's supply",
                d.source
            )));
        };
        let Some(sm) = &a.supply_model else {
            return Err(CliError::solve(format!(
                "{}: supply.multiplier: the multiplier's steady state could not be found",
                d.source
            )));
        };
        let text = netlist::write_multiplier(m, sm.steady.load_ohms, SUPPLY_PERIODS);
        emit(&text, &out, &[&design])?;
        return Ok(Exit::Ok);
    }
    if train {
        let Some(spec) = &d.train else {
            return Err(CliError::bad(format!(
                "{}: train: --train needs a train block in the design",
                d.source
            )));
        };
        check_pulses(pulses)?;
        let pattern = pulses.map_or(spec.pattern, |p| spec.pattern.with_count(p));
        let base = crate::solve::transient::Base::from_design(&d, a.network.tube.clone());
        let g0 = match base.quiescent_state() {
            Ok((nv, _)) => {
                let gaps: Vec<f64> = (1..=d.tube.stages + 1).map(|j| nv[j] - nv[j - 1]).collect();
                a.network.tube.gain_for_gaps(&gaps)
            }
            Err(e) => return Err(CliError::solve(format!("{}: {e}", d.source))),
        };
        let qk = crate::budget::pulsetrain::cathode_charge(spec.size, &spec.shape, g0);
        let text = netlist::write_transient(
            &d,
            &a.network.tube,
            &pattern.arrivals(),
            &spec.shape,
            qk,
            true,
        );
        emit(&text, &out, &[&design])?;
        return Ok(Exit::Ok);
    }
    let mut ws = crate::solve::network::Workspace::default();
    let op = match a.network.solve_anode(anode, &mut ws) {
        Ok(op) => op,
        Err(e @ crate::solve::network::SolveError::Unreachable { .. }) => {
            return Err(CliError::bad(format!("{}: --anode-current: {e}", d.source)));
        }
        Err(e) => return Err(CliError::solve(format!("{}: {e}", d.source))),
    };
    let text = netlist::write(
        &d,
        &a.network.tube,
        &NetlistOptions {
            cathode_amps: op.cathode_amps,
            control_block: true,
        },
    );
    emit(&text, &out, &[&design])?;
    Ok(Exit::Ok)
}
