//! The DC operating point against ngspice (a general-purpose circuit simulator) on the same
//! netlist: every electrode potential within 1e-6 relative at three anode currents, one of them
//! past the +1 % linearity point.

use dynode::analysis;
use dynode::design;
use dynode::report::netlist::{self, NetlistOptions};
use dynode::solve::network::Workspace;

use crate::common::{crate_path, ngspice_available, ngspice_batch, rel, temp_dir};

/// Run ngspice in batch mode and read the `v(...) = value` lines it prints, in order.
pub fn run_ngspice(netlist_text: &str, dir: &std::path::Path, name: &str) -> Vec<f64> {
    ngspice_batch(netlist_text, dir, name)
        .lines()
        .filter(|l| l.trim_start().starts_with("v(") && l.contains('='))
        .map(|l| l.split('=').nth(1).unwrap().trim().parse::<f64>().unwrap())
        .collect()
}

fn compare_design(file: &str) {
    if !ngspice_available("ngspice_dc") {
        return;
    }
    let d = design::load(&crate_path(file)).unwrap();
    let a = analysis::analyse(&d).unwrap();
    let plus1 = a
        .linearity
        .plus_1pct
        .expect("the demo reaches +1 % before saturation");
    let dir = temp_dir(&format!("ngspice-dc-{}", file.replace('/', "-")));
    let mut ws = Workspace::default();
    // Three anode currents: well inside the linear range, near +1 %, and past it (3×); then a
    // cathode current deep in saturation (past −5 %), where the starved gaps sit at a few volts.
    let mut cases: Vec<dynode::solve::network::OperatingPoint> = [plus1 * 0.05, plus1, plus1 * 3.0]
        .into_iter()
        .map(|ia| a.network.solve_anode_raw(ia, &mut ws).unwrap())
        .collect();
    let deep = a.network.small_signal_gain();
    let ik_deep = 2.0 * a.quiescent_amps / deep;
    cases.push(a.network.solve_raw(ik_deep, None, &mut ws).unwrap());
    for (k, op) in cases.into_iter().enumerate() {
        let ia = op.anode_amps();
        let text = netlist::write(
            &d,
            &a.network.tube,
            &NetlistOptions {
                cathode_amps: op.cathode_amps,
                control_block: true,
            },
        );
        let spice = run_ngspice(&text, &dir, &format!("op{k}"));
        assert_eq!(spice.len(), op.potentials.len(), "one value per electrode");
        for (j, (s, ours)) in spice.iter().zip(&op.potentials).enumerate() {
            assert!(
                rel(*ours, *s) < 1e-6,
                "{file} at {ia:e} A: electrode {} ours {ours} V, ngspice {s} V",
                j + 1
            );
        }
    }
}

#[test]
fn paddle_operating_points_match_ngspice() {
    compare_design("designs/rooftop-paddle.ron");
}

#[test]
fn zener_tapered_operating_points_match_ngspice() {
    compare_design("designs/liquid-cell-tapered.ron");
}

#[test]
fn anode_positive_operating_points_match_ngspice() {
    compare_design("designs/photon-counter-positive.ron");
}
