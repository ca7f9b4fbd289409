//! The command line's words: clap-derived argument types, used only by [`super::run`].
//!
//! Nothing outside `cli` sees these types; the library's model, solves and reports take plain
//! values (a [`crate::report::Format`], a [`crate::study::spread::SpreadConfig`]) built from them.

use std::path::PathBuf;

use clap::{Parser, Subcommand};

use crate::report::Format;
use crate::units::{self, Kind};

#[derive(Parser)]
#[command(
    name = "dynode",
    version,
    about = "Design and check photomultiplier-tube bases: divider, gain, linearity, safety.",
    after_help = "Example:\n  dynode report designs/rooftop-paddle.ron\n  dynode report designs/rooftop-paddle.ron --format json -o paddle.json\n  dynode size designs/requirements/paddle-rebuild.ron -o paddle-sized.ron\n  dynode spread designs/rooftop-paddle.ron --samples 100000 --seed 7\n  dynode sweep designs/rooftop-paddle.ron --vary supply.volts=900V..1500V:13\n\nHIGH VOLTAGE: the circuits this tool describes can kill. See SAFETY.md."
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(clap::Args)]
pub struct OutputArgs {
    /// Write to FILE instead of stdout (atomically; never over an input file).
    #[arg(short, long, value_name = "FILE")]
    pub output: Option<PathBuf>,
    /// Replace FILE if it exists.
    #[arg(long)]
    pub force: bool,
    /// Print no messages on stderr (errors still print).
    #[arg(short, long)]
    pub quiet: bool,
}

/// Output formats of `compare` (a table, not a report).
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum DataFormat {
    /// Plain text for a terminal or a lab notebook.
    Text,
    /// JSON, SI base units (keys in docs/json.md).
    Json,
}

/// Output formats of `spread` and `sweep`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum TableFormat {
    /// Plain text for a terminal or a lab notebook.
    Text,
    /// JSON, SI base units (keys in docs/json.md).
    Json,
    /// One HTML page with real tables (figures shown when --plots is given).
    Html,
    /// Markdown with real tables (figures linked when --plots is given).
    #[value(name = "markdown", alias = "md")]
    Markdown,
}

#[derive(Subcommand)]
pub enum Command {
    /// Solve the divider with the tube's currents and print the full report.
    #[command(
        after_help = "Examples:\n  dynode report designs/rooftop-paddle.ron\n  dynode report designs/rooftop-paddle.ron --format json -o paddle.json\n  dynode report designs/rooftop-paddle.ron --format html -o paddle.html --plots figures/"
    )]
    Report(ReportArgs),
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
    Train(TrainArgs),
    /// Write a SPICE netlist of the solved network (behavioural dynode sources).
    #[command(
        after_help = "Example:\n  dynode netlist designs/rooftop-paddle.ron -o base.cir\n  ngspice -b base.cir"
    )]
    Netlist(NetlistArgs),
    /// Tolerance statistics: Monte Carlo over parts, supply and tube spread.
    #[command(
        after_help = "Example:\n  dynode spread designs/rooftop-paddle.ron --samples 100000 --seed 7\n  dynode spread designs/rooftop-paddle.ron --resistor-tolerance 5% --tube-gain-sigma 0 --format json -o spread.json\n\nTolerances are read as --sigmas standard deviations of a normal distribution (default 3)."
    )]
    Spread(SpreadArgs),
    /// Vary one or two fields of the design and tabulate gain, divider current, linearity, pulse.
    #[command(
        after_help = "Example:\n  dynode sweep designs/rooftop-paddle.ron --vary supply.volts=900V..1500V:13\n  dynode sweep designs/rooftop-paddle.ron --vary divider.gaps[11]=470k..2M:9:log --vary operating.anode_current=1uA..20uA:4\n  dynode sweep designs/rooftop-paddle.ron --vary 'divider.gaps[*]=0.33..1:5'\n\nGaps count from 1 (gap 1 = K–D1) as in the design file; divider.gaps[*] scales every divider resistor.\nFields: supply.volts, divider.gaps[i], divider.gaps[*], load.resistance, tube.gain.exponent, operating.anode_current, … (docs/design-file.md lists them all)."
    )]
    Sweep(SweepArgs),
    /// Set two or more designs side by side: gap voltages, divider current, gain, linearity
    /// limits, pulse, verdicts, dissipation, stored charge, bleed-down; differences marked.
    #[command(
        after_help = "Example:\n  dynode compare designs/rooftop-paddle.ron paddle-1M.ron\n  dynode compare a.ron b.ron c.ron --format json -o compare.json"
    )]
    Compare(CompareArgs),
    /// Write a commented starter design from a few answers or a named starting point.
    #[command(
        after_help = "Examples:\n  dynode new --from paddle -o my-paddle.ron\n  dynode new --stages 12 --supply 1600V --divider tapered --light laser --readout scope -o timing.ron\n  dynode new --list\n\nEvery number it writes is an invented starting value, marked for replacing with your own."
    )]
    New(NewArgs),
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

