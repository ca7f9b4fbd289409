//! The schematic of the base as solved: supply, divider with each element's designator, value
//! and gap voltage, decoupling capacitors, Zeners, shield resistor, anode resistor, coupling
//! capacitor and the signal path to the instrument — drawn by the project as a
//! [`crate::report::plot::Sketch`] (SVG and PNG through [`crate::report::plot`], inline in the HTML report).
//!
//! Layout: the tube's electrodes along the top (K, D1 … Dn, P), the divider as a horizontal
//! chain under them from the cathode (left) to the return (right), each gap's element between
//! its two nodes with its designator and value above and its voltage at the operating point
//! below; a capacitor across a gap hangs under it, a capacitor to the return drops from its
//! dynode to a ground or +HV tag; the supply sits at the high-voltage end; the signal path
//! leaves the anode to the right. Designators are those of the parts list
//! ([`crate::budget::parts::designators`]). On a transistor-held base a band below adds each follower
//! under the dynode it holds — a symbol of this project's own: a ring round a channel bar with
//! the gate plate beside it, the source lead up to the dynode with an arrow on it, the drain
//! lead down to a `K` tag (the cathode end, where it sinks the current), the gate lead down to
//! its tap — and the tap string along the bottom from the cathode (`K` tag) to the return, each
//! string resistor with its designator and value. No IO.

use crate::analysis::Analysis;
use crate::budget::parts::Designators;
use crate::design::{CapStyle, Design, Element, Polarity};
use crate::report::plot::{Anchor, Axis, Figure, Ink, Sketch};
use crate::units::format_eng;
use uom::si::capacitance::farad;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;

/// Height of the schematic, pixels (without followers).
pub const HEIGHT: u32 = 560;
/// Height added by the band of followers and their tap string, pixels.
pub const FOLLOWER_BAND: u32 = 190;
/// Centre of a follower's symbol, and the tap string's line, pixels from the top.
const FOLLOWER_Y: i32 = 490;
const STRING_Y: i32 = 600;
const TUBE_TOP: i32 = 58;
const ELECTRODE_Y: i32 = 96;
const TUBE_BOTTOM: i32 = 132;
const RAIL: i32 = 270;
const ACROSS_Y: i32 = 340;
const RETURN_CAP_Y: i32 = 410;
const LEFT: i32 = 110;

/// A value as printed on the drawing: three significant digits with the prefix, trailing zeros
/// dropped ("470 kΩ", "1 MΩ", "4.7 nF").
pub fn value_text(x: f64, unit: &str) -> String {
    let s = format_eng(x, unit);
    match s.split_once(' ') {
        Some((num, rest)) if num.contains('.') => {
            let num = num.trim_end_matches('0').trim_end_matches('.');
            format!("{num} {rest}")
        }
        _ => s,
    }
}

struct Pen {
    ink: Vec<Ink>,
}

