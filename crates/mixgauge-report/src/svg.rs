//! Drawing plotters charts into inline SVG: the backend setup, the shared look of axes and
//! text, marker shapes, and the rewrite that lets an SVG scale with the page.
//!
//! Text goes out as SVG `<text>` elements styled by the page's CSS, so layout space for
//! labels is reserved by fixed sizes here rather than measured from font files.

use std::ops::Range;

use plotters::coord::Shift;
use plotters::coord::ranged1d::{DefaultFormatting, KeyPointHint};
use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use crate::format::{decimals_for, escape, fixed};
use crate::palette::{self, Colour};

/// A chart area whose x axis is the component count.
pub(crate) type CountChart<'a, 'b> =
    ChartContext<'a, SVGBackend<'b>, Cartesian2d<CountAxis, RangedCoordf64>>;

/// An x axis of component counts: continuous (markers sit a little either side of a count),
/// with one tick per count tried and no ticks between them.
pub(crate) struct CountAxis {
    inner: RangedCoordf64,
    ticks: Vec<f64>,
}

impl Ranged for CountAxis {
    type FormatOption = DefaultFormatting;
    type ValueType = f64;

    fn map(&self, value: &f64, limit: (i32, i32)) -> i32 {
        self.inner.map(value, limit)
    }

    fn key_points<Hint: KeyPointHint>(&self, hint: Hint) -> Vec<f64> {
        if hint.weight().allow_light_points() {
            Vec::new()
        } else {
            self.ticks.clone()
        }
    }

    fn range(&self) -> Range<f64> {
        self.inner.range()
    }
}

/// Font family written into the SVG; the page's CSS replaces it with its system font stack.
const FAMILY: &str = "sans-serif";

/// Turns a drawing error into the sentence shown in place of the chart.
pub(crate) fn fail(e: impl std::fmt::Display) -> String {
    e.to_string()
}

/// Draws an SVG of `size` (view-box units) with `paint`, then makes it scale to the width of
/// its container and gives it an accessible `title`.
pub(crate) fn draw<F>(size: (u32, u32), title: &str, paint: F) -> Result<String, String>
where
    F: FnOnce(&DrawingArea<SVGBackend<'_>, Shift>) -> Result<(), String>,
{
    let mut out = String::new();
    {
        let root = SVGBackend::with_string(&mut out, size).into_drawing_area();
        root.fill(&palette::PAPER.rgb()).map_err(fail)?;
        paint(&root)?;
        root.present().map_err(fail)?;
    }
    Ok(responsive(&out, size, title))
}

/// Drops the fixed width and height (the view box keeps the aspect ratio, CSS sets the
/// width) and adds a `<title>`.
fn responsive(svg: &str, (w, h): (u32, u32), title: &str) -> String {
    let fixed_size = format!("<svg width=\"{w}\" height=\"{h}\" ");
    let opening = format!(
        "<svg class=\"chart\" role=\"img\" aria-label=\"{}\" ",
        escape(title)
    );
    let body = match svg.strip_prefix(&fixed_size) {
        Some(rest) => format!("{opening}{rest}"),
        None => svg.to_string(),
    };
    match body.find('>') {
        Some(end) => format!(
            "{}<title>{}</title>{}",
            &body[..=end],
            escape(title),
            &body[end + 1..]
        ),
        None => body,
    }
}

/// plotters' SVG backend writes `font-size` as the requested size divided by this; sizes
/// here are multiplied by it so the SVG says the size asked for.
const SVG_FONT_SHRINK: f64 = 1.24;

/// Text of `size` pixels in `colour`.
pub(crate) fn text(size: f64, colour: Colour) -> TextStyle<'static> {
    (FAMILY, size * SVG_FONT_SHRINK)
        .into_font()
        .color(&colour.rgb())
}

/// [`text`] anchored at `h`/`v`.
pub(crate) fn anchored(size: f64, colour: Colour, h: HPos, v: VPos) -> TextStyle<'static> {
    text(size, colour).pos(Pos::new(h, v))
}

/// Bold [`anchored`] text.
pub(crate) fn bold(size: f64, colour: Colour, h: HPos, v: VPos) -> TextStyle<'static> {
    (FAMILY, size * SVG_FONT_SHRINK)
        .into_font()
        .style(FontStyle::Bold)
        .color(&colour.rgb())
        .pos(Pos::new(h, v))
}

/// The y range that holds every value in `values`, with margins of `below` and `above` times
/// the spread (room for labels under or over the points).
pub(crate) fn padded(
    values: impl IntoIterator<Item = f64>,
    below: f64,
    above: f64,
) -> Option<Range<f64>> {
    let (lo, hi) = values
        .into_iter()
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
    if lo > hi {
        return None;
    }
    let span = if hi > lo { hi - lo } else { lo.abs().max(1.0) };
    Some(lo - below * span..hi + above * span)
}

