//! Reference designators of a base's parts (R1…, C1…, D1…, Q1…), one numbering the parts
//! list, the schematic and the netlist share.

use super::*;

/// Designators of the divider: per gap (0-based index), the list of part names.
fn divider_designators(d: &Design) -> Vec<Vec<String>> {
    d.elements
        .iter()
        .enumerate()
        .map(|(j, e)| match e {
            Element::Zener(..) => vec![format!("Z{}", j + 1)],
            Element::Resistor(_) => {
                let m = d.series_parts.get(j).copied().unwrap_or(1).max(1);
                if m == 1 {
                    vec![format!("R{}", j + 1)]
                } else {
                    (0..m).map(|k| format!("R{}{}", j + 1, suffix(k))).collect()
                }
            }
        })
        .collect()
}

/// `a`, `b`, …, `z`, `aa`, `ab`, … for the parts of a series split.
fn suffix(k: usize) -> String {
    let letter = |i: usize| char::from(b'a' + (i % 26) as u8);
    if k < 26 {
        letter(k).to_string()
    } else {
        format!("{}{}", letter(k / 26 - 1), letter(k))
    }
}

/// Designators of the other parts, in the order of [`designators`].
#[derive(Debug, Clone, PartialEq)]
pub struct Designators {
    /// Per gap, the divider parts.
    pub divider: Vec<Vec<String>>,
    /// Per decoupling capacitor, in the design's order.
    pub decoupling: Vec<String>,
    /// The coupling capacitor.
    pub coupling: Option<String>,
    /// The anode resistor.
    pub anode_resistor: Option<String>,
    /// The shield resistor.
    pub shield_resistor: Option<String>,
    /// The load resistor at the base.
    pub base_resistor: Option<String>,
    /// The followers' tap string, cathode end first (one more than the followers).
    pub string: Vec<String>,
    /// The follower transistors, in the order of the dynodes they hold.
    pub followers: Vec<String>,
}

/// Every designator of a design (the schematic and the parts list use the same).
pub fn designators(d: &Design) -> Designators {
    let n = d.elements.len();
    let mut r = n;
    let mut next_r = || {
        r += 1;
        format!("R{r}")
    };
    let m = d.decoupling.len();
    let held = d.followers.as_ref().map_or(0, |f| f.hold.len());
    // In this order: anode, shield, base resistors, then the tap string.
    let anode_resistor = d.anode_resistor.map(|_| next_r());
    let shield_resistor = d.shield_resistor.map(|_| next_r());
    let base_resistor = d.base_resistance.map(|_| next_r());
    Designators {
        divider: divider_designators(d),
        decoupling: (1..=m).map(|k| format!("C{k}")).collect(),
        coupling: d.coupling.map(|_| format!("C{}", m + 1)),
        anode_resistor,
        shield_resistor,
        base_resistor,
        string: (0..held + usize::from(held > 0))
            .map(|_| next_r())
            .collect(),
        followers: (1..=held).map(|i| format!("Q{i}")).collect(),
    }
}
