//! The `dynode` command line: parse arguments, call the library, map results to exit codes.
//!
//! The binary is `std::process::exit(dynode::cli::run(std::env::args_os()))`. [`run`] parses
//! with clap ([`args`]), dispatches to one function per command ([`commands`], [`catalogue`]),
//! each returning `Result<Exit, CliError>`, prints the error on one prefixed line and turns it
//! into an exit code through the one mapping in [`exit`]. Only this module knows clap and the
//! flag names; data goes to stdout, messages to stderr.

mod args;
pub mod basic;
mod catalogue;
mod commands;
pub mod exit;
pub mod output;
pub mod serve;

use std::ffi::OsString;
use std::io::Write;
use std::path::Path;

use clap::Parser;

pub use exit::{CliError, Exit, Kind};

use args::{Cli, Command, OutputArgs};

/// `eprintln!` that never panics: a message that cannot be shown is no reason to crash.
macro_rules! say {
    ($($t:tt)*) => {{
        let _ = writeln!(
            std::io::stderr(),
            "{}",
            $crate::report::printable(&format!($($t)*))
        );
    }};
}
pub(crate) use say;

/// Run the command line `args` (the program's name first) and return the process's exit code.
pub fn run<I, T>(args: I) -> i32
where
    I: IntoIterator<Item = T>,
    T: Into<OsString> + Clone,
{
    output::install_interrupt_cleanup();
    let cli = match Cli::try_parse_from(args) {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return if e.use_stderr() {
                Exit::BadInput as i32
            } else {
                Exit::Ok as i32
            };
        }
    };
    match dispatch(cli.command) {
        Ok(exit) => exit as i32,
        Err(e) => {
            if let Some(m) = &e.message {
                say!("dynode: error: {m}");
            }
            e.exit() as i32
        }
    }
}

/// One command, to its outcome.
fn dispatch(command: Command) -> Result<Exit, CliError> {
    match command {
        Command::Completions { shell } => {
            use clap::CommandFactory;
            let mut script = Vec::new();
            clap_complete::generate(shell, &mut Cli::command(), "dynode", &mut script);
            print_out(&script)?;
            Ok(Exit::Ok)
        }
        Command::Check { design } => print_text(&crate::cli::basic::check(&design)?),
        Command::Cathodes => print_text(&catalogue::cathodes()),
        Command::LightMatch {
            design,
            lines,
            photons,
        } => catalogue::light_match(&design, &lines, photons),
        Command::Serve { design, port } => {
            let shown = design.display().to_string();
            crate::cli::serve::run(&design, port, |addr| {
                say!("dynode: serving {shown} at http://{addr}/ (Ctrl-C stops)");
            })?;
            Ok(Exit::Ok)
        }
        Command::Size {
            requirements,
            output,
            force,
            quiet,
        } => commands::size(&requirements, &output, force, quiet),
        Command::Spread(a) => commands::spread(a),
        Command::Sweep(a) => commands::sweep(a),
        Command::Report(a) => commands::report(a),
        Command::Compare(a) => commands::compare(a),
        Command::New(a) => commands::new(a),
        Command::Train(a) => commands::train(a),
        Command::Netlist(a) => commands::netlist(a),
    }
}

/// Write `bytes` to standard output and flush. A write that fails (a full disk) is an error
/// with a message and exit 2; a closed pipe (`| head`) ends quietly with exit 2, as the reader
/// has gone and no one is left to read a message.
fn print_out(bytes: &[u8]) -> Result<(), CliError> {
    let text = String::from_utf8_lossy(bytes);
    let bytes = crate::report::printable(&text);
    let bytes = bytes.as_bytes();
    let mut stdout = std::io::stdout().lock();
    match stdout.write_all(bytes).and_then(|_| stdout.flush()) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => {
            Err(CliError::quiet(Kind::BadInput))
        }
        Err(e) => Err(CliError::bad(format!(
            "standard output: cannot write: {e}; the output is incomplete"
        ))),
    }
}

/// [`print_out`] as the command's outcome.
fn print_text(text: &str) -> Result<Exit, CliError> {
    print_out(text.as_bytes())?;
    Ok(Exit::Ok)
}

/// Write `text` to the output file (atomically) or to standard output. None of `inputs` may
/// be overwritten.
fn emit(text: &str, out: &OutputArgs, inputs: &[&Path]) -> Result<(), CliError> {
    match &out.output {
        Some(path) => {
            let text = crate::report::printable(text);
            output::write_atomic(path, text.as_bytes(), inputs, out.force)?;
            if !out.quiet {
                say!("dynode: wrote {}", path.display());
            }
        }
        None => print_out(text.as_bytes())?,
    }
    Ok(())
}

/// Write the figures into `dir` and say how many files that made.
fn write_plots(
    dir: &Path,
    figs: &[crate::report::plot::Figure],
    inputs: &[&Path],
    out: &OutputArgs,
) -> Result<(), CliError> {
    let paths = output::write_figures(dir, figs, inputs, out.force)?;
    if !out.quiet {
        say!(
            "dynode: wrote {} figure files in {}",
            paths.len(),
            dir.display()
        );
    }
    Ok(())
}

/// Check that the output target may be written before any work is done (so that a refusal
/// writes nothing).
fn check_output(out: &OutputArgs, inputs: &[&Path]) -> Result<(), CliError> {
    if let Some(p) = &out.output {
        output::check_target(p, inputs, out.force)?;
    }
    Ok(())
}
