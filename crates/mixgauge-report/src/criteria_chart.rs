//! The chart of BIC, AIC and ICL by component count, one panel per covariance form. Each
//! criterion's lowest value among the panel's eligible candidates is ringed; the lowest over
//! the whole sweep (the criterion's recommendation) is also named. Degenerate candidates get
//! hollow markers.

use mixgauge_engine::CovarianceForm;
use mixgauge_select::{Candidate, CandidateStatus, Choice, FullFit, SweepResult};
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, VPos};

use crate::page::{counts, forms};
use crate::palette::{self, Colour};
use crate::svg::{self, Shape, fail};

/// Width and height of the chart in view-box units.
const SIZE: (u32, u32) = (1040, 420);

/// One criterion's look and where its value and recommendation live.
pub(crate) struct Criterion {
    pub(crate) name: &'static str,
    pub(crate) colour: Colour,
    pub(crate) shape: Shape,
    /// Dash and gap lengths in pixels; `None` for a solid line.
    pub(crate) dash: Option<(u32, u32)>,
    value: fn(&FullFit) -> f64,
    chosen: fn(&SweepResult) -> Option<Choice>,
}

/// The three criteria in the order the report lists them.
pub(crate) const CRITERIA: [Criterion; 3] = [
    Criterion {
        name: "BIC",
        colour: palette::BIC,
        shape: Shape::Circle,
        dash: None,
        value: |f| f.bic,
        chosen: |r| r.recommendations.bic_min,
    },
    Criterion {
        name: "AIC",
        colour: palette::AIC,
        shape: Shape::Triangle,
        dash: Some((8, 5)),
        value: |f| f.aic,
        chosen: |r| r.recommendations.aic_min,
    },
    Criterion {
        name: "ICL",
        colour: palette::ICL,
        shape: Shape::Square,
        dash: Some((2, 4)),
        value: |f| f.icl,
        chosen: |r| r.recommendations.icl_min,
    },
];

fn fitted(result: &SweepResult, form: CovarianceForm) -> Vec<&Candidate> {
    result
        .candidates
        .iter()
        .filter(|c| {
            c.covariance == form && c.status == CandidateStatus::Fitted && c.full_fit.is_some()
        })
        .collect()
}

/// The chart as inline SVG; `Ok(None)` when no candidate has a full-data fit.
pub(crate) fn chart(result: &SweepResult) -> Result<Option<String>, String> {
    let forms = forms(result);
    let values = forms
        .iter()
        .flat_map(|&f| fitted(result, f))
        .filter_map(|c| c.full_fit.as_ref())
        .flat_map(|f| CRITERIA.iter().map(move |cr| (cr.value)(f)));
    // Room below for the name under AIC's minimum, above for BIC's and ICL's.
    let Some(y) = svg::padded(values, 0.14, 0.08) else {
        return Ok(None);
    };
    let counts = counts(result);
    let first = counts.first().copied().unwrap_or(1);
    let last = counts.last().copied().unwrap_or(1);
    let title = "BIC, AIC and ICL by component count (lower is better)";
    svg::draw(SIZE, title, |root| {
        let panels = root.split_evenly((1, forms.len().max(1)));
        for (area, &form) in panels.iter().zip(&forms) {
            let mut chart = svg::count_chart(
                area,
                &format!("{form} covariance"),
                &counts,
                y.clone(),
                "criterion (lower is better)",
            )?;
            let cands = fitted(result, form);
            if cands.is_empty() {
                svg::label(
                    &mut chart,
                    ((first + last) as f64 / 2.0, (y.start + y.end) / 2.0),
                    (0, 0),
                    "no fitted candidate",
                    svg::anchored(14.0, palette::MUTED, HPos::Center, VPos::Center),
                )?;
                continue;
            }
            for cr in &CRITERIA {
                let pts: Vec<(f64, f64, bool)> = cands
                    .iter()
                    .filter_map(|c| {
                        let v = (cr.value)(c.full_fit.as_ref()?);
                        v.is_finite()
                            .then_some((c.components as f64, v, c.degenerate))
                    })
                    .collect();
                let line = pts.iter().map(|&(k, v, _)| (k, v));
                let style = cr.colour.rgb().stroke_width(2);
                match cr.dash {
                    None => chart.draw_series(LineSeries::new(line, style)).map(|_| ()),
                    Some((on, off)) => chart
                        .draw_series(DashedLineSeries::new(line, on, off, style))
                        .map(|_| ()),
                }
                .map_err(fail)?;
                for &(k, v, hollow) in &pts {
                    svg::marker(&mut chart, (k, v), cr.shape, cr.colour, 5, hollow)?;
                }
            }
            // Names of the sweep-wide minima found in this panel, grouped by count.
            let mut named: Vec<(usize, f64, f64, Vec<&str>)> = Vec::new();
            for cr in &CRITERIA {
                let lowest = cands
                    .iter()
                    .filter(|c| c.eligible())
                    .filter_map(|c| Some((c.components, (cr.value)(c.full_fit.as_ref()?))))
                    .filter(|(_, v)| v.is_finite())
                    .min_by(|a, b| a.1.total_cmp(&b.1));
                let Some((k, v)) = lowest else { continue };
                svg::ring(&mut chart, (k as f64, v), 10, cr.colour)?;
                let overall =
                    (cr.chosen)(result).is_some_and(|c| c.covariance == form && c.components == k);
                if overall {
                    match named.iter_mut().find(|g| g.0 == k) {
                        Some(g) => {
                            g.1 = g.1.min(v);
                            g.2 = g.2.max(v);
                            g.3.push(cr.name);
                        }
                        None => named.push((k, v, v, vec![cr.name])),
                    }
                }
            }
            for (k, low, high, names) in named {
                let h = if k <= first {
                    HPos::Left
                } else if k >= last {
                    HPos::Right
                } else {
                    HPos::Center
                };
                let words = format!("lowest {}", names.join(" and "));
                // AIC's penalty 2p is below BIC's p ln N once N ≥ 8, and ICL is BIC plus an
                // entropy term, so AIC is the bottom curve: its name goes under it, the
                // others' above theirs, away from the neighbouring lines.
                if names == ["AIC"] {
                    svg::label(
                        &mut chart,
                        (k as f64, low),
                        (0, 14),
                        &words,
                        svg::anchored(13.0, palette::INK, h, VPos::Top),
                    )?;
                } else {
                    svg::label(
                        &mut chart,
                        (k as f64, high),
                        (0, -14),
                        &words,
                        svg::anchored(13.0, palette::INK, h, VPos::Bottom),
                    )?;
                }
            }
        }
        Ok(())
    })
    .map(Some)
}
