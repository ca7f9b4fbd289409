//! Figures: a plain description ([`Figure`]) that any module can fill, rendered to SVG or PNG.
//!
//! A module that wants a figure builds a `Figure` from its own results — series of points,
//! vertical or horizontal markers, shaded bands — and never touches the drawing library. This
//! module owns the drawing (plotters), the axes (linear or log), tick labels with units in
//! engineering notation, the legend and the font. PNG text uses a DejaVu Sans face bundled in the
//! binary (the `dejavu` crate), registered once, so no system font is needed.

use std::path::Path;
use std::sync::OnceLock;

use plotters::coord::Shift;
use plotters::coord::ranged1d::{AsRangedCoord, ValueFormatter};
use plotters::prelude::*;
use plotters::style::FontStyle;

use crate::units::format_eng;

/// Width of every figure, pixels.
pub const WIDTH: u32 = 960;
/// Height of every figure, pixels.
pub const HEIGHT: u32 = 560;

/// Why a figure could not be drawn or written.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PlotError {
    /// The drawing library failed.
    #[error("figure {figure}: {reason}")]
    Draw {
        /// Figure name.
        figure: String,
        /// Reason.
        reason: String,
    },
}

/// Axis scale.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Scale {
    /// Linear.
    Linear,
    /// Logarithmic (values must be positive; others are dropped).
    Log,
}

/// How a series is drawn.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Style {
    /// Solid line.
    Line,
    /// Dots.
    Points,
    /// Bars centred on each x (x usually an index); several bar series sit side by side.
    Bars,
}

/// One series of points.
#[derive(Debug, Clone, PartialEq)]
pub struct Series {
    /// Legend text.
    pub label: String,
    /// (x, y) points.
    pub points: Vec<(f64, f64)>,
    /// Drawing style.
    pub style: Style,
}

/// A vertical (`x`) or horizontal (`y`) reference line with a label.
#[derive(Debug, Clone, PartialEq)]
pub enum Marker {
    /// Vertical line at this x.
    X(f64, String),
    /// Horizontal line at this y.
    Y(f64, String),
}

/// A horizontal band between two y values (e.g. ±1 %).
#[derive(Debug, Clone, PartialEq)]
pub struct Band {
    /// Lower edge.
    pub lo: f64,
    /// Upper edge.
    pub hi: f64,
    /// Legend text.
    pub label: String,
}

/// An axis: its label, scale and the unit used for tick labels.
#[derive(Debug, Clone, PartialEq)]
pub struct Axis {
    /// Label, with the unit in words or symbols.
    pub label: String,
    /// Scale.
    pub scale: Scale,
    /// Unit symbol for engineering-notation ticks ("A", "V", "s"); `None` for plain numbers.
    pub unit: Option<String>,
}

impl Axis {
    /// Linear axis with a unit.
    pub fn linear(label: &str, unit: Option<&str>) -> Axis {
        Axis {
            label: label.to_string(),
            scale: Scale::Linear,
            unit: unit.map(str::to_string),
        }
    }
    /// Log axis with a unit.
    pub fn log(label: &str, unit: Option<&str>) -> Axis {
        Axis {
            label: label.to_string(),
            scale: Scale::Log,
            unit: unit.map(str::to_string),
        }
    }
}

/// A complete figure description.
#[derive(Debug, Clone, PartialEq)]
pub struct Figure {
    /// Stable file stem, e.g. `linearity` (written as `linearity.svg` and `linearity.png`).
    pub name: String,
    /// Title.
    pub title: String,
    /// Horizontal axis.
    pub x: Axis,
    /// Vertical axis.
    pub y: Axis,
    /// Series.
    pub series: Vec<Series>,
    /// Reference lines.
    pub markers: Vec<Marker>,
    /// Shaded bands.
    pub bands: Vec<Band>,
    /// Integer tick labels on x (for gap or pulse numbers).
    pub integer_x: bool,
    /// Fixed vertical range (data beyond it is clipped); `None` fits the data.
    pub y_limits: Option<(f64, f64)>,
    /// Where the legend goes.
    pub legend: Legend,
    /// A drawing in pixels (a schematic) instead of a chart: when set, the axes, series,
    /// markers and bands are not drawn.
    pub sketch: Option<Sketch>,
}

/// A drawing made of plain strokes and words, in pixels from the top left: a schematic.
#[derive(Debug, Clone, PartialEq)]
pub struct Sketch {
    /// Width, pixels.
    pub width: u32,
    /// Height, pixels.
    pub height: u32,
    /// What is drawn, in order.
    pub ink: Vec<Ink>,
}