impl Pen {
    fn path(&mut self, p: &[(i32, i32)]) {
        self.ink.push(Ink::Path(p.to_vec()));
    }
    fn text(&mut self, x: i32, y: i32, t: &str, size: u32, anchor: Anchor) {
        self.ink.push(Ink::Text {
            x,
            y,
            text: t.to_string(),
            size,
            anchor,
            bold: false,
        });
    }
    fn bold(&mut self, x: i32, y: i32, t: &str, size: u32, anchor: Anchor) {
        self.ink.push(Ink::Text {
            x,
            y,
            text: t.to_string(),
            size,
            anchor,
            bold: true,
        });
    }
    /// A resistor between two points on a horizontal or vertical line: leads and a box.
    fn resistor(&mut self, a: (i32, i32), b: (i32, i32)) {
        let (len, horiz) = if a.1 == b.1 {
            (b.0 - a.0, true)
        } else {
            (b.1 - a.1, false)
        };
        let body = (len.abs() * 3 / 5).clamp(14, 40) * len.signum();
        let lead = (len - body) / 2;
        if horiz {
            let (x0, x1) = (a.0 + lead, a.0 + lead + body);
            self.path(&[a, (x0, a.1)]);
            self.path(&[(x1, a.1), b]);
            self.ink
                .push(Ink::Frame(x0.min(x1), a.1 - 6, x0.max(x1), a.1 + 6));
        } else {
            let (y0, y1) = (a.1 + lead, a.1 + lead + body);
            self.path(&[a, (a.0, y0)]);
            self.path(&[(a.0, y1), b]);
            self.ink
                .push(Ink::Frame(a.0 - 6, y0.min(y1), a.0 + 6, y0.max(y1)));
        }
    }
    /// A capacitor between two points on a horizontal or vertical line: leads and two plates.
    fn capacitor(&mut self, a: (i32, i32), b: (i32, i32)) {
        if a.1 == b.1 {
            let c = (a.0 + b.0) / 2;
            self.path(&[a, (c - 4, a.1)]);
            self.path(&[(c + 4, a.1), b]);
            self.path(&[(c - 4, a.1 - 11), (c - 4, a.1 + 11)]);
            self.path(&[(c + 4, a.1 - 11), (c + 4, a.1 + 11)]);
        } else {
            let c = (a.1 + b.1) / 2;
            self.path(&[a, (a.0, c - 4)]);
            self.path(&[(a.0, c + 4), b]);
            self.path(&[(a.0 - 11, c - 4), (a.0 + 11, c - 4)]);
            self.path(&[(a.0 - 11, c + 4), (a.0 + 11, c + 4)]);
        }
    }
    /// A Zener on a horizontal line, reverse-biased as a divider runs it: the potential rises
    /// from the cathode end (left) to the return end (right) in both polarities, so the bar
    /// (the Zener's cathode) faces right.
    fn zener(&mut self, a: (i32, i32), b: (i32, i32)) {
        let c = (a.0 + b.0) / 2;
        let y = a.1;
        self.path(&[a, (c - 7, y)]);
        self.path(&[(c + 7, y), b]);
        self.path(&[(c - 7, y - 8), (c - 7, y + 8), (c + 7, y), (c - 7, y - 8)]);
        self.path(&[
            (c + 4, y - 10),
            (c + 7, y - 8),
            (c + 7, y + 8),
            (c + 10, y + 10),
        ]);
    }
    fn ground(&mut self, x: i32, y: i32) {
        self.path(&[(x, y), (x, y + 8)]);
        self.path(&[(x - 12, y + 8), (x + 12, y + 8)]);
        self.path(&[(x - 7, y + 13), (x + 7, y + 13)]);
        self.path(&[(x - 3, y + 18), (x + 3, y + 18)]);
    }
    /// A net tag: a short stub and the net's name (e.g. "+HV").
    fn tag(&mut self, x: i32, y: i32, name: &str) {
        self.path(&[(x, y), (x, y + 10)]);
        self.ink.push(Ink::Frame(x - 18, y + 10, x + 18, y + 26));
        self.text(x, y + 18, name, 12, Anchor::Centre);
    }
    /// A follower transistor (this project's own symbol): `x` the column of its source lead
    /// (the dynode it holds, reached from `top`), `cy` the symbol's centre; the gate lead leaves
    /// to the left and down to `gate_y`, the drain lead down to a `K` tag. Returns the gate
    /// lead's column.
    fn follower(&mut self, x: i32, top: i32, cy: i32, gate_y: i32, name: &str) -> i32 {
        let bar = x - 14;
        self.ink.push(Ink::Ring(bar + 4, cy, 22));
        // Channel bar and gate plate.
        self.path(&[(bar, cy - 13), (bar, cy + 13)]);
        self.path(&[(bar - 7, cy - 13), (bar - 7, cy + 13)]);
        // Source: from the channel's top to the dynode, an arrow on it pointing out of the
        // channel (the current leaves the dynode through it).
        self.path(&[(bar, cy - 9), (x, cy - 9), (x, top)]);
        self.path(&[(bar + 4, cy - 13), (bar + 9, cy - 9), (bar + 4, cy - 5)]);
        // Drain: from the channel's foot down to the cathode end.
        self.path(&[(bar, cy + 9), (x, cy + 9), (x, cy + 34)]);
        self.tag(x, cy + 34, "K");
        // Gate: left, then down to the tap.
        let g = x - 38;
        self.path(&[(bar - 7, cy), (g, cy), (g, gate_y)]);
        self.ink.push(Ink::Dot(g, gate_y));
        self.bold(bar - 22, cy - 26, name, 12, Anchor::Centre);
        g
    }
    fn supply(&mut self, x: i32, top: i32, label: &[String]) {
        // A source between `top` (its HV terminal) and ground below.
        self.path(&[(x, top), (x, top + 20)]);
        self.ink.push(Ink::Ring(x, top + 38, 18));
        self.text(x, top + 30, "±", 14, Anchor::Centre);
        self.path(&[(x, top + 56), (x, top + 76)]);
        self.ground(x, top + 76);
        for (k, l) in label.iter().enumerate() {
            self.text(x + 24, top + 30 + 15 * k as i32, l, 12, Anchor::Left);
        }
    }
}