/// Output formats of `report` and `train` (the same words as [`Format`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum FormatArg {
    /// Plain text for a terminal or a lab notebook.
    Text,
    /// JSON, SI base units, documented schema.
    Json,
    /// One self-contained HTML file (figures inline, no scripts, prints well).
    Html,
    /// Markdown for notebooks and issue trackers.
    Markdown,
    /// The parts list as CSV (one line per part, for a spreadsheet or an order).
    #[value(name = "parts-csv")]
    PartsCsv,
}

impl From<FormatArg> for Format {
    fn from(f: FormatArg) -> Format {
        match f {
            FormatArg::Text => Format::Text,
            FormatArg::Json => Format::Json,
            FormatArg::Html => Format::Html,
            FormatArg::Markdown => Format::Markdown,
            FormatArg::PartsCsv => Format::PartsCsv,
        }
    }
}

/// A fraction from 0 up to (not including) 100 %, in the design file's notation.
pub fn ratio(text: &str) -> Result<f64, String> {
    match units::parse(text, Kind::Ratio) {
        Ok(v) if (0.0..1.0).contains(&v) => Ok(v),
        Ok(v) => Err(format!(
            "expected a fraction from 0 up to (not including) 100 %, found {} %",
            units::show_number(v * 100.0)
        )),
        Err(e) => Err(e.to_string()),
    }
}

// The arguments of `report` (a plain comment: a doc comment would replace the command's help).
#[derive(clap::Args)]
pub struct ReportArgs {
    /// The design file (RON).
    pub design: PathBuf,
    /// Output format.
    #[arg(short, long, value_enum, default_value_t = FormatArg::Text)]
    pub format: FormatArg,
    /// Exit with code 1 when the design breaks a limit (any warning).
    #[arg(long)]
    pub strict: bool,
    /// Also write every figure as SVG and PNG into DIR (stable names, e.g. linearity.png).
    #[arg(long, value_name = "DIR")]
    pub plots: Option<PathBuf>,
    #[command(flatten)]
    pub out: OutputArgs,
}

// The arguments of `train` (a plain comment: a doc comment would replace the command's help).
#[derive(clap::Args)]
pub struct TrainArgs {
    /// The design file (RON), with a `train` block.
    pub design: PathBuf,
    /// Output format.
    #[arg(short, long, value_enum, default_value_t = FormatArg::Text)]
    pub format: FormatArg,
    /// Replace the pattern's pulse count (bursts keep their number of bursts).
    #[arg(long, value_name = "N")]
    pub pulses: Option<usize>,
    /// Solve the train only: skip the pulse-linearity scan, sizing and taper comparison.
    #[arg(long)]
    pub train_only: bool,
    #[command(flatten)]
    pub out: OutputArgs,
}