/// Where a text sits against its point.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Anchor {
    /// The point is at the text's left end.
    Left,
    /// The point is at the text's middle.
    Centre,
    /// The point is at the text's right end.
    Right,
}

/// One stroke of a [`Sketch`].
#[derive(Debug, Clone, PartialEq)]
pub enum Ink {
    /// A polyline, 2 px.
    Path(Vec<(i32, i32)>),
    /// A thin polyline, 1 px, grey (an outline such as the tube's envelope).
    Thin(Vec<(i32, i32)>),
    /// Text with its baseline's vertical middle at `y`.
    Text {
        /// Point.
        x: i32,
        /// Point.
        y: i32,
        /// Words.
        text: String,
        /// Pixel size.
        size: u32,
        /// Anchor.
        anchor: Anchor,
        /// Bold face.
        bold: bool,
    },
    /// A rectangle outline (a resistor's body, an instrument).
    Frame(i32, i32, i32, i32),
    /// A filled dot (a junction).
    Dot(i32, i32),
    /// A circle outline (a source).
    Ring(i32, i32, i32),
}

/// Legend corner.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Legend {
    /// Upper left.
    UpperLeft,
    /// Upper right.
    UpperRight,
    /// Lower right.
    LowerRight,
}

impl Figure {
    /// A new empty figure.
    pub fn new(name: &str, title: &str, x: Axis, y: Axis) -> Figure {
        Figure {
            name: name.to_string(),
            title: title.to_string(),
            x,
            y,
            series: Vec::new(),
            markers: Vec::new(),
            bands: Vec::new(),
            integer_x: false,
            y_limits: None,
            legend: Legend::UpperLeft,
            sketch: None,
        }
    }
    /// Add a series.
    pub fn with(mut self, label: &str, style: Style, points: Vec<(f64, f64)>) -> Figure {
        self.series.push(Series {
            label: label.to_string(),
            points,
            style,
        });
        self
    }
}

/// Series colours, chosen to stay apart in print and for common colour-vision deficiencies.
const PALETTE: [RGBColor; 6] = [
    RGBColor(0, 90, 181),
    RGBColor(220, 50, 32),
    RGBColor(0, 140, 80),
    RGBColor(150, 80, 170),
    RGBColor(230, 140, 0),
    RGBColor(60, 60, 60),
];
const MARKER: RGBColor = RGBColor(110, 110, 110);
const BAND: RGBColor = RGBColor(120, 200, 120);

fn register_fonts() -> Result<(), String> {
    static DONE: OnceLock<Result<(), String>> = OnceLock::new();
    DONE.get_or_init(|| {
        plotters::style::register_font("sans-serif", FontStyle::Normal, dejavu::sans::regular())
            .map_err(|_| "the bundled font could not be loaded".to_string())?;
        plotters::style::register_font("sans-serif", FontStyle::Bold, dejavu::sans::bold())
            .map_err(|_| "the bundled bold font could not be loaded".to_string())
    })
    .clone()
}

fn usable(v: f64, scale: Scale) -> bool {
    v.is_finite() && (scale == Scale::Linear || v > 0.0)
}

/// Data range of one axis over everything drawn, padded.
fn range(values: impl Iterator<Item = f64>, scale: Scale) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values.filter(|v| usable(*v, scale)) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        return match scale {
            Scale::Linear => (0.0, 1.0),
            Scale::Log => (1.0, 10.0),
        };
    }
    match scale {
        Scale::Linear => {
            let span = if hi > lo { hi - lo } else { lo.abs().max(1.0) };
            (lo - 0.05 * span, hi + 0.05 * span)
        }
        Scale::Log => {
            let (l, h) = if hi > lo {
                (lo, hi)
            } else {
                (lo / 2.0, hi * 2.0)
            };
            let f = (h / l).powf(0.04);
            (l / f, h * f)
        }
    }
}

/// Largest magnitude an axis end may have, and the most decades a log axis spans. Past them
/// plotters' tick search loops for ever or allocates without bound (a range reaching the end of
/// f64, or a tick step lost in the rounding of its start), and no figure of this tool needs more.
const AXIS_LIMIT: f64 = 1e200;
const LOG_DECADES: f64 = 30.0;
/// Most points drawn per series: a longer series is thinned to the extremes of each slice of
/// the data (so peaks stay), which keeps the SVG small whatever the computed series' length.
const MAX_POINTS: usize = 4000;