/// The schematic of an analysed design as a figure named `schematic`.
pub fn figure(a: &Analysis) -> Figure {
    let d = &a.design;
    let names = crate::budget::parts::designators(d);
    let gaps = d.elements.len();
    let pitch = 64;
    let x = |i: usize| LEFT + pitch * i as i32;
    let x_ret = x(gaps);
    let mut pen = Pen { ink: Vec::new() };
    let vs = d.supply_volts.get::<volt>();
    let x_p = x_ret + pitch / 2;
    let x_rail_end = x_ret + pitch / 2 + 30;
    tube(&mut pen, &x, d.tube.stages, x_p);
    divider(a, &names, &mut pen, &x);
    decoupling(d, &names, &mut pen, &x, pitch);
    // Followers under the dynodes they hold, and their tap string.
    let followers = followers(a, &mut pen, &x);
    supply(d, &mut pen, &x, x_ret, x_rail_end);
    shield(d, &names, &mut pen, &x);
    let width = signal_path(d, &names, &mut pen, x_p, x_rail_end);

    // Caution and legend.
    let height = HEIGHT + if followers { FOLLOWER_BAND } else { 0 };
    pen.bold(
        8,
        height as i32 - 30,
        &format!(
            "HIGH VOLTAGE: {} across this circuit. Values as solved at {} average anode current.",
            value_text(vs.abs(), "V"),
            value_text(a.op.anode_amps(), "A")
        ),
        13,
        Anchor::Left,
    );
    pen.text(
        8,
        height as i32 - 12,
        "Designators as in the parts list; gap voltages at the operating point.",
        12,
        Anchor::Left,
    );

    let mut f = Figure::new(
        "schematic",
        &format!("Base schematic: {}", crate::report::one_line(&d.name)),
        Axis::linear("", None),
        Axis::linear("", None),
    );
    f.sketch = Some(Sketch {
        width: width as u32,
        height,
        ink: pen.ink,
    });
    f
}

/// The tube: envelope, electrodes, their wires down to the divider.
fn tube(pen: &mut Pen, x: &dyn Fn(usize) -> i32, n: usize, x_p: i32) {
    pen.ink.push(Ink::Thin(vec![
        (x(0) - 24, TUBE_TOP),
        (x_p + 24, TUBE_TOP),
        (x_p + 24, TUBE_BOTTOM),
        (x(0) - 24, TUBE_BOTTOM),
        (x(0) - 24, TUBE_TOP),
    ]));
    pen.text(
        x(0) - 20,
        TUBE_TOP - 9,
        &format!("tube, {n} dynodes"),
        12,
        Anchor::Left,
    );
    for i in 0..=n {
        let label = if i == 0 {
            "K".to_string()
        } else {
            format!("D{i}")
        };
        pen.bold(x(i), ELECTRODE_Y, &label, 13, Anchor::Centre);
        pen.path(&[(x(i), ELECTRODE_Y + 12), (x(i), RAIL)]);
        pen.ink.push(Ink::Dot(x(i), RAIL));
    }
    pen.bold(x_p, ELECTRODE_Y, "P", 13, Anchor::Centre);
}

/// The divider, one element per gap, with designator, value and voltage.
fn divider(a: &Analysis, names: &Designators, pen: &mut Pen, x: &dyn Fn(usize) -> i32) {
    let d = &a.design;
    for (j, e) in d.elements.iter().enumerate() {
        let (a_, b_) = ((x(j), RAIL), (x(j + 1), RAIL));
        let cx = (x(j) + x(j + 1)) / 2;
        let (name, value) = match e {
            Element::Resistor(r) => {
                pen.resistor(a_, b_);
                let parts = &names.divider[j];
                let each = r.get::<ohm>() / parts.len() as f64;
                if parts.len() > 1 {
                    (
                        format!("{}–{}", parts[0], parts[parts.len() - 1]),
                        format!("{}×{}", parts.len(), value_text(each, "Ω")),
                    )
                } else {
                    (parts[0].clone(), value_text(each, "Ω"))
                }
            }
            Element::Zener(v, _) => {
                pen.zener(a_, b_);
                (
                    names.divider[j][0].clone(),
                    value_text(v.get::<volt>(), "V"),
                )
            }
        };
        pen.bold(cx, RAIL - 34, &name, 12, Anchor::Centre);
        pen.text(cx, RAIL - 19, &value, 12, Anchor::Centre);
        let volts = a.gaps.get(j).map_or(0.0, |g| g.volts);
        pen.text(cx, RAIL + 20, &value_text(volts, "V"), 11, Anchor::Centre);
    }
}

