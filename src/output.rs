//! Writing results: atomically, never over an input, never over an existing file unless told.
//!
//! A file is written to a temporary sibling and renamed into place, so an interrupted run leaves
//! either the old file or the new one, never half of one.

use std::io::Write;
use std::path::{Path, PathBuf};

/// Why an output could not be written.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    /// The output path names an input file.
    #[error("{0}: refusing to write over an input file; choose another output path")]
    IsInput(String),
    /// The output exists and `--force` was not given.
    #[error("{0}: the file exists; pass --force to replace it")]
    Exists(String),
    /// The operating system refused.
    #[error("{path}: cannot write: {reason}")]
    Io {
        /// Output path.
        path: String,
        /// Reason.
        reason: String,
    },
}

fn same_file(a: &Path, b: &Path) -> bool {
    match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
        (Ok(x), Ok(y)) => x == y,
        _ => false,
    }
}

/// Check that `path` may be written: not one of `inputs`, and absent unless `force`.
pub fn check_target(path: &Path, inputs: &[&Path], force: bool) -> Result<(), OutputError> {
    let shown = path.display().to_string();
    if inputs.iter().any(|i| same_file(i, path)) {
        return Err(OutputError::IsInput(shown));
    }
    if path.exists() && !force {
        return Err(OutputError::Exists(shown));
    }
    Ok(())
}

/// Write `bytes` to `path` atomically (temporary file in the same directory, then rename).
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
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_else(|| "output".to_string());
    let tmp = dir.join(format!(".{name}.{}.tmp", std::process::id()));
    let result = (|| {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if let Err(e) = result {
        let _ = std::fs::remove_file(&tmp);
        return Err(io(e));
    }
    Ok(())
}

/// Check that [`write_figures`] may write into `dir`, writing nothing: `dir` is a directory or
/// absent, and no figure file is an input or exists without `force`. Callers run it before
/// writing anything else, so a refusal leaves no report behind either.
pub fn check_figures(
    dir: &Path,
    figures: &[crate::plot::Figure],
    inputs: &[&Path],
    force: bool,
) -> Result<(), OutputError> {
    if dir.exists() && !dir.is_dir() {
        return Err(OutputError::Io {
            path: dir.display().to_string(),
            reason: "--plots expects a directory, and this is a file".to_string(),
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
    figures: &[crate::plot::Figure],
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
        let svg = crate::plot::svg(f).map_err(|e| io(&svg_path, e.to_string()))?;
        write_atomic(&svg_path, svg.as_bytes(), inputs, true)?;
        written.push(svg_path);
        let png_path = dir.join(format!("{}.png", f.name));
        let tmp = dir.join(format!(".{}.{}.tmp.png", f.name, std::process::id()));
        let result = crate::plot::png(f, &tmp)
            .map_err(|e| io(&png_path, e.to_string()))
            .and_then(|_| {
                std::fs::rename(&tmp, &png_path).map_err(|e| io(&png_path, e.to_string()))
            });
        if let Err(e) = result {
            let _ = std::fs::remove_file(&tmp);
            return Err(e);
        }
        written.push(png_path);
    }
    Ok(written)
}