/// An axis range plotters can draw: finite ends within [`AXIS_LIMIT`], a span that the tick
/// step does not lose in rounding, and a log range positive and at most [`LOG_DECADES`] wide
/// (the top kept; lines below are cut).
fn bounded(r: (f64, f64), scale: Scale) -> (f64, f64) {
    match scale {
        Scale::Linear => {
            let fix = |v: f64| {
                if v.is_nan() {
                    0.0
                } else {
                    v.clamp(-AXIS_LIMIT, AXIS_LIMIT)
                }
            };
            let (lo, hi) = (fix(r.0.min(r.1)), fix(r.0.max(r.1)));
            let min_span = (lo.abs().max(hi.abs()) * 1e-9).max(1e-150);
            if hi - lo < min_span {
                let c = 0.5 * (lo + hi);
                (c - min_span, c + min_span)
            } else {
                (lo, hi)
            }
        }
        Scale::Log => {
            let fix = |v: f64| {
                if v > 0.0 {
                    v.clamp(1.0 / AXIS_LIMIT, AXIS_LIMIT)
                } else {
                    1.0 / AXIS_LIMIT
                }
            };
            let (lo, hi) = (fix(r.0.min(r.1)), fix(r.0.max(r.1)));
            let widest = 10f64.powf(LOG_DECADES);
            if hi < lo * (1.0 + 1e-9) {
                (lo / 2.0, lo * 2.0)
            } else if hi / lo > widest {
                (hi / widest, hi)
            } else {
                (lo, hi)
            }
        }
    }
}

/// At most [`MAX_POINTS`] points, keeping the first, the last and each slice's lowest and
/// highest point in their order.
fn thinned(points: &[(f64, f64)]) -> Vec<(f64, f64)> {
    if points.len() <= MAX_POINTS {
        return points.to_vec();
    }
    let slices = MAX_POINTS / 2 - 1;
    let per = points.len().div_ceil(slices);
    let mut out = Vec::with_capacity(MAX_POINTS);
    for chunk in points.chunks(per) {
        let by_y = |a: &&(f64, f64), b: &&(f64, f64)| a.1.total_cmp(&b.1);
        let lo = chunk.iter().enumerate().min_by(|a, b| by_y(&a.1, &b.1));
        let hi = chunk.iter().enumerate().max_by(|a, b| by_y(&a.1, &b.1));
        if let (Some((i, p)), Some((j, q))) = (lo, hi) {
            let (first, second) = if i <= j { (*p, *q) } else { (*q, *p) };
            out.push(first);
            if i != j {
                out.push(second);
            }
        }
    }
    out
}

