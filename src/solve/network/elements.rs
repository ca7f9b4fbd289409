//! The divider's elements in solver form and the followers holding dynodes.

use super::*;

/// One divider element in solver form.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Part {
    /// Conductance in siemens.
    Resistor(f64),
    /// Breakdown voltage (V) and dynamic resistance (ohm).
    Zener(f64, f64),
}

impl Part {
    /// Current (top to bottom) for a voltage across the element, and its derivative.
    #[inline]
    pub fn current(&self, w: f64) -> (f64, f64) {
        match *self {
            Part::Resistor(g) => (g * w, g),
            Part::Zener(vz, rz) => {
                if w <= vz {
                    (ZENER_LEAK_SIEMENS * w, ZENER_LEAK_SIEMENS)
                } else {
                    (ZENER_LEAK_SIEMENS * vz + (w - vz) / rz, 1.0 / rz)
                }
            }
        }
    }
}

/// A follower holding one dynode (docs/physics.md §14): its control terminal sits on a tap of a
/// separate high-resistance string from the cathode to the return rail, placed one drop from
/// the divider's no-load potential of that dynode, so the dynode is held at `fraction` of the
/// rail. It sinks the dynode's current to the cathode end (positive) or sources it from the
/// return rail (negative), smoothly limited: `i = L·tanh((v − fraction·V_rail)/(L·r))`, so
/// the hold has output resistance `r` at small currents and never passes more than `L`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Follower {
    /// The dynode held, 1-based.
    pub dynode: usize,
    /// Hold potential as a fraction of the rail (the divider's no-load fraction).
    pub fraction: f64,
    /// Current limit, amperes.
    pub limit: f64,
    /// Small-signal output resistance, ohms.
    pub output_resistance: f64,
}

impl Follower {
    /// Current sunk from the dynode at potential `v` with the rail at `rail`, and d i / d v.
    #[inline]
    pub fn current(&self, v: f64, rail: f64) -> (f64, f64) {
        let th = ((v - self.fraction * rail) / (self.limit * self.output_resistance)).tanh();
        (self.limit * th, (1.0 - th * th) / self.output_resistance)
    }
}
