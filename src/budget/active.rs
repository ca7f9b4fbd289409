//! Transistor-held stages beside the passive divider (docs/physics.md §14): each follower's
//! current, voltage and dissipation at the operating point against its ratings, the string and
//! supply currents, the ±1 % linearity limit with and without the followers, and where the
//! first follower reaches its current limit. No IO; the solves are [`crate::solve::network`]'s.

use crate::design::Design;
use crate::solve::linearity;
use crate::solve::network::{Network, OperatingPoint, Workspace};
use crate::warning::{Code, Warning, warning};
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::power::watt;

/// Fraction of its limit at which a follower counts as at its limit (the smooth limit
/// `L·tanh(x)` passes 95 % of `L` where the hold has given way by about 1.8 `L·r`).
pub const AT_LIMIT: f64 = 0.95;

/// One follower at the operating point.
#[derive(Debug, Clone, PartialEq)]
pub struct FollowerRow {
    /// The dynode held, 1-based.
    pub dynode: usize,
    /// Potential of its tap on the string, volts from the cathode.
    pub tap_volts: f64,
    /// Potential the follower holds the dynode at with no current, volts from the cathode.
    pub hold_volts: f64,
    /// Potential of the dynode at the operating point, volts from the cathode.
    pub dynode_volts: f64,
    /// Current it sinks from the dynode (negative: sources), amperes.
    pub amps: f64,
    /// Voltage the transistor stands: the dynode's potential when sinking to the cathode end,
    /// the rail less it when sourcing, volts.
    pub volts: f64,
    /// Dissipation |I|·V, watts.
    pub watts: f64,
    /// Dissipation over the power rating.
    pub over_power: bool,
    /// Voltage over the voltage rating.
    pub over_volts: bool,
}

/// Where the first follower reaches its limit as the light rises.
#[derive(Debug, Clone, PartialEq)]
pub struct LimitReached {
    /// The dynode whose follower reaches [`AT_LIMIT`] of its current limit first.
    pub dynode: usize,
    /// Average anode current there, amperes.
    pub anode_amps: f64,
    /// Gain deviation from the small-signal gain there (fraction).
    pub deviation: f64,
}

/// The transistor-held stages against the passive divider.
#[derive(Debug, Clone, PartialEq)]
pub struct ActiveStages {
    /// Each follower at the operating point.
    pub followers: Vec<FollowerRow>,
    /// Current in the tap string, amperes.
    pub string_amps: f64,
    /// Supply current with the followers at the operating point, amperes.
    pub supply_amps: f64,
    /// Supply current of the passive divider alone at the same light, amperes (`None` when
    /// that base does not solve there).
    pub passive_supply_amps: Option<f64>,
    /// Anode current where |G/G0 − 1| first reaches 1 %, with the followers.
    pub linear_1pct_amps: Option<f64>,
    /// The same for the passive divider alone.
    pub passive_linear_1pct_amps: Option<f64>,
    /// The first follower to reach its limit, if any does within the scanned range.
    pub limit: Option<LimitReached>,
    /// Current limit of each follower, amperes.
    pub current_limit: f64,
    /// Power rating, watts.
    pub power_rating: f64,
    /// Voltage rating, volts.
    pub volts_rating: f64,
}

/// Largest fraction of its limit any follower carries at `op`, and that follower's dynode.
fn worst(net: &Network, op: &OperatingPoint) -> (f64, usize) {
    net.followers
        .iter()
        .zip(&op.follower_amps)
        .map(|(f, i)| (i.abs() / f.limit, f.dynode))
        .fold((0.0, 0), |a, b| if b.0 > a.0 { b } else { a })
}

