//! The chart of a [`ModelView`]: rows as dots coloured by their most responsible component,
//! each component's 1σ (solid) and 2σ (dashed) ellipse, and its mean as a numbered disc.
//! Both axes use the same scale, so ellipses keep their true shape.

use plotters::coord::types::RangedCoordf64;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, VPos};

use crate::ModelView;
use crate::format::{decimals_for, fixed};
use crate::palette;
use crate::svg::{self, fail};

/// Width and height of the chart in view-box units.
const SIZE: (u32, u32) = (1040, 620);
/// Width and height with one column, where the vertical axis carries nothing.
const SIZE_ONE_AXIS: (u32, u32) = (1040, 300);
const MARGIN: (u32, u32, u32, u32) = (10, 8, 6, 22); // top, bottom, left, right
const X_LABELS: u32 = 50;
const Y_LABELS: u32 = 78;
/// Points on each drawn ellipse.
const ELLIPSE_STEPS: usize = 96;

/// "principal axis 1 (72.9 % of the variance)".
fn axis_desc(view: &ModelView, axis: usize) -> String {
    if axis == 1 && view.single_axis() {
        return "no second axis (one column)".into();
    }
    format!(
        "principal axis {} ({:.1} % of the variance)",
        axis + 1,
        100.0 * view.axis_share()[axis]
    )
}

/// Ranges holding every drawn row and every 2σ ellipse, widened so one unit spans the same
/// number of pixels on both axes.
fn ranges(view: &ModelView, size: (u32, u32)) -> (std::ops::Range<f64>, std::ops::Range<f64>) {
    let mut lo = [f64::INFINITY; 2];
    let mut hi = [f64::NEG_INFINITY; 2];
    let mut take = |p: [f64; 2]| {
        for a in 0..2 {
            if p[a].is_finite() {
                lo[a] = lo[a].min(p[a]);
                hi[a] = hi[a].max(p[a]);
            }
        }
    };
    view.points().iter().for_each(|&p| take(p));
    for c in view.components() {
        c.ellipse(2.0, ELLIPSE_STEPS)
            .into_iter()
            .for_each(|(x, y)| take([x, y]));
    }
    let width = (size.0 - MARGIN.2 - MARGIN.3 - Y_LABELS) as f64;
    let height = (size.1 - MARGIN.0 - MARGIN.1 - X_LABELS) as f64;
    let span = |a: usize| if hi[a] > lo[a] { hi[a] - lo[a] } else { 0.0 };
    // Units per pixel, with 4 % room each side; 1 when everything sits on one point.
    let mut per_pixel = (span(0) / width).max(span(1) / height) * 1.08;
    if !(per_pixel.is_finite() && per_pixel > 0.0) {
        per_pixel = 1.0 / width;
    }
    let mid = |a: usize| {
        if lo[a].is_finite() {
            0.5 * (lo[a] + hi[a])
        } else {
            0.0
        }
    };
    let half = (0.5 * per_pixel * width, 0.5 * per_pixel * height);
    (
        mid(0) - half.0..mid(0) + half.0,
        mid(1) - half.1..mid(1) + half.1,
    )
}

type ViewChart<'a, 'b> =
    ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// Every drawn row as a dot in its component's colour, in data order so no component is
/// painted over the others wholesale.
fn dots(chart: &mut ViewChart<'_, '_>, view: &ModelView) -> Result<(), String> {
    let radius = if view.points().len() <= 600 { 3 } else { 2 };
    chart
        .draw_series(view.points().iter().zip(view.assignment()).map(|(p, &k)| {
            Circle::new(
                (p[0], p[1]),
                radius,
                palette::component(k).rgb().mix(0.55).filled(),
            )
        }))
        .map(|_| ())
        .map_err(fail)
}