/// The decoupling capacitors, across gaps or from dynodes to the return.
fn decoupling(
    d: &Design,
    names: &Designators,
    pen: &mut Pen,
    x: &dyn Fn(usize) -> i32,
    pitch: i32,
) {
    let cn = d.polarity == Polarity::CathodeNegative;
    let held: Vec<usize> = d.followers.as_ref().map_or(Vec::new(), |f| f.hold.clone());
    for (k, c) in d.decoupling.iter().enumerate() {
        let value = value_text(c.value.get::<farad>(), "F");
        let name = &names.decoupling[k];
        match c.style {
            CapStyle::Across(g) => {
                let (xa, xb) = (x(g - 1), x(g));
                pen.path(&[(xa, RAIL), (xa, ACROSS_Y)]);
                pen.path(&[(xb, RAIL), (xb, ACROSS_Y)]);
                pen.capacitor((xa, ACROSS_Y), (xb, ACROSS_Y));
                let cx = (xa + xb) / 2;
                pen.bold(cx, ACROSS_Y + 22, name, 12, Anchor::Centre);
                pen.text(cx, ACROSS_Y + 37, &value, 12, Anchor::Centre);
            }
            CapStyle::ToReturn(dy) if held.contains(&dy) => {
                // The dynode's column carries its follower down: the capacitor branches off
                // half a pitch to the right, its words under its return.
                let (xd, xc, top) = (x(dy), x(dy) + pitch / 2, RAIL + 30);
                pen.ink.push(Ink::Dot(xd, top));
                pen.path(&[(xd, top), (xc, top), (xc, top + 30)]);
                pen.capacitor((xc, top + 30), (xc, top + 70));
                if cn {
                    pen.ground(xc, top + 70);
                } else {
                    pen.tag(xc, top + 70, "+HV");
                }
                pen.bold(xc, top + 112, name, 12, Anchor::Centre);
                pen.text(xc, top + 127, &value, 12, Anchor::Centre);
            }
            CapStyle::ToReturn(dy) => {
                let xd = x(dy);
                pen.path(&[(xd, RAIL), (xd, RETURN_CAP_Y - 30)]);
                pen.capacitor((xd, RETURN_CAP_Y - 30), (xd, RETURN_CAP_Y + 10));
                pen.bold(xd + 14, RETURN_CAP_Y - 18, name, 12, Anchor::Left);
                pen.text(xd + 14, RETURN_CAP_Y - 3, &value, 12, Anchor::Left);
                if cn {
                    pen.ground(xd, RETURN_CAP_Y + 10);
                } else {
                    pen.tag(xd, RETURN_CAP_Y + 10, "+HV");
                }
            }
        }
    }
}

/// The supply and the return, on the side the polarity puts them.
fn supply(d: &Design, pen: &mut Pen, x: &dyn Fn(usize) -> i32, x_ret: i32, x_rail_end: i32) {
    let cn = d.polarity == Polarity::CathodeNegative;
    let vs = d.supply_volts.get::<volt>();
    let supply_label = vec![
        "HV supply".to_string(),
        format!(
            "{}{}",
            if vs < 0.0 { "−" } else { "+" },
            value_text(vs.abs(), "V")
        ),
    ];
    let mut supply_label = supply_label;
    if let Some(l) = d.current_limit {
        supply_label.push(format!(
            "limit {}",
            value_text(l.get::<uom::si::electric_current::ampere>(), "A")
        ));
    }
    if cn {
        // Cathode at −HV: the supply on the left, the return at ground.
        pen.path(&[(x(0), RAIL), (LEFT - 60, RAIL)]);
        pen.supply(LEFT - 60, RAIL, &supply_label);
        pen.path(&[(x_ret, RAIL), (x_rail_end, RAIL)]);
        pen.ground(x_rail_end, RAIL);
    } else {
        // Anode at +HV: the cathode at ground, the supply at the return end.
        pen.path(&[(x(0), RAIL), (LEFT - 60, RAIL)]);
        pen.ground(LEFT - 60, RAIL);
        pen.path(&[(x_ret, RAIL), (x_rail_end, RAIL)]);
        pen.supply(x_rail_end, RAIL, &supply_label);
    }
}

