//! Drawing a [`Figure`] with the plotting library: the chart, its series, bands and markers,
//! the legend, and the sketches (schematics) drawn on the same canvas.

use super::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

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

pub(super) fn register_fonts() -> Result<(), String> {
    static DONE: OnceLock<Result<(), String>> = OnceLock::new();
    DONE.get_or_init(|| {
        plotters::style::register_font("sans-serif", FontStyle::Normal, dejavu::sans::regular())
            .map_err(|_| "the bundled font could not be loaded".to_string())?;
        plotters::style::register_font("sans-serif", FontStyle::Bold, dejavu::sans::bold())
            .map_err(|_| "the bundled bold font could not be loaded".to_string())
    })
    .clone()
}

/// Draw a chart: frame, mesh and tick labels, bands, series, markers, legend.
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
    let (xdesc, ydesc) = (axis_desc(&fig.x, xr), axis_desc(&fig.y, yr));
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
                let pieces = clipped(&pts, yr);
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
    for m in &fig.markers {
        let Some((line, label, at, pos)) = marker_place(m, fig, xr, yr) else {
            continue;
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

/// An axis's title, with a note when a linear axis spans a narrow range (a percentage axis, a
/// ratio or a deviation, already reads as a change: no note).
fn axis_desc(a: &Axis, r: (f64, f64)) -> String {
    let percent = a.unit.as_deref() == Some("%") || (a.unit.is_none() && a.label.contains('%'));
    match (a.scale, narrow_note(r.0, r.1, a.unit.as_deref())) {
        (Scale::Linear, Some(n)) if !percent => format!("{} ({n})", a.label),
        _ => a.label.clone(),
    }
}

/// Cut a polyline where it leaves the vertical range `yr`, so that nothing is drawn flattened
/// against the frame: the pieces inside, each ending on the edge where it leaves.
fn clipped(pts: &[(f64, f64)], yr: (f64, f64)) -> Vec<Vec<(f64, f64)>> {
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
    pieces
}

/// A marker as drawn: its dashed line, its label, the label's anchor point and alignment.
type Placed = (Vec<(f64, f64)>, String, (f64, f64), Pos);

/// Where a marker goes; `None` when it lies outside the axes.
fn marker_place(m: &Marker, fig: &Figure, xr: (f64, f64), yr: (f64, f64)) -> Option<Placed> {
    // Fraction of the way along an axis, in the axis's own scale.
    let frac = |v: f64, r: (f64, f64), scale: Scale| match scale {
        Scale::Linear => (v - r.0) / (r.1 - r.0),
        Scale::Log => (v / r.0).ln() / (r.1 / r.0).ln(),
    };
    Some(match m {
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
        _ => return None,
    })
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

pub(super) fn render<DB: DrawingBackend>(
    root: DrawingArea<DB, Shift>,
    fig: &Figure,
) -> Result<(), String> {
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