// The arguments of `netlist` (a plain comment: a doc comment would replace the command's help).
#[derive(clap::Args)]
pub struct NetlistArgs {
    /// The design file (RON).
    pub design: PathBuf,
    /// Average anode current to set the cathode current for (default: the design's).
    #[arg(long, value_name = "CURRENT")]
    pub anode_current: Option<String>,
    /// Write a transient netlist of the design's pulse train (`.tran`, one `meas` per pulse)
    /// instead of the DC operating point.
    #[arg(long, conflicts_with = "anode_current")]
    pub train: bool,
    /// With --train: replace the pattern's pulse count.
    #[arg(long, value_name = "N", requires = "train")]
    pub pulses: Option<usize>,
    /// Write a transient netlist of the supply's voltage multiplier (supply.multiplier)
    /// under the base's load at the operating point, run to its steady state, instead.
    #[arg(long, conflicts_with_all = ["anode_current", "train"])]
    pub supply: bool,
    #[command(flatten)]
    pub out: OutputArgs,
}

// The arguments of `spread` (a plain comment: a doc comment would replace the command's help).
#[derive(clap::Args)]
pub struct SpreadArgs {
    /// The design file (RON).
    pub design: PathBuf,
    /// Number of samples.
    #[arg(long, default_value_t = 100_000)]
    pub samples: usize,
    /// Seed; the result is the same for a seed whatever the thread count.
    #[arg(long, default_value_t = 7)]
    pub seed: u64,
    /// Resistor tolerance (default: the design's resistors.tolerance).
    #[arg(long, value_name = "FRACTION", value_parser = ratio)]
    pub resistor_tolerance: Option<f64>,
    /// Zener voltage tolerance.
    #[arg(long, value_name = "FRACTION", value_parser = ratio, default_value = "5%")]
    pub zener_tolerance: f64,
    /// Capacitor tolerance.
    #[arg(long, value_name = "FRACTION", value_parser = ratio, default_value = "10%")]
    pub capacitor_tolerance: f64,
    /// How many standard deviations a tolerance stands for.
    #[arg(long, default_value_t = 3.0)]
    pub sigmas: f64,
    /// Supply setting accuracy (default: supply.quality.setting_accuracy, else 0.5 %).
    #[arg(long, value_name = "FRACTION", value_parser = ratio)]
    pub supply_setting: Option<f64>,
    /// Supply drift bound, uniform (default: supply.quality.drift, else none).
    #[arg(long, value_name = "FRACTION", value_parser = ratio)]
    pub supply_drift: Option<f64>,
    /// Standard deviation of ln(tube gain) between tubes (0 to switch off).
    #[arg(long, value_name = "SIGMA", default_value_t = crate::study::spread::DEFAULT_TUBE_GAIN_SIGMA)]
    pub tube_gain_sigma: f64,
    /// Standard deviation of the secondary-emission exponent k.
    #[arg(long, value_name = "SIGMA", default_value_t = crate::study::spread::DEFAULT_EXPONENT_SIGMA)]
    pub exponent_sigma: f64,
    /// Charge per anode pulse, for the droop figures (e.g. "200pC").
    #[arg(long, value_name = "CHARGE")]
    pub pulse_charge: Option<String>,
    /// Yield: largest |DC deviation| at the operating point.
    #[arg(long, value_name = "FRACTION", value_parser = ratio)]
    pub max_deviation: Option<f64>,
    /// Yield: small-signal gain window around the target.
    #[arg(long, value_name = "FRACTION", value_parser = ratio)]
    pub gain_window: Option<f64>,
    /// Take the target gain, allowed deviation, droop and pulse charge from a requirements file.
    #[arg(long, value_name = "FILE")]
    pub requirements: Option<PathBuf>,
    /// Samples on which the linearity curve is traced.
    #[arg(long, default_value_t = 200)]
    pub linearity_samples: usize,
    /// Output format.
    #[arg(short, long, value_enum, default_value_t = TableFormat::Text)]
    pub format: TableFormat,
    /// Also write the histograms as SVG and PNG into DIR (spread-gain.png, …).
    #[arg(long, value_name = "DIR")]
    pub plots: Option<PathBuf>,
    #[command(flatten)]
    pub out: OutputArgs,
}