/// A tick label in engineering notation, resolved to the axis's tick step so that no two
/// labels read the same: a prefix (or, for a plain number, an exponent that is a multiple of
/// three, the same along a linear axis) chosen per value, and as many decimals as the step needs in that prefix. `span` is
/// the axis's range for a linear axis and `None` for a log axis (ticks at powers of ten or
/// 1-2-5 steps within a decade, three significant digits resolve them). `%` and units that
/// take no prefix print as plain numbers ("0.55 %", never "550 m%").
fn tick_text(v: f64, axis: &Axis, integer: bool, range: Option<(f64, f64)>) -> String {
    if integer {
        return format!("{}", v.round() as i64);
    }
    if !v.is_finite() {
        return String::new();
    }
    // Linear ticks sit on a 1-2-5 step; a label needs the decimals of that step's decade.
    let step = range.map(|(lo, hi)| {
        let s = hi - lo;
        // The smallest 1-2-5 step that gives at most twenty labels (plotters draws about ten,
        // sometimes a few more), and the decade it is in.
        let raw = s.abs().max(1e-300) / 20.0;
        let decade = 10f64.powf(raw.log10().floor());
        let nice = [1.0, 2.0, 5.0, 10.0]
            .into_iter()
            .find(|m| m * decade >= raw * (1.0 - 1e-9))
            .unwrap_or(10.0);
        if nice >= 10.0 { decade * 10.0 } else { decade }
    });
    // A value within rounding of zero on a linear axis is zero.
    let v = match step {
        Some(st) if v.abs() < st * 1e-6 => 0.0,
        _ => v,
    };
    let unit = axis.unit.as_deref().unwrap_or("");
    let prefixable = !unit.is_empty() && unit != "%" && unit != "°";
    let decimals = |scale: f64| -> usize {
        match step {
            Some(st) => (-(st / scale).log10().floor()).clamp(0.0, 9.0) as usize,
            None => {
                let x = (v / scale).abs();
                if x >= 99.95 {
                    0
                } else if x >= 9.995 {
                    1
                } else {
                    2
                }
            }
        }
    };
    let trim = |s: String| -> String {
        // On a log axis the ticks are round numbers: "1.00 k" reads better as "1 k".
        if step.is_none() && s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            s
        }
    };
    if v == 0.0 {
        return if unit.is_empty() {
            "0".into()
        } else {
            format!("0 {unit}")
        };
    }
    if step.is_none() && v > 0.0 {
        // A log axis: label 1, 2 and 5 of each decade only; plotters puts a tick at every
        // integer of a decade, and "7e6 8e6 9e6 10e6" run into each other.
        let m = v / 10f64.powf(v.log10().floor());
        if ![1.0, 2.0, 5.0, 10.0]
            .iter()
            .any(|k| (m - k).abs() < 1e-6 * k)
        {
            return String::new();
        }
    }
    let a = v.abs();
    if prefixable {
        let (scale, p) = crate::units::engineering_prefix(a, "µ", 0.9995);
        let x = trim(format!("{:.*}", decimals(scale), v / scale));
        return format!("{x} {p}{unit}");
    }
    // A plain number (or %): as it is from 0.001 to 99 999, else mantissa and an exponent that
    // is a multiple of three ("2.5e6", "100e3").
    let top = range.map_or(a, |(lo, hi)| lo.abs().max(hi.abs()));
    let exp3 = if (1e-3..1e5).contains(&top) {
        0
    } else {
        (top.log10().floor() / 3.0).floor() as i32 * 3
    };
    let scale = 10f64.powi(exp3);
    let x = trim(format!("{:.*}", decimals(scale), v / scale));
    let num = if exp3 == 0 { x } else { format!("{x}e{exp3}") };
    if unit.is_empty() {
        num
    } else {
        format!("{num} {unit}")
    }
}

/// When a linear axis spans less than 10 % of its largest value, the whole height is a small
/// change; say so in the axis label, so a 2 % change does not read as a cliff. Returns the
/// note, e.g. "full height 2.30 % of 3.45 ns".
pub fn narrow_note(lo: f64, hi: f64, unit: Option<&str>) -> Option<String> {
    let top = lo.abs().max(hi.abs());
    let span = hi - lo;
    if !top.is_finite() || top <= 0.0 || !span.is_finite() || span <= 0.0 || lo * hi <= 0.0 {
        return None;
    }
    let frac = span / top;
    (frac < 0.10).then(|| {
        let mid = 0.5 * (lo + hi);
        let at = match unit {
            Some(u) if u != "%" => format_eng(mid, u),
            Some(_) => format!("{} %", format_eng(mid, "").trim_end()),
            None => format_eng(mid, "").trim_end().to_string(),
        };
        format!("full height {:.2} % of {at}", frac * 100.0)
    })
}