/// Scan the light up (60 points in ln I_k to 3× the capacity over the gain, warm-started) for
/// the first follower past [`AT_LIMIT`], then bisect in ln I_k.
fn limit_reached(net: &Network, ws: &mut Workspace) -> Option<LimitReached> {
    let g0 = net.small_signal_gain();
    let cap = net.capacity();
    let (lo, hi) = ((1e-3 * cap / g0).ln(), (3.0 * cap / g0).ln());
    let count = 60;
    let mut prev: Option<OperatingPoint> = None;
    for i in 0..count {
        let ik = (lo + (hi - lo) * i as f64 / (count - 1) as f64).exp();
        let op = net.solve_raw(ik, prev.as_ref(), ws).ok()?;
        if worst(net, &op).0 >= AT_LIMIT {
            let mut good = op;
            if let Some(mut below) = prev {
                for _ in 0..40 {
                    let mid = (0.5 * (below.cathode_amps.ln() + good.cathode_amps.ln())).exp();
                    let Ok(m) = net.solve_raw(mid, Some(&below), ws) else {
                        break;
                    };
                    if worst(net, &m).0 >= AT_LIMIT {
                        good = m;
                    } else {
                        below = m;
                    }
                    if good.cathode_amps / below.cathode_amps < 1.0 + 1e-9 {
                        break;
                    }
                }
            }
            return Some(LimitReached {
                dynode: worst(net, &good).1,
                anode_amps: good.anode_amps(),
                deviation: good.gain() / g0 - 1.0,
            });
        }
        prev = Some(op);
    }
    None
}

/// The figures for a design with followers, `None` without.
pub fn assess(design: &Design, net: &Network, op: &OperatingPoint) -> Option<ActiveStages> {
    let f = design.followers.as_ref()?;
    let mut ws = Workspace::default();
    let rail = op.rail_volts;
    let drop = f.drop.get::<volt>();
    let power_rating = f.power_rating.get::<watt>();
    let volts_rating = f.volts_rating.get::<volt>();
    let followers = net
        .followers
        .iter()
        .zip(&op.follower_amps)
        .map(|(fl, &amps)| {
            let dynode_volts = op.potentials[fl.dynode - 1];
            let hold_volts = fl.fraction * rail;
            let volts = if amps >= 0.0 {
                dynode_volts
            } else {
                rail - dynode_volts
            };
            let watts = amps.abs() * volts;
            FollowerRow {
                dynode: fl.dynode,
                tap_volts: hold_volts - drop,
                hold_volts,
                dynode_volts,
                amps,
                volts,
                watts,
                over_power: watts > power_rating,
                over_volts: dynode_volts.max(rail - dynode_volts) > volts_rating,
            }
        })
        .collect();
    let passive = net.passive();
    Some(ActiveStages {
        followers,
        string_amps: op.string_amps,
        supply_amps: op.supply_amps(),
        passive_supply_amps: passive
            .solve_raw(op.cathode_amps, None, &mut ws)
            .ok()
            .map(|p| p.supply_amps()),
        linear_1pct_amps: linearity::crossing(net, 0.01, true, &mut ws),
        passive_linear_1pct_amps: linearity::crossing(&passive, 0.01, true, &mut ws),
        limit: limit_reached(net, &mut ws),
        current_limit: f.current_limit.get::<ampere>(),
        power_rating,
        volts_rating,
    })
}

/// Warnings for followers over their ratings at the operating point, or near their limit.
pub fn warnings(a: &ActiveStages) -> Vec<Warning> {
    let mut w = Vec::new();
    for r in &a.followers {
        if r.over_power {
            w.push(warning!(Code::FollowerOverPower,
                "The follower holding D{} dissipates {:.3} W against its {:.3} W rating: use a part rated higher, or drain it to a nearer potential.",
                r.dynode, r.watts, a.power_rating
            ));
        }
        if r.over_volts {
            w.push(warning!(
                Code::FollowerOverVoltage,
                "The follower holding D{} stands up to {:.0} V against its {:.0} V rating.",
                r.dynode,
                r.dynode_volts.max(r.volts),
                a.volts_rating
            ));
        }
        if r.amps.abs() >= AT_LIMIT * a.current_limit {
            w.push(warning!(Code::FollowerAtCurrentLimit,
                "The follower holding D{} is at its current limit at the operating point: the dynode is no longer held and the base behaves as the passive divider there.",
                r.dynode
            ));
        }
    }
    w
}