/// The shield resistor from the cathode-potential shield.
fn shield(d: &Design, names: &Designators, pen: &mut Pen, x: &dyn Fn(usize) -> i32) {
    if let (Some(r), Some(name)) = (d.shield_resistor, &names.shield_resistor) {
        let y = TUBE_BOTTOM + 40;
        let x0 = LEFT - 84;
        pen.resistor((x0, y), (x(0), y));
        pen.ink.push(Ink::Dot(x(0), y));
        pen.text(x0, y - 16, "to the shield", 11, Anchor::Left);
        pen.bold((x0 + x(0)) / 2, y + 18, name, 12, Anchor::Centre);
        pen.text(
            (x0 + x(0)) / 2,
            y + 33,
            &value_text(r.get::<ohm>(), "Ω"),
            12,
            Anchor::Centre,
        );
    }
}

/// The signal path from the anode to the instrument; returns the width the figure needs.
fn signal_path(d: &Design, names: &Designators, pen: &mut Pen, x_p: i32, x_rail_end: i32) -> i32 {
    let width = crate::report::plot::WIDTH as i32;
    let y = ELECTRODE_Y;
    let x_a = x_p + 70;
    pen.path(&[(x_p + 8, y), (x_a, y)]);
    let mut xs = x_a;
    if let (Some(r), Some(name)) = (d.anode_resistor, &names.anode_resistor) {
        pen.ink.push(Ink::Dot(x_a, y));
        // To the return rail (ground, or +HV on an anode-positive base).
        pen.resistor((x_a, y), (x_a, RAIL));
        pen.path(&[(x_a, RAIL), (x_rail_end, RAIL)]);
        pen.ink.push(Ink::Dot(x_rail_end.min(x_a), RAIL));
        pen.bold(x_a + 10, (y + RAIL) / 2 - 8, name, 12, Anchor::Left);
        pen.text(
            x_a + 10,
            (y + RAIL) / 2 + 8,
            &value_text(r.get::<ohm>(), "Ω"),
            12,
            Anchor::Left,
        );
    }
    if let (Some((c, _)), Some(name)) = (d.coupling, &names.coupling) {
        let x_c = xs + 80;
        pen.capacitor((xs, y), (x_c, y));
        pen.bold((xs + x_c) / 2, y - 32, name, 12, Anchor::Centre);
        pen.text(
            (xs + x_c) / 2,
            y - 17,
            &value_text(c.get::<farad>(), "F"),
            12,
            Anchor::Centre,
        );
        xs = x_c;
    }
    if let (Some(r), Some(name)) = (d.base_resistance, &names.base_resistor) {
        let x_b = xs + 30;
        pen.path(&[(xs, y), (x_b, y)]);
        pen.ink.push(Ink::Dot(x_b, y));
        pen.resistor((x_b, y), (x_b, y + 90));
        pen.ground(x_b, y + 90);
        pen.bold(x_b + 10, y + 38, name, 12, Anchor::Left);
        pen.text(
            x_b + 10,
            y + 53,
            &value_text(r.get::<ohm>(), "Ω"),
            12,
            Anchor::Left,
        );
        xs = x_b;
    }
    let readout = d.signal.readout.as_ref();
    let mut lines = vec!["instrument".to_string()];
    if let Some(t) = d.load_resistance {
        lines.push(format!("terminated {}", value_text(t.get::<ohm>(), "Ω")));
    }
    if let Some(r) = readout {
        let mut input = value_text(r.input_resistance, "Ω");
        if r.input_capacitance > 0.0 {
            input.push_str(&format!(" ∥ {}", value_text(r.input_capacitance, "F")));
        }
        lines.push(format!("input {input}"));
    }
    // About 7 px a character at 12 px.
    let box_w = lines.iter().map(|l| l.chars().count()).max().unwrap_or(10) as i32 * 7 + 16;
    let x_inst = xs + 180;
    let width = width.max(x_inst + box_w + 10);
    match readout.and_then(|r| r.cable.as_ref()) {
        Some(cable) => {
            // A coaxial cable: two lines with the shield marked.
            pen.path(&[(xs, y), (xs + 20, y)]);
            pen.ink
                .push(Ink::Thin(vec![(xs + 20, y - 6), (x_inst - 20, y - 6)]));
            pen.ink
                .push(Ink::Thin(vec![(xs + 20, y + 6), (x_inst - 20, y + 6)]));
            pen.path(&[(xs + 20, y), (x_inst, y)]);
            pen.text(
                (xs + x_inst) / 2,
                y + 22,
                &format!(
                    "cable {} m, {}",
                    crate::units::show_number(cable.length),
                    value_text(cable.impedance, "Ω")
                ),
                12,
                Anchor::Centre,
            );
        }
        None => pen.path(&[(xs, y), (x_inst, y)]),
    }
    let box_h = 18 * lines.len() as i32 + 10;
    pen.ink
        .push(Ink::Frame(x_inst, y - 16, x_inst + box_w, y - 16 + box_h));
    for (k, l) in lines.iter().enumerate() {
        pen.text(x_inst + 6, y - 4 + 18 * k as i32, l, 12, Anchor::Left);
    }
    pen.text(
        x_a,
        TUBE_TOP - 9,
        "signal path (the pulse is negative-going)",
        12,
        Anchor::Left,
    );
    width
}