fn draw<DB, X, Y>(
    root: &DrawingArea<DB, Shift>,
    fig: &Figure,
    xs: X,
    ys: Y,
    xr: (f64, f64),
    yr: (f64, f64),
) -> Result<(), String>
where
    DB: DrawingBackend,
    X: AsRangedCoord<Value = f64>,
    Y: AsRangedCoord<Value = f64>,
    X::CoordDescType: ValueFormatter<f64>,
    Y::CoordDescType: ValueFormatter<f64>,
{
    let e = |e: DrawingAreaErrorKind<DB::ErrorType>| format!("{e:?}");
    root.fill(&WHITE).map_err(e)?;
    let mut chart = ChartBuilder::on(root)
        .caption(
            &fig.title,
            ("sans-serif", 22).into_font().style(FontStyle::Bold),
        )
        .margin(14)
        .x_label_area_size(52)
        .y_label_area_size(84)
        .build_cartesian_2d(xs, ys)
        .map_err(e)?;
    let span = |r: (f64, f64), scale: Scale| (scale == Scale::Linear).then_some(r);
    let (xspan, yspan) = (span(xr, fig.x.scale), span(yr, fig.y.scale));
    let xf = |v: &f64| tick_text(*v, &fig.x, fig.integer_x, xspan);
    let yf = |v: &f64| tick_text(*v, &fig.y, false, yspan);
    // A percentage axis (a ratio, a deviation) already reads as a change: no note.
    let desc = |a: &Axis, r: (f64, f64)| {
        let percent = a.unit.as_deref() == Some("%") || (a.unit.is_none() && a.label.contains('%'));
        match (a.scale, narrow_note(r.0, r.1, a.unit.as_deref())) {
            (Scale::Linear, Some(n)) if !percent => format!("{} ({n})", a.label),
            _ => a.label.clone(),
        }
    };
    let (xdesc, ydesc) = (desc(&fig.x, xr), desc(&fig.y, yr));
    let mut mesh = chart.configure_mesh();
    mesh.x_desc(xdesc.as_str())
        .y_desc(ydesc.as_str())
        .x_label_formatter(&xf)
        .y_label_formatter(&yf)
        .label_style(("sans-serif", 15))
        .axis_desc_style(("sans-serif", 17))
        .light_line_style(RGBColor(235, 235, 235));
    if fig.integer_x {
        let count = (xr.1 - xr.0).round().max(1.0) as usize;
        mesh.x_labels(count.min(24));
    }
    mesh.draw().map_err(e)?;

    for b in &fig.bands {
        let lo = b.lo.max(yr.0);
        let hi = b.hi.min(yr.1);
        if hi > lo {
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [(xr.0, lo), (xr.1, hi)],
                    BAND.mix(0.25).filled(),
                )))
                .map_err(e)?
                .label(b.label.as_str())
                .legend(|(x, y)| {
                    Rectangle::new([(x, y - 6), (x + 18, y + 6)], BAND.mix(0.4).filled())
                });
        }
    }
    let bar_series: Vec<usize> = fig
        .series
        .iter()
        .enumerate()
        .filter(|(_, s)| s.style == Style::Bars)
        .map(|(i, _)| i)
        .collect();
    for (i, s) in fig.series.iter().enumerate() {
        let colour = PALETTE[i % PALETTE.len()];
        let pts: Vec<(f64, f64)> = s
            .points
            .iter()
            .copied()
            .filter(|(x, y)| usable(*x, fig.x.scale) && usable(*y, fig.y.scale))
            .collect();
        let anno = match s.style {
            Style::Line => {
                // Cut the polyline where it leaves the vertical range, so that nothing is drawn
                // flattened against the frame.
                let mut pieces: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
                let inside = |y: f64| y >= yr.0 && y <= yr.1;
                let cut = |a: (f64, f64), b: (f64, f64), edge: f64| {
                    let t = (edge - a.1) / (b.1 - a.1);
                    (a.0 + t * (b.0 - a.0), edge)
                };
                for (k, p) in pts.iter().copied().enumerate() {
                    let prev = if k > 0 { Some(pts[k - 1]) } else { None };
                    match (prev, inside(p.1)) {
                        (Some(q), true) if !inside(q.1) => {
                            let edge = if q.1 > yr.1 { yr.1 } else { yr.0 };
                            pieces.push(vec![cut(q, p, edge), p]);
                        }
                        (_, true) => {
                            if let Some(v) = pieces.last_mut() {
                                v.push(p);
                            }
                        }
                        (Some(q), false) if inside(q.1) => {
                            let edge = if p.1 > yr.1 { yr.1 } else { yr.0 };
                            if let Some(v) = pieces.last_mut() {
                                v.push(cut(q, p, edge));
                            }
                            pieces.push(Vec::new());
                        }
                        _ => {}
                    }
                }
                let mut drawn = None;
                for piece in pieces.into_iter().filter(|v| v.len() > 1) {
                    drawn = Some(
                        chart
                            .draw_series(LineSeries::new(piece, colour.stroke_width(2)))
                            .map_err(e)?,
                    );
                }
                match drawn {
                    Some(d) => d,
                    None => chart
                        .draw_series(std::iter::empty::<Circle<(f64, f64), i32>>())
                        .map_err(e)?,
                }
            }
            // Points outside a fixed vertical range are left out, not piled on the frame.
            Style::Points => chart
                .draw_series(
                    pts.into_iter()
                        .filter(|p| p.1 >= yr.0 && p.1 <= yr.1)
                        .map(|p| Circle::new(p, 3, colour.filled())),
                )
                .map_err(e)?,
            Style::Bars => {
                let k = bar_series.len().max(1) as f64;
                let slot = bar_series.iter().position(|j| *j == i).unwrap_or(0) as f64;
                let w = 0.8 / k;
                let base = yr.0.max(0.0).min(yr.1);
                chart
                    .draw_series(pts.into_iter().map(|(x, y)| {
                        let left = x - 0.4 + slot * w;
                        Rectangle::new(
                            [(left, base), (left + w * 0.92, y)],
                            colour.mix(0.85).filled(),
                        )
                    }))
                    .map_err(e)?
            }
        };
        anno.label(s.label.as_str())
            .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], colour.filled()));
    }
    // Fraction of the way along an axis, in the axis's own scale.
    let frac = |v: f64, r: (f64, f64), scale: Scale| match scale {
        Scale::Linear => (v - r.0) / (r.1 - r.0),
        Scale::Log => (v / r.0).ln() / (r.1 / r.0).ln(),
    };
    for m in &fig.markers {
        use plotters::style::text_anchor::{HPos, Pos, VPos};
        let (line, label, at, pos) = match m {
            Marker::X(x, l) if usable(*x, fig.x.scale) && *x >= xr.0 && *x <= xr.1 => {
                // Label beside the line, on the side with room, just under the top edge.
                let right_half = frac(*x, xr, fig.x.scale) > 0.6;
                let h = if right_half { HPos::Right } else { HPos::Left };
                let text = if right_half {
                    format!("{l} ")
                } else {
                    format!(" {l}")
                };
                (
                    vec![(*x, yr.0), (*x, yr.1)],
                    text,
                    (*x, yr.1),
                    Pos::new(h, VPos::Top),
                )
            }
            Marker::Y(y, l) if usable(*y, fig.y.scale) && *y >= yr.0 && *y <= yr.1 => {
                // Label above the line, at the end away from the legend.
                let line = vec![(xr.0, *y), (xr.1, *y)];
                if fig.legend == Legend::UpperLeft {
                    (
                        line,
                        format!("{l} "),
                        (xr.1, *y),
                        Pos::new(HPos::Right, VPos::Bottom),
                    )
                } else {
                    (
                        line,
                        format!(" {l}"),
                        (xr.0, *y),
                        Pos::new(HPos::Left, VPos::Bottom),
                    )
                }
            }
            _ => continue,
        };
        chart
            .draw_series(DashedLineSeries::new(line, 6, 4, MARKER.stroke_width(1)))
            .map_err(e)?;
        chart
            .draw_series(std::iter::once(Text::new(
                label,
                at,
                ("sans-serif", 14).into_font().color(&MARKER).pos(pos),
            )))
            .map_err(e)?;
    }
    let labelled = fig.series.len() + fig.bands.len();
    if labelled > 1 {
        chart
            .configure_series_labels()
            .background_style(WHITE.mix(0.85))
            .border_style(RGBColor(180, 180, 180))
            .label_font(("sans-serif", 15))
            .position(match fig.legend {
                Legend::UpperLeft => SeriesLabelPosition::UpperLeft,
                Legend::UpperRight => SeriesLabelPosition::UpperRight,
                Legend::LowerRight => SeriesLabelPosition::LowerRight,
            })
            .draw()
            .map_err(e)?;
    }
    root.present().map_err(e)?;
    Ok(())
}