// The arguments of `sweep` (a plain comment: a doc comment would replace the command's help).
#[derive(clap::Args)]
pub struct SweepArgs {
    /// The design file (RON).
    pub design: PathBuf,
    /// PATH=START..END:COUNT[:log]; give it once or twice (a grid).
    #[arg(long, value_name = "SPEC", required = true)]
    pub vary: Vec<String>,
    /// Output format.
    #[arg(short, long, value_enum, default_value_t = TableFormat::Text)]
    pub format: TableFormat,
    /// Also write the figures as SVG and PNG into DIR (sweep-gain.png, sweep-linearity.png).
    #[arg(long, value_name = "DIR")]
    pub plots: Option<PathBuf>,
    #[command(flatten)]
    pub out: OutputArgs,
}

// The arguments of `compare` (a plain comment: a doc comment would replace the command's help).
#[derive(clap::Args)]
pub struct CompareArgs {
    /// The design files (RON), two or more.
    #[arg(required = true, num_args = 2..)]
    pub designs: Vec<PathBuf>,
    /// Output format.
    #[arg(short, long, value_enum, default_value_t = DataFormat::Text)]
    pub format: DataFormat,
    #[command(flatten)]
    pub out: OutputArgs,
}

// The arguments of `new` (a plain comment: a doc comment would replace the command's help).
#[derive(clap::Args)]
pub struct NewArgs {
    /// Start from a named starting point (`--list` shows them); other flags change it.
    #[arg(long, value_name = "NAME")]
    pub from: Option<String>,
    /// List the starting points and exit.
    #[arg(long)]
    pub list: bool,
    /// Number of dynodes.
    #[arg(long, value_name = "N")]
    pub stages: Option<usize>,
    /// Supply voltage magnitude (e.g. "1100V").
    #[arg(long, value_name = "VOLTS")]
    pub supply: Option<String>,
    /// Anode at +HV instead of the cathode at −HV.
    #[arg(long)]
    pub anode_positive: bool,
    /// Built-in cathode curve (`dynode cathodes` lists them).
    #[arg(long, value_name = "NAME")]
    pub cathode: Option<String>,
    /// Divider style.
    #[arg(long, value_enum)]
    pub divider: Option<DividerArg>,
    /// Divider current with no tube current (e.g. "200uA").
    #[arg(long, value_name = "CURRENT")]
    pub divider_current: Option<String>,
    /// What lights the cathode.
    #[arg(long, value_enum)]
    pub light: Option<LightArg>,
    /// What reads the pulse.
    #[arg(long, value_enum)]
    pub readout: Option<ReadoutArg>,
    #[command(flatten)]
    pub out: OutputArgs,
}

/// `new --divider` (the words of [`crate::design::starter::DividerStyle`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum DividerArg {
    /// Every gap the same.
    Equal,
    /// K–D1 twice the others (better photoelectron collection; common practice).
    FirstDouble,
    /// K–D1 doubled and the last three gaps raised 1.25×, 1.5×, 2× (pulse linearity; common
    /// practice).
    Tapered,
}

impl From<DividerArg> for crate::design::starter::DividerStyle {
    fn from(a: DividerArg) -> Self {
        match a {
            DividerArg::Equal => Self::Equal,
            DividerArg::FirstDouble => Self::FirstDouble,
            DividerArg::Tapered => Self::Tapered,
        }
    }
}

/// `new --light` (the words of [`crate::design::starter::LightKind`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum LightArg {
    /// No light block (DC figures only).
    None,
    /// A plastic scintillator crossed by charged particles.
    Scintillator,
    /// A pulsed LED.
    Led,
    /// A pulsed laser.
    Laser,
}

impl From<LightArg> for crate::design::starter::LightKind {
    fn from(a: LightArg) -> Self {
        match a {
            LightArg::None => Self::None,
            LightArg::Scintillator => Self::Scintillator,
            LightArg::Led => Self::Led,
            LightArg::Laser => Self::Laser,
        }
    }
}

/// `new --readout` (the words of [`crate::design::starter::ReadoutKind`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum ReadoutArg {
    /// No readout block.
    None,
    /// An oscilloscope on a 50 Ω cable, terminated at the oscilloscope.
    Scope,
}

impl From<ReadoutArg> for crate::design::starter::ReadoutKind {
    fn from(a: ReadoutArg) -> Self {
        match a {
            ReadoutArg::None => Self::None,
            ReadoutArg::Scope => Self::Scope,
        }
    }
}