/// The chart as inline SVG.
pub(crate) fn chart(view: &ModelView) -> Result<String, String> {
    let size = if view.single_axis() {
        SIZE_ONE_AXIS
    } else {
        SIZE
    };
    let (x, y) = ranges(view, size);
    let choice = view.choice();
    let title = format!(
        "Rows of the data on its first two principal axes, coloured by component of the {} model with {} components",
        choice.covariance, choice.components
    );
    let x_decimals = decimals_for(x.end - x.start).saturating_sub(1);
    let y_decimals = decimals_for(y.end - y.start).saturating_sub(1);
    svg::draw(size, &title, |root| {
        let mut chart = ChartBuilder::on(root)
            .margin_top(MARGIN.0)
            .margin_bottom(MARGIN.1)
            .margin_left(MARGIN.2)
            .margin_right(MARGIN.3)
            .x_label_area_size(X_LABELS)
            .y_label_area_size(Y_LABELS)
            .build_cartesian_2d(x.clone(), y.clone())
            .map_err(fail)?;
        let x_label = |v: &f64| fixed(*v, x_decimals);
        let y_label = |v: &f64| fixed(*v, y_decimals);
        chart
            .configure_mesh()
            .light_line_style(palette::PAPER.rgb())
            .bold_line_style(palette::GRID.rgb())
            .axis_style(palette::AXIS.rgb())
            .x_labels(10)
            .y_labels(8)
            .x_label_formatter(&x_label)
            .y_label_formatter(&y_label)
            .label_style(svg::text(13.0, palette::MUTED))
            .axis_desc_style(svg::text(14.0, palette::INK))
            .x_desc(axis_desc(view, 0))
            .y_desc(axis_desc(view, 1))
            .draw()
            .map_err(fail)?;

        // With one column every row sits on the axis, under the (flat) ellipses: draw the
        // rows last there so they stay visible.
        if !view.single_axis() {
            dots(&mut chart, view)?;
        }
        for (k, c) in view.components().iter().enumerate() {
            let colour = palette::component(k).rgb();
            chart
                .draw_series(std::iter::once(PathElement::new(
                    c.ellipse(1.0, ELLIPSE_STEPS),
                    colour.stroke_width(2),
                )))
                .map_err(fail)?;
            chart
                .draw_series(std::iter::once(DashedPathElement::new(
                    c.ellipse(2.0, ELLIPSE_STEPS),
                    6,
                    4,
                    colour.stroke_width(2),
                )))
                .map_err(fail)?;
        }
        if view.single_axis() {
            dots(&mut chart, view)?;
        }
        for (k, c) in view.components().iter().enumerate() {
            let colour = palette::component(k).rgb();
            let at = (c.centre[0], c.centre[1]);
            chart
                .draw_series(std::iter::once(
                    EmptyElement::at(at)
                        + Circle::new((0, 0), 9, palette::PAPER.rgb().filled())
                        + Circle::new((0, 0), 9, colour.stroke_width(2))
                        + Text::new(
                            (k + 1).to_string(),
                            (0, 0),
                            svg::bold(12.0, palette::INK, HPos::Center, VPos::Center),
                        ),
                ))
                .map_err(fail)?;
        }
        Ok(())
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::view::tests::{grid, two_components};

    #[test]
    fn both_axes_share_one_scale() {
        let view = ModelView::new(&two_components(), &grid(), 2, 5000).unwrap();
        let (x, y) = ranges(&view, SIZE);
        let width = (SIZE.0 - MARGIN.2 - MARGIN.3 - Y_LABELS) as f64;
        let height = (SIZE.1 - MARGIN.0 - MARGIN.1 - X_LABELS) as f64;
        let (ux, uy) = ((x.end - x.start) / width, (y.end - y.start) / height);
        assert!((ux - uy).abs() < 1e-12 * ux.max(uy));
        for p in view.points() {
            assert!(x.contains(&p[0]) && y.contains(&p[1]));
        }
    }

    #[test]
    fn the_chart_has_every_row_ellipses_and_numbered_means() {
        let view = ModelView::new(&two_components(), &grid(), 2, 5000).unwrap();
        let svg = chart(&view).unwrap();
        // 63 rows plus two outlined mean discs (two circles each).
        assert_eq!(svg.matches("<circle").count(), 63 + 4);
        assert!(svg.contains("principal axis 1"));
        assert!(
            svg.contains(">\n1\n</text>") || svg.contains(">1\n</text>"),
            "{svg}"
        );
    }
}