/// Pixel size of a figure: a chart is [`WIDTH`] × [`HEIGHT`]; a sketch has its own.
pub fn size(fig: &Figure) -> (u32, u32) {
    fig.sketch
        .as_ref()
        .map_or((WIDTH, HEIGHT), |s| (s.width, s.height))
}

fn draw_sketch<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    fig: &Figure,
    sk: &Sketch,
) -> Result<(), String> {
    use plotters::style::text_anchor::{HPos, Pos, VPos};
    let e = |e: DrawingAreaErrorKind<DB::ErrorType>| format!("{e:?}");
    let ink = RGBColor(30, 30, 30);
    let thin = RGBColor(120, 120, 120);
    root.fill(&WHITE).map_err(e)?;
    root.draw(&Text::new(
        fig.title.clone(),
        (sk.width as i32 / 2, 22),
        ("sans-serif", 20)
            .into_font()
            .style(FontStyle::Bold)
            .color(&BLACK)
            .pos(Pos::new(HPos::Center, VPos::Center)),
    ))
    .map_err(e)?;
    for i in &sk.ink {
        match i {
            Ink::Path(p) => root
                .draw(&PathElement::new(p.clone(), ink.stroke_width(2)))
                .map_err(e)?,
            Ink::Thin(p) => root
                .draw(&PathElement::new(p.clone(), thin.stroke_width(1)))
                .map_err(e)?,
            Ink::Frame(x0, y0, x1, y1) => root
                .draw(&Rectangle::new(
                    [(*x0, *y0), (*x1, *y1)],
                    ink.stroke_width(2),
                ))
                .map_err(e)?,
            Ink::Dot(x, y) => root
                .draw(&Circle::new((*x, *y), 3, ink.filled()))
                .map_err(e)?,
            Ink::Ring(x, y, r) => root
                .draw(&Circle::new((*x, *y), *r, ink.stroke_width(2)))
                .map_err(e)?,
            Ink::Text {
                x,
                y,
                text,
                size,
                anchor,
                bold,
            } => {
                let h = match anchor {
                    Anchor::Left => HPos::Left,
                    Anchor::Centre => HPos::Center,
                    Anchor::Right => HPos::Right,
                };
                let font = ("sans-serif", *size).into_font().style(if *bold {
                    FontStyle::Bold
                } else {
                    FontStyle::Normal
                });
                root.draw(&Text::new(
                    text.clone(),
                    (*x, *y),
                    font.color(&BLACK).pos(Pos::new(h, VPos::Center)),
                ))
                .map_err(e)?
            }
        }
    }
    root.present().map_err(e)?;
    Ok(())
}