/// The followers of a transistor-held base and their tap string, in the band below the
/// capacitors; `false` when the base has none.
fn followers(a: &Analysis, pen: &mut Pen, x: &dyn Fn(usize) -> i32) -> bool {
    let d = &a.design;
    let (Some(f), Some(act)) = (&d.followers, &a.active_stages) else {
        return false;
    };
    let names = crate::budget::parts::designators(d);
    let lines = crate::budget::parts::list(a);
    let value_of = |name: &str| {
        lines
            .iter()
            .find(|l| l.designators.iter().any(|n| n == name))
            .map(|l| value_text(l.value, "Ω"))
    };
    let x_ret = x(d.elements.len());
    let mut taps = Vec::with_capacity(act.followers.len());
    for (k, r) in act.followers.iter().enumerate() {
        let j = r.dynode;
        // Straight down the dynode's column (a capacitor to the return on it branches aside,
        // drawn with the capacitors).
        pen.path(&[(x(j), RAIL), (x(j), FOLLOWER_Y - 40)]);
        let across = d
            .decoupling
            .iter()
            .any(|c| c.style == CapStyle::Across(j) || c.style == CapStyle::Across(j + 1));
        if across {
            pen.ink.push(Ink::Dot(x(j), ACROSS_Y));
        }
        taps.push(pen.follower(
            x(j),
            FOLLOWER_Y - 40,
            FOLLOWER_Y,
            STRING_Y,
            &names.followers[k],
        ));
    }
    // The string from the cathode end to the return, a resistor between taps.
    let x0 = x(0);
    pen.tag(x0, STRING_Y, "K");
    let mut ends = vec![x0];
    ends.extend(&taps);
    ends.push(x_ret);
    for (k, w) in ends.windows(2).enumerate() {
        let Some(name) = names.string.get(k) else {
            continue;
        };
        match value_of(name) {
            Some(v) if w[1] > w[0] => {
                pen.resistor((w[0], STRING_Y), (w[1], STRING_Y));
                let cx = (w[0] + w[1]) / 2;
                pen.bold(cx, STRING_Y + 22, name, 11, Anchor::Centre);
                pen.text(cx, STRING_Y + 36, &v, 11, Anchor::Centre);
            }
            _ => pen.path(&[(w[0], STRING_Y), (w[1], STRING_Y)]),
        }
    }
    if d.polarity == Polarity::CathodeNegative {
        pen.ground(x_ret, STRING_Y);
    } else {
        pen.tag(x_ret, STRING_Y, "+HV");
    }
    pen.text(
        x0 + 30,
        STRING_Y - 14,
        &format!(
            "followers' tap string {} (drop {}, limit {} each)",
            value_text(f.string.get::<ohm>(), "Ω"),
            value_text(f.drop.get::<volt>(), "V"),
            value_text(
                f.current_limit.get::<uom::si::electric_current::ampere>(),
                "A"
            ),
        ),
        12,
        Anchor::Left,
    );
    true
}
