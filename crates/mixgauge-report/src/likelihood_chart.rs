//! The chart of training against held-out mean per-row log-likelihood by component count,
//! one panel per covariance form, with ±1 SE bars. The band between the curves is the
//! overfitting gap; the highest held-out and one-SE choices are ringed and named; degenerate
//! candidates get hollow markers.

use mixgauge_engine::CovarianceForm;
use mixgauge_select::{Candidate, CandidateStatus, Choice, SweepResult};
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, VPos};

use crate::page::{counts, forms};
use crate::palette::{self, Colour};
use crate::svg::{self, Shape, fail};

/// Width and height of the chart in view-box units.
const SIZE: (u32, u32) = (1040, 420);
/// How far the training and held-out markers sit either side of their count, so their error
/// bars do not overlap.
const NUDGE: f64 = 0.09;

/// One fitted candidate's two curves' values.
struct Point {
    components: f64,
    train: (f64, f64),
    heldout: (f64, f64),
    degenerate: bool,
}

fn points(result: &SweepResult, form: CovarianceForm) -> Vec<Point> {
    result
        .candidates
        .iter()
        .filter(|c| c.covariance == form && c.status == CandidateStatus::Fitted)
        .filter_map(|c: &Candidate| {
            let (t, h) = (c.train?, c.heldout?);
            Some(Point {
                components: c.components as f64,
                train: (t.mean, t.stderr),
                heldout: (h.mean, h.stderr),
                degenerate: c.degenerate,
            })
        })
        .filter(|p| p.train.0.is_finite() && p.heldout.0.is_finite())
        .collect()
}

/// The chart as inline SVG; `Ok(None)` when no candidate has both curves' values.
pub(crate) fn chart(result: &SweepResult) -> Result<Option<String>, String> {
    let forms = forms(result);
    let all: Vec<(CovarianceForm, Vec<Point>)> =
        forms.iter().map(|&f| (f, points(result, f))).collect();
    let spread = all.iter().flat_map(|(_, ps)| ps).flat_map(|p| {
        let se = |(_, s): (f64, f64)| if s.is_finite() { s.max(0.0) } else { 0.0 };
        [
            p.train.0 - se(p.train),
            p.train.0 + se(p.train),
            p.heldout.0 - se(p.heldout),
            p.heldout.0 + se(p.heldout),
        ]
    });
    // Extra room below for the names under the chosen held-out points.
    let Some(y) = svg::padded(spread, 0.14, 0.06) else {
        return Ok(None);
    };
    let counts = counts(result);
    let rec = &result.recommendations;
    let title = "Training and held-out mean log-likelihood per row, by component count";
    svg::draw(SIZE, title, |root| {
        let panels = root.split_evenly((1, all.len().max(1)));
        for (area, (form, pts)) in panels.iter().zip(&all) {
            let mut chart = svg::count_chart(
                area,
                &format!("{form} covariance"),
                &counts,
                y.clone(),
                "mean log-likelihood per row (nats)",
            )?;
            if pts.is_empty() {
                let mid = (counts.first().copied().unwrap_or(1)
                    + counts.last().copied().unwrap_or(1)) as f64
                    / 2.0;
                svg::label(
                    &mut chart,
                    (mid, (y.start + y.end) / 2.0),
                    (0, 0),
                    "no fitted candidate",
                    svg::anchored(14.0, palette::MUTED, HPos::Center, VPos::Center),
                )?;
                continue;
            }
            let chosen = |c: &Option<Choice>| {
                c.filter(|c| c.covariance == *form)
                    .map(|c| c.components as f64)
            };
            let best = chosen(&rec.heldout_max);
            let one_se = chosen(&rec.heldout_one_se);

            // The gap band under everything else.
            let mut band: Vec<(f64, f64)> = pts.iter().map(|p| (p.components, p.train.0)).collect();
            band.extend(pts.iter().rev().map(|p| (p.components, p.heldout.0)));
            chart
                .draw_series(std::iter::once(Polygon::new(
                    band,
                    palette::GAP.rgb().mix(0.55).filled(),
                )))
                .map_err(fail)?;
            if let Some(k) = best {
                chart
                    .draw_series(std::iter::once(DashedPathElement::new(
                        vec![(k, y.start), (k, y.end)],
                        5,
                        4,
                        palette::INK.rgb().mix(0.55).stroke_width(1),
                    )))
                    .map_err(fail)?;
            }
            curve(
                &mut chart,
                pts,
                |p| p.train,
                -NUDGE,
                palette::TRAIN,
                Shape::Circle,
            )?;
            curve(
                &mut chart,
                pts,
                |p| p.heldout,
                NUDGE,
                palette::HELDOUT,
                Shape::Square,
            )?;

            let first = counts.first().copied().unwrap_or(1) as f64;
            let last = counts.last().copied().unwrap_or(1) as f64;
            // `row` stacks names of neighbouring choices so they cannot overlap.
            let mut name = |k: f64, words: &str, ring: bool, row: i32| -> Result<(), String> {
                let Some(p) = pts.iter().find(|p| p.components == k) else {
                    return Ok(());
                };
                let at = (k + NUDGE, p.heldout.0);
                if ring {
                    svg::ring(&mut chart, at, 10, palette::INK)?;
                } else {
                    diamond_ring(&mut chart, at)?;
                }
                let below = (k + NUDGE, p.heldout.0 - p.heldout.1.max(0.0));
                let h = if k <= first {
                    HPos::Left
                } else if k >= last {
                    HPos::Right
                } else {
                    HPos::Center
                };
                svg::label(
                    &mut chart,
                    below,
                    (0, 10 + 17 * row),
                    words,
                    svg::anchored(13.0, palette::INK, h, VPos::Top),
                )
            };
            match (best, one_se) {
                (Some(b), Some(o)) if b == o => name(b, "highest held-out = one-SE", true, 0)?,
                (b, o) => {
                    if let Some(b) = b {
                        name(b, "highest held-out", true, 0)?;
                    }
                    if let Some(o) = o {
                        name(o, "one-SE", false, 1)?;
                    }
                }
            }
        }
        Ok(())
    })
    .map(Some)
}

/// One curve: line, ±1 SE bars, then markers (hollow where degenerate).
fn curve(
    chart: &mut svg::CountChart<'_, '_>,
    pts: &[Point],
    value: impl Fn(&Point) -> (f64, f64),
    nudge: f64,
    colour: Colour,
    shape: Shape,
) -> Result<(), String> {
    chart
        .draw_series(LineSeries::new(
            pts.iter().map(|p| (p.components + nudge, value(p).0)),
            colour.rgb().stroke_width(2),
        ))
        .map_err(fail)?;
    for p in pts {
        let (m, s) = value(p);
        if s.is_finite() && s > 0.0 {
            svg::error_bar(chart, p.components + nudge, m - s, m + s, colour)?;
        }
    }
    for p in pts {
        svg::marker(
            chart,
            (p.components + nudge, value(p).0),
            shape,
            colour,
            5,
            p.degenerate,
        )?;
    }
    Ok(())
}

/// The one-SE mark: a diamond outline around the point.
fn diamond_ring(chart: &mut svg::CountChart<'_, '_>, at: (f64, f64)) -> Result<(), String> {
    let pts = vec![(0, -12), (12, 0), (0, 12), (-12, 0), (0, -12)];
    chart
        .draw_series(std::iter::once(
            EmptyElement::at(at) + PathElement::new(pts, palette::INK.rgb().stroke_width(2)),
        ))
        .map(|_| ())
        .map_err(fail)
}
