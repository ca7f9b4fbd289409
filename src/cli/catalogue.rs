//! The catalogue commands: `cathodes` (the built-in curves with their provenance) and
//! `light-match` (wavelengths × cathodes through [`crate::budget::signal::light_match`]).

use std::path::Path;

use super::{CliError, Exit, print_text};
use crate::analysis;
use crate::design;
use crate::units;

/// The text of `dynode cathodes`.
pub fn cathodes() -> String {
    use crate::model::cathode::{Cathode, builtin_cathodes, builtin_windows};
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
pub fn light_match(design: &Path, lines: &[f64], photons: Option<f64>) -> Result<Exit, CliError> {
    use crate::budget::signal::{COMMON_LINES, Chain, light_match};
    use crate::model::cathode::{Cathode, builtin_cathodes};
    use crate::units::format_eng;
    use std::fmt::Write as _;
    let d = design::load(design)?;
    use crate::design::limits::{PHOTONS, WAVELENGTH};
    if let Some(bad) = lines.iter().find(|nm| !WAVELENGTH.contains(**nm * 1e-9)) {
        return Err(CliError::bad(format!(
            "--lines: expected wavelengths in nm from {}, found {}",
            WAVELENGTH.describe(),
            units::show_number(*bad)
        )));
    }
    if let Some(p) = photons
        && !PHOTONS.contains(p)
    {
        return Err(CliError::bad(format!(
            "--photons: expected a number of photons per pulse {}, found {}",
            PHOTONS.describe(),
            units::show_number(p)
        )));
    }
    let a = analysis::analyse_with(&d, None)?;
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
    let _ = writeln!(out, "{}", crate::budget::safety::CLOSING_CAUTION);
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
        crate::budget::signal::path_line(&d)
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
    let _ = writeln!(out, "\n{}", crate::budget::safety::CLOSING_CAUTION);
    print_text(&out)
}