/// A panel whose x axis has one tick per component count in `counts`, with the shared mesh
/// style drawn.
pub(crate) fn count_chart<'a, 'b>(
    area: &'a DrawingArea<SVGBackend<'b>, Shift>,
    caption: &str,
    counts: &[usize],
    y: Range<f64>,
    y_desc: &str,
) -> Result<CountChart<'a, 'b>, String> {
    let lo = counts.first().copied().unwrap_or(1) as f64 - 0.6;
    let hi = counts.last().copied().unwrap_or(1) as f64 + 0.6;
    let ticks: Vec<f64> = counts.iter().map(|&k| k as f64).collect();
    let decimals = decimals_for(y.end - y.start).saturating_sub(1);
    let mut chart = ChartBuilder::on(area)
        .caption(caption, text(17.0, palette::INK))
        .margin_top(6)
        .margin_right(18)
        .margin_left(6)
        .x_label_area_size(46)
        .y_label_area_size(78)
        .build_cartesian_2d(
            CountAxis {
                inner: (lo..hi).into(),
                ticks,
            },
            y,
        )
        .map_err(fail)?;
    let y_label = |v: &f64| fixed(*v, decimals);
    let x_label = |v: &f64| format!("{v:.0}");
    chart
        .configure_mesh()
        .disable_x_mesh()
        .light_line_style(palette::PAPER.rgb())
        .bold_line_style(palette::GRID.rgb())
        .axis_style(palette::AXIS.rgb())
        .y_labels(6)
        .x_label_formatter(&x_label)
        .y_label_formatter(&y_label)
        .label_style(text(13.0, palette::MUTED))
        .axis_desc_style(text(14.0, palette::INK))
        .x_desc("components (K)")
        .y_desc(y_desc)
        .draw()
        .map_err(fail)?;
    Ok(chart)
}

/// Marker shapes; each series differs by shape as well as colour.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Shape {
    Circle,
    Square,
    Triangle,
}

/// Draws one marker of `radius` pixels at `at`: filled, or hollow (white inside, coloured
/// outline) for degenerate candidates.
pub(crate) fn marker(
    chart: &mut CountChart<'_, '_>,
    at: (f64, f64),
    shape: Shape,
    colour: Colour,
    radius: i32,
    hollow: bool,
) -> Result<(), String> {
    let c = colour.rgb();
    let fill = if hollow {
        palette::PAPER.rgb().filled()
    } else {
        c.filled()
    };
    let edge = c.stroke_width(2);
    let r = radius;
    let outline = |pts: &[(i32, i32)]| {
        let mut closed = pts.to_vec();
        closed.push(pts[0]);
        closed
    };
    match shape {
        Shape::Circle => chart
            .draw_series(std::iter::once(
                EmptyElement::at(at) + Circle::new((0, 0), r, fill) + Circle::new((0, 0), r, edge),
            ))
            .map(|_| ()),
        Shape::Square => {
            let s = r - 1;
            chart
                .draw_series(std::iter::once(
                    EmptyElement::at(at)
                        + Rectangle::new([(-s, -s), (s, s)], fill)
                        + Rectangle::new([(-s, -s), (s, s)], edge),
                ))
                .map(|_| ())
        }
        Shape::Triangle => {
            let pts = [(0, -r - 1), (r + 1, r), (-r - 1, r)];
            chart
                .draw_series(std::iter::once(
                    EmptyElement::at(at)
                        + Polygon::new(pts.to_vec(), fill)
                        + PathElement::new(outline(&pts), edge),
                ))
                .map(|_| ())
        }
    }
    .map_err(fail)
}

/// A ring of `radius` pixels around `at`, for highlighting a chosen candidate.
pub(crate) fn ring(
    chart: &mut CountChart<'_, '_>,
    at: (f64, f64),
    radius: i32,
    colour: Colour,
) -> Result<(), String> {
    chart
        .draw_series(std::iter::once(
            EmptyElement::at(at) + Circle::new((0, 0), radius, colour.rgb().stroke_width(2)),
        ))
        .map(|_| ())
        .map_err(fail)
}

/// A vertical error bar from `lo` to `hi` at `x`, with end caps.
pub(crate) fn error_bar(
    chart: &mut CountChart<'_, '_>,
    x: f64,
    lo: f64,
    hi: f64,
    colour: Colour,
) -> Result<(), String> {
    let style = colour.rgb().stroke_width(1);
    chart
        .draw_series([
            EmptyElement::at((x, lo)) + PathElement::new(vec![(-4, 0), (4, 0)], style),
            EmptyElement::at((x, hi)) + PathElement::new(vec![(-4, 0), (4, 0)], style),
        ])
        .map_err(fail)?;
    chart
        .draw_series(std::iter::once(PathElement::new(
            vec![(x, lo), (x, hi)],
            style,
        )))
        .map(|_| ())
        .map_err(fail)
}

/// A label at `at`, shifted by `offset` pixels.
pub(crate) fn label(
    chart: &mut CountChart<'_, '_>,
    at: (f64, f64),
    offset: (i32, i32),
    words: &str,
    style: TextStyle<'static>,
) -> Result<(), String> {
    chart
        .draw_series(std::iter::once(
            EmptyElement::at(at) + Text::new(words.to_string(), offset, style),
        ))
        .map(|_| ())
        .map_err(fail)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn svg_loses_its_fixed_size_and_gains_a_title() {
        let svg = draw((200, 100), "a <test>", |root| {
            root.draw(&Circle::new((50, 50), 5, BLACK.filled()))
                .map_err(fail)
        })
        .unwrap();
        let opening = &svg[..svg.find('>').unwrap()];
        assert!(opening.starts_with("<svg class=\"chart\""), "{svg}");
        assert!(!opening.contains("width="), "{opening}");
        assert!(opening.contains("viewBox=\"0 0 200 100\""));
        assert!(svg.contains("<title>a &lt;test&gt;</title>"));
        assert!(svg.contains("<circle"));
    }

    #[test]
    fn padding_keeps_every_value_inside() {
        let r = padded([1.0, 3.0, f64::NAN], 0.1, 0.05).unwrap();
        assert!((r.start - 0.8).abs() < 1e-12 && (r.end - 3.1).abs() < 1e-12);
        let flat = padded([5.0], 0.1, 0.1).unwrap();
        assert!(flat.start < 5.0 && flat.end > 5.0);
        assert!(padded([f64::INFINITY], 0.1, 0.1).is_none());
    }
}