fn render<DB: DrawingBackend>(root: DrawingArea<DB, Shift>, fig: &Figure) -> Result<(), String> {
    register_fonts()?;
    if let Some(sk) = &fig.sketch {
        return draw_sketch(&root, fig, sk);
    }
    let xs = fig
        .series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.0))
        .chain(fig.markers.iter().filter_map(|m| match m {
            Marker::X(x, _) => Some(*x),
            Marker::Y(..) => None,
        }));
    let bars = fig.series.iter().any(|s| s.style == Style::Bars);
    let xr = if bars {
        // Bars sit on integer positions: half a slot of room each side, no padding.
        let (lo, hi) = fig
            .series
            .iter()
            .flat_map(|s| s.points.iter().map(|p| p.0))
            .filter(|x| x.is_finite())
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| {
                (a.min(x), b.max(x))
            });
        if lo.is_finite() {
            (lo - 0.6, hi + 0.6)
        } else {
            (0.0, 1.0)
        }
    } else {
        range(xs, fig.x.scale)
    };
    let ys = fig
        .series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.1))
        .chain(fig.markers.iter().filter_map(|m| match m {
            Marker::Y(y, _) => Some(*y),
            Marker::X(..) => None,
        }))
        .chain(fig.bands.iter().flat_map(|b| [b.lo, b.hi]));
    let mut yr = range(ys, fig.y.scale);
    if bars && fig.y.scale == Scale::Linear {
        yr.0 = yr.0.min(0.0);
    }
    if let Some((lo, hi)) = fig.y_limits {
        yr = (lo, hi);
    }
    let xr = bounded(xr, if bars { Scale::Linear } else { fig.x.scale });
    let yr = bounded(yr, fig.y.scale);
    // A log axis over less than about a decade and a half would carry no tick labels (they
    // sit at powers of ten): draw such a range linearly instead.
    let narrow = |r: (f64, f64), scale: Scale| scale == Scale::Log && r.1 / r.0 < 30.0;
    let mut fig = fig.clone();
    for s in &mut fig.series {
        s.points = thinned(&s.points);
    }
    if narrow(yr, fig.y.scale) {
        fig.y.scale = Scale::Linear;
    }
    if narrow(xr, fig.x.scale) {
        fig.x.scale = Scale::Linear;
    }
    let fig = &fig;
    match (fig.x.scale, fig.y.scale) {
        (Scale::Linear, Scale::Linear) => draw(&root, fig, xr.0..xr.1, yr.0..yr.1, xr, yr),
        (Scale::Log, Scale::Linear) => {
            draw(&root, fig, (xr.0..xr.1).log_scale(), yr.0..yr.1, xr, yr)
        }
        (Scale::Linear, Scale::Log) => {
            draw(&root, fig, xr.0..xr.1, (yr.0..yr.1).log_scale(), xr, yr)
        }
        (Scale::Log, Scale::Log) => draw(
            &root,
            fig,
            (xr.0..xr.1).log_scale(),
            (yr.0..yr.1).log_scale(),
            xr,
            yr,
        ),
    }
}

