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

mod axes;
mod draw;

use axes::{bounded, narrow_note, range, thinned, tick_text, usable};
use draw::render;

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

/// Pixel size of a figure: a chart is [`WIDTH`] × [`HEIGHT`]; a sketch has its own.
pub fn size(fig: &Figure) -> (u32, u32) {
    fig.sketch
        .as_ref()
        .map_or((WIDTH, HEIGHT), |s| (s.width, s.height))
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
