//! Writing results: atomically, never over an input, never over an existing file unless told,
//! never through a link or into a device.
//!
//! A file is written to a temporary sibling created exclusively with an unpredictable name
//! (`tempfile`), then renamed into place, so an interrupted run leaves either the old file or
//! the new one, never half of one. A temporary file is removed when the write fails, and on
//! SIGINT, SIGTERM or SIGHUP by the handler that [`install_interrupt_cleanup`] sets up.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// Why an output could not be written.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    /// The output path names an input file.
    #[error("{0}: refusing to write over an input file; choose another output path")]
    IsInput(String),
    /// The output exists and `--force` was not given.
    #[error("{0}: the file exists; pass --force to replace it")]
    Exists(String),
    /// The output path is not a regular file (a link, a directory, a device…).
    #[error(
        "{0}: this is {1}, not a regular file; refusing to write to it even with --force (choose a plain file name)"
    )]
    NotRegular(String, &'static str),
    /// The operating system refused.
    #[error("{path}: cannot write: {reason}")]
    Io {
        /// Output path.
        path: String,
        /// Reason.
        reason: String,
    },
}

/// Temporary files being written now, removed by the interrupt handler.
static PENDING: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());

fn pending() -> std::sync::MutexGuard<'static, Vec<PathBuf>> {
    PENDING.lock().unwrap_or_else(|e| e.into_inner())
}

/// On SIGINT, SIGTERM or SIGHUP remove every temporary file being written, then exit with
/// 130. Call once at start-up; a second call (or a platform without signals) is ignored.
pub fn install_interrupt_cleanup() {
    let _ = ctrlc::set_handler(|| {
        for p in pending().drain(..) {
            let _ = std::fs::remove_file(p);
        }
        let _ = writeln!(
            std::io::stderr(),
            "dynode: interrupted; nothing was written"
        );
        std::process::exit(130);
    });
}

fn same_file(a: &Path, b: &Path) -> bool {
    match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
        (Ok(x), Ok(y)) => x == y,
        _ => false,
    }
}

/// What sits at `path`, without following a link: `Ok(false)` nothing, `Ok(true)` a regular
/// file, an error for anything else.
fn regular_or_absent(path: &Path) -> Result<bool, OutputError> {
    let shown = path.display().to_string();
    match std::fs::symlink_metadata(path) {
        Ok(m) => {
            let t = m.file_type();
            if t.is_file() {
                Ok(true)
            } else if t.is_symlink() {
                Err(OutputError::NotRegular(shown, "a symbolic link"))
            } else if t.is_dir() {
                Err(OutputError::NotRegular(shown, "a directory"))
            } else {
                Err(OutputError::NotRegular(shown, "a device, pipe or socket"))
            }
        }
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(false),
        Err(e) => Err(OutputError::Io {
            path: shown,
            reason: e.to_string(),
        }),
    }
}

/// Check that `path` may be written: not one of `inputs`, a regular file or absent, and absent
/// unless `force`.
pub fn check_target(path: &Path, inputs: &[&Path], force: bool) -> Result<(), OutputError> {
    let shown = path.display().to_string();
    if inputs.iter().any(|i| same_file(i, path)) {
        return Err(OutputError::IsInput(shown));
    }
    if regular_or_absent(path)? && !force {
        return Err(OutputError::Exists(shown));
    }
    Ok(())
}

fn parent_dir(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// Write `bytes` to `path` atomically: a temporary file created exclusively in the same
/// directory, synced, then renamed into place (refusing an existing file unless `force`).
pub fn write_atomic(
    path: &Path,
    bytes: &[u8],
    inputs: &[&Path],
    force: bool,
) -> Result<(), OutputError> {
    check_target(path, inputs, force)?;
    let io = |e: std::io::Error| OutputError::Io {
        path: path.display().to_string(),
        reason: e.to_string(),
    };
    let mut builder = tempfile::Builder::new();
    builder.prefix(".dynode-").suffix(".tmp");
    // tempfile creates with mode 0600; an output is an ordinary file, so let the umask decide
    // as for any file a program creates (0666 & !umask).
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        builder.permissions(std::fs::Permissions::from_mode(0o666));
    }
    // Create and register under the lock, so that an interrupt between the two (the handler
    // waits for the lock) cannot leave the temporary file behind.
    let mut tmp = {
        let mut list = pending();
        let tmp = builder.tempfile_in(parent_dir(path)).map_err(io)?;
        list.push(tmp.path().to_path_buf());
        tmp
    };
    let tmp_path = tmp.path().to_path_buf();
    let written = tmp
        .write_all(bytes)
        .and_then(|_| tmp.as_file().sync_all())
        .map_err(io)
        .and_then(|_| {
            let placed = if force {
                tmp.persist(path)
            } else {
                tmp.persist_noclobber(path)
            };
            // On failure the temporary file comes back in the error and is removed on drop.
            placed.map(|_| ()).map_err(|e| match e.error.kind() {
                std::io::ErrorKind::AlreadyExists => {
                    OutputError::Exists(path.display().to_string())
                }
                _ => io(e.error),
            })
        });
    pending().retain(|p| *p != tmp_path);
    written
}

/// Check that [`write_figures`] may write into `dir`, writing nothing: `dir` is a directory or
/// absent, and no figure file is an input, anything but a regular file, or an existing file
/// without `force`. Callers run it before writing anything else, so a refusal leaves no report
/// behind either.
pub fn check_figures(
    dir: &Path,
    figures: &[crate::report::plot::Figure],
    inputs: &[&Path],
    force: bool,
) -> Result<(), OutputError> {
    if let Ok(m) = std::fs::symlink_metadata(dir)
        && !m.is_dir()
    {
        return Err(OutputError::Io {
            path: dir.display().to_string(),
            reason: "--plots expects a directory, and this is not one (a file or a link)"
                .to_string(),
        });
    }
    for f in figures {
        for ext in ["svg", "png"] {
            check_target(&dir.join(format!("{}.{ext}", f.name)), inputs, force)?;
        }
    }
    Ok(())
}

/// Write every figure as `DIR/<name>.svg` and `DIR/<name>.png`, each atomically. Refuses an
/// existing file without `force`. Returns the paths written.
pub fn write_figures(
    dir: &Path,
    figures: &[crate::report::plot::Figure],
    inputs: &[&Path],
    force: bool,
) -> Result<Vec<PathBuf>, OutputError> {
    let io = |p: &Path, e: String| OutputError::Io {
        path: p.display().to_string(),
        reason: e,
    };
    check_figures(dir, figures, inputs, force)?;
    std::fs::create_dir_all(dir).map_err(|e| io(dir, e.to_string()))?;
    let mut written = Vec::new();
    for f in figures {
        let svg_path = dir.join(format!("{}.svg", f.name));
        let svg = crate::report::plot::svg(f).map_err(|e| io(&svg_path, e.to_string()))?;
        write_atomic(&svg_path, svg.as_bytes(), inputs, force)?;
        written.push(svg_path);
        let png_path = dir.join(format!("{}.png", f.name));
        let png = crate::report::plot::png_bytes(f).map_err(|e| io(&png_path, e.to_string()))?;
        write_atomic(&png_path, &png, inputs, force)?;
        written.push(png_path);
    }
    Ok(written)
}