/// Render a figure as SVG text.
pub fn svg(fig: &Figure) -> Result<String, PlotError> {
    let mut out = String::new();
    {
        let root = SVGBackend::with_string(&mut out, size(fig)).into_drawing_area();
        render(root, fig).map_err(|reason| PlotError::Draw {
            figure: fig.name.clone(),
            reason,
        })?;
    }
    Ok(out)
}

/// Render a figure as PNG into the file at `path` (the caller handles atomic placement).
pub fn png(fig: &Figure, path: &Path) -> Result<(), PlotError> {
    let bytes = png_bytes(fig)?;
    std::fs::write(path, bytes).map_err(|e| PlotError::Draw {
        figure: fig.name.clone(),
        reason: e.to_string(),
    })
}

/// Render a figure as PNG bytes (RGB, 8 bits), for a write that the caller makes atomic.
pub fn png_bytes(fig: &Figure) -> Result<Vec<u8>, PlotError> {
    let fail = |reason: String| PlotError::Draw {
        figure: fig.name.clone(),
        reason,
    };
    let (width, height) = size(fig);
    let mut rgb = vec![0u8; width as usize * height as usize * 3];
    {
        let root = BitMapBackend::with_buffer(&mut rgb, (width, height)).into_drawing_area();
        render(root, fig).map_err(fail)?;
    }
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, width, height);
        enc.set_color(png::ColorType::Rgb);
        enc.set_depth(png::BitDepth::Eight);
        let mut w = enc.write_header().map_err(|e| fail(e.to_string()))?;
        w.write_image_data(&rgb).map_err(|e| fail(e.to_string()))?;
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every `<text>` of a rendered SVG.
    fn texts(svg: &str) -> Vec<String> {
        svg.split("<text")
            .skip(1)
            .filter_map(|t| {
                let body = &t[t.find('>')? + 1..];
                Some(body[..body.find("</text>")?].trim().to_string())
            })
            .collect()
    }

    fn line(name: &str, x: Axis, y: Axis, pts: Vec<(f64, f64)>) -> Figure {
        Figure::new(name, name, x, y).with("data", Style::Line, pts)
    }

    /// Ranges the issue met (a gain from 2e6 to 4.4e6 read "2e6 2e6 … 4e6 4e6", a spread axis
    /// read "550 m%", a rise over 3.41–3.49 ns) and a few more: the rendered tick labels are all
    /// different, and a percentage never takes a prefix.
    #[test]
    fn tick_labels_never_repeat() {
        let cases: Vec<(Option<&str>, f64, f64)> = vec![
            (None, 2.0e6, 4.4e6),
            (Some("%"), 0.2, 0.9),
            (Some("s"), 3.41e-9, 3.49e-9),
            (Some("V"), 660.0, 1500.0),
            (Some("V"), 999.0, 1001.0),
            (None, 0.9998, 1.0003),
            (Some("A"), -2e-6, 7e-6),
            (None, 100.0, 1.0e5),
        ];
        for (unit, lo, hi) in cases {
            let pts: Vec<(f64, f64)> = (0..=20)
                .map(|i| (f64::from(i), lo + (hi - lo) * f64::from(i) / 20.0))
                .collect();
            let fig = line(
                "t",
                Axis::linear("x", Some("Hz")),
                Axis::linear("y", unit),
                pts,
            );
            let svg = svg(&fig).unwrap();
            let t = texts(&svg);
            let mut seen = std::collections::BTreeSet::new();
            for label in &t {
                assert!(
                    seen.insert(label.clone()),
                    "{unit:?} {lo}..{hi}: '{label}' twice in {t:?}"
                );
                assert!(!label.contains("m%"), "{label}");
            }
        }
    }

    /// A linear axis whose height is a small part of its value says so in its label; one that
    /// spans zero or a wide range does not.
    #[test]
    fn narrow_axes_say_so() {
        let n = narrow_note(3.41e-9, 3.49e-9, Some("s")).unwrap();
        assert!(n.contains("2.29 %") && n.contains("3.45 ns"), "{n}");
        assert!(narrow_note(-1.0, 1.0, Some("V")).is_none());
        assert!(narrow_note(660.0, 1500.0, Some("V")).is_none());
        let fig = line(
            "rise",
            Axis::linear("x", None),
            Axis::linear("rise", Some("s")),
            vec![(0.0, 3.85e-9), (1.0, 3.92e-9)],
        );
        assert!(svg(&fig).unwrap().contains("full height"));
    }
}
