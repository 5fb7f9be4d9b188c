//! [`render`]: the whole HTML page — header, summary and caveat, the three charts with their
//! legends, and the candidate table — plus the inline stylesheet.
//!
//! Every string that comes from the result (summary sentences, reasons, column names) is
//! escaped. A chart that cannot be drawn is replaced by a sentence saying why, so rendering
//! always yields a page.

use mixgauge_engine::{CovarianceForm, Ridge};
use mixgauge_select::{Choice, SweepResult};

use crate::criteria_chart::{self, CRITERIA};
use crate::format::{choice, compact, counts as count_list, escape, fixed};
use crate::palette::{self, Colour};
use crate::svg::Shape;
use crate::{ModelView, likelihood_chart, table, view_chart};

/// The sentence the report always carries about what a selection means.
pub(crate) const CAVEAT: &str = "A selected K is evidence, not proof; domain review decides.";

/// Column names listed in the dataset line before the rest are summarised.
const NAMED_COLUMNS: usize = 12;

/// Covariance forms to show, in the settings' order, then any others the candidates use.
pub(crate) fn forms(result: &SweepResult) -> Vec<CovarianceForm> {
    let mut out: Vec<CovarianceForm> = Vec::new();
    let listed = result.settings.covariances.iter().copied();
    for f in listed.chain(result.candidates.iter().map(|c| c.covariance)) {
        if !out.contains(&f) {
            out.push(f);
        }
    }
    out
}

/// Component counts of the candidates, ascending (the settings' when there are none).
pub(crate) fn counts(result: &SweepResult) -> Vec<usize> {
    let mut out: Vec<usize> = result.candidates.iter().map(|c| c.components).collect();
    if out.is_empty() {
        out = result.settings.components.clone();
    }
    out.sort_unstable();
    out.dedup();
    out
}

/// Renders the sweep `result` as one self-contained HTML document. `view`, when given, adds
/// the two-dimensional picture of a fitted model (normally the highest held-out candidate's).
pub fn render(result: &SweepResult, view: Option<&ModelView>) -> String {
    let d = &result.dataset;
    let mut page = String::with_capacity(64 * 1024);
    page.push_str("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n");
    page.push_str("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n");
    page.push_str(&format!(
        "<title>mixgauge report: {} rows × {} columns</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<main>\n",
        d.rows, d.columns
    ));
    header(&mut page, result);
    summary(&mut page, result);
    likelihood(&mut page, result);
    criteria(&mut page, result);
    model(&mut page, result, view);
    page.push_str("<section id=\"candidates\">\n<h2>Every candidate</h2>\n");
    page.push_str("<p class=\"lead\">Highlighted: the highest held-out candidate (amber) and the one-SE choice (blue). \
        Log-likelihoods are means per row in nats; BIC, AIC and ICL come from the fit on all rows. \
        Degenerate candidates are never recommended; skipped and failed ones say why.</p>\n");
    page.push_str(&table::candidates(result));
    page.push_str("<h3>Fit diagnostics</h3>\n<p class=\"lead\">The fit on all rows and each fold's fit (open a Folds cell for its numbers)");
    if result.candidates.iter().any(|c| c.labels.is_some()) {
        page.push_str(", with agreement between each fit's assignment and the label column, which was never used to choose");
    }
    page.push_str(".</p>\n");
    page.push_str(&table::diagnostics(result));
    page.push_str("</section>\n");
    page.push_str(&format!(
        "<footer>Made by mixgauge-report {} from a {} document. This page is self-contained and loads nothing.</footer>\n",
        env!("CARGO_PKG_VERSION"),
        escape(&result.format)
    ));
    page.push_str("</main>\n</body>\n</html>\n");
    page
}

fn header(page: &mut String, result: &SweepResult) {
    let d = &result.dataset;
    let s = &result.settings;
    let mut names: Vec<String> = d
        .column_names
        .iter()
        .take(NAMED_COLUMNS)
        .map(|n| escape(n))
        .collect();
    if d.column_names.len() > NAMED_COLUMNS {
        names.push(format!("and {} more", d.column_names.len() - NAMED_COLUMNS));
    }
    let columns = if names.is_empty() {
        String::new()
    } else {
        format!(" ({})", names.join(", "))
    };
    let sha: String = d.sha256.chars().take(12).collect();
    let dropped = match d.dropped_rows {
        0 => "no rows dropped".to_string(),
        1 => "1 row dropped for missing or non-finite values".to_string(),
        n => format!("{n} rows dropped for missing or non-finite values"),
    };
    let units = if d.standardised {
        "columns standardised before fitting (log-likelihoods are in the data's own units)"
    } else {
        "columns fitted in their own units"
    };
    let ridge = match s.ridge {
        Ridge::Relative(r) => format!("ridge {} × each column's variance", compact(r)),
        Ridge::Absolute(r) => format!("ridge {}", compact(r)),
    };
    let covariances: Vec<&str> = s.covariances.iter().map(|f| f.as_str()).collect();
    page.push_str("<header>\n<p class=\"kicker\">mixgauge report</p>\n");
    page.push_str("<h1>How many mixture components does this data support?</h1>\n");
    page.push_str(&format!(
        "<p class=\"meta\"><strong>Dataset</strong> {} rows × {} columns{columns} · SHA-256 <code>{}</code> · {dropped} · {units}</p>\n",
        d.rows,
        d.columns,
        escape(&sha),
    ));
    page.push_str(&format!(
        "<p class=\"meta\"><strong>Settings</strong> K {} · covariance {} · {} folds · {} EM starts per fit · seed {} · tolerance {} nats · at most {} EM iterations · {ridge}</p>\n</header>\n",
        count_list(&s.components),
        covariances.join(", "),
        s.folds,
        s.restarts,
        s.seed,
        compact(s.tolerance),
        s.max_iterations,
    ));
}

/// One recommendation card; each of `lines` is one candidate.
fn pick(title: &str, lines: &[String], main: bool) -> String {
    let class = if main { "pick main" } else { "pick" };
    let which = if lines.is_empty() {
        "no eligible candidate".to_string()
    } else {
        lines
            .iter()
            .map(|l| escape(l))
            .collect::<Vec<_>>()
            .join("<br>")
    };
    format!(
        "<div class=\"{class}\"><div class=\"what\">{title}</div><div class=\"which\">{which}</div></div>"
    )
}

fn summary(page: &mut String, result: &SweepResult) {
    let r = &result.recommendations;
    let label = |c: &Option<Choice>| c.as_ref().map(choice).into_iter().collect::<Vec<_>>();
    page.push_str("<section id=\"summary\">\n<h2>Summary</h2>\n<div class=\"picks\">");
    page.push_str(&pick(
        "Recommended: highest held-out",
        &label(&r.heldout_max),
        true,
    ));
    page.push_str(&pick(
        "Fewest parameters within one SE",
        &label(&r.heldout_one_se),
        false,
    ));
    page.push_str(&pick("Lowest BIC", &label(&r.bic_min), false));
    page.push_str(&pick("Lowest AIC", &label(&r.aic_min), false));
    page.push_str(&pick("Lowest ICL", &label(&r.icl_min), false));
    let elbows: Vec<String> = r.training_elbow.iter().map(choice).collect();
    page.push_str(&pick("Elbow of the training curve", &elbows, false));
    page.push_str("</div>\n");
    if !result.summary.is_empty() {
        page.push_str("<ul class=\"sentences\">\n");
        // The caveat below says it at length; skip the summary's one-line version of it.
        for s in result
            .summary
            .iter()
            .filter(|s| !s.starts_with("A selected K is evidence"))
        {
            page.push_str(&format!("<li>{}</li>\n", escape(s)));
        }
        page.push_str("</ul>\n");
    }
    page.push_str(&format!(
        "<p class=\"caveat\"><strong>{CAVEAT}</strong> The numbers here say which candidate predicts rows it has not seen best, \
         and how the penalised criteria trade fit against size, on the assumption that the rows come from a mixture of Gaussians. \
         Whether that many groups mean something in this data is for people who know the domain to judge.</p>\n</section>\n"
    ));
}

/// A chart, or the sentence that replaces it.
fn embed(page: &mut String, drawn: Result<Option<String>, String>, nothing: &str) {
    match drawn {
        Ok(Some(svg)) => {
            page.push_str("<figure>");
            page.push_str(&svg);
            page.push_str("</figure>\n");
        }
        Ok(None) => page.push_str(&format!("<p class=\"note\">{}</p>\n", escape(nothing))),
        Err(e) => page.push_str(&format!(
            "<p class=\"note\">This chart could not be drawn: {}.</p>\n",
            escape(&e)
        )),
    }
}

fn legend(page: &mut String, items: &[(String, &str)]) {
    page.push_str("<ul class=\"legend\">");
    for (swatch, words) in items {
        page.push_str(&format!("<li>{swatch}<span>{words}</span></li>"));
    }
    page.push_str("</ul>\n");
}

/// A small inline SVG for a legend entry.
fn swatch(body: &str) -> String {
    format!(
        "<svg width=\"36\" height=\"18\" viewBox=\"0 0 36 18\" aria-hidden=\"true\">{body}</svg>"
    )
}

fn shape_svg(shape: Shape, colour: Colour, hollow: bool) -> String {
    let c = colour.hex();
    let fill = if hollow {
        "#ffffff".to_string()
    } else {
        c.clone()
    };
    let style = format!("fill=\"{fill}\" stroke=\"{c}\" stroke-width=\"2\"");
    match shape {
        Shape::Circle => format!("<circle cx=\"18\" cy=\"9\" r=\"4.5\" {style}/>"),
        Shape::Square => format!("<rect x=\"14\" y=\"5\" width=\"8\" height=\"8\" {style}/>"),
        Shape::Triangle => format!("<polygon points=\"18,3.5 23,13.5 13,13.5\" {style}/>"),
    }
}

fn line_svg(colour: Colour, dash: Option<(u32, u32)>) -> String {
    let dash = dash.map_or(String::new(), |(a, b)| {
        format!(" stroke-dasharray=\"{a} {b}\"")
    });
    format!(
        "<line x1=\"1\" y1=\"9\" x2=\"35\" y2=\"9\" stroke=\"{}\" stroke-width=\"2\"{dash}/>",
        colour.hex()
    )
}

fn likelihood(page: &mut String, result: &SweepResult) {
    page.push_str(
        "<section id=\"likelihood\">\n<h2>Training against held-out log-likelihood</h2>\n",
    );
    page.push_str("<p class=\"lead\">Both curves are mean log-likelihood per row; higher is better. \
        The training curve keeps rising as components are added, because a model always fits the rows it was fitted on better. \
        The held-out curve scores each row with a model that did not see it, so it stops rising, or falls, once extra components only fit noise. \
        The shaded band between them is the gap: how much the training rows flatter the model.</p>\n");
    embed(
        page,
        likelihood_chart::chart(result),
        "No candidate was fitted, so there is no likelihood curve to draw.",
    );
    let unfitted = result
        .candidates
        .iter()
        .filter(|c| c.status != mixgauge_select::CandidateStatus::Fitted)
        .count();
    if unfitted > 0 {
        page.push_str(&format!(
            "<p class=\"note\">{unfitted} candidate{} skipped or failed and {} no point; the table below says why.</p>\n",
            if unfitted == 1 { " was" } else { "s were" },
            if unfitted == 1 { "has" } else { "have" }
        ));
    }
    let ink = palette::INK.hex();
    legend(
        page,
        &[
            (
                swatch(
                    &(line_svg(palette::TRAIN, None)
                        + &shape_svg(Shape::Circle, palette::TRAIN, false)),
                ),
                "training mean (over folds)",
            ),
            (
                swatch(
                    &(line_svg(palette::HELDOUT, None)
                        + &shape_svg(Shape::Square, palette::HELDOUT, false)),
                ),
                "held-out mean",
            ),
            (
                swatch(&format!(
                    "<rect x=\"2\" y=\"3\" width=\"32\" height=\"12\" fill=\"{}\" fill-opacity=\"0.55\"/>",
                    palette::GAP.hex()
                )),
                "gap (overfitting)",
            ),
            (
                swatch(&format!(
                    "<path d=\"M18 2V16M14 2H22M14 16H22\" stroke=\"{ink}\" stroke-width=\"1.2\" fill=\"none\"/>"
                )),
                "±1 standard error",
            ),
            (
                swatch(&(shape_svg(Shape::Circle, palette::TRAIN, true))),
                "hollow: degenerate fit (a component collapsed); never recommended",
            ),
            (
                swatch(&format!(
                    "<circle cx=\"18\" cy=\"9\" r=\"7.5\" fill=\"none\" stroke=\"{ink}\" stroke-width=\"2\"/>"
                )),
                "ring and dashed line: highest held-out (recommended)",
            ),
            (
                swatch(&format!(
                    "<polygon points=\"18,1 26,9 18,17 10,9\" fill=\"none\" stroke=\"{ink}\" stroke-width=\"2\"/>"
                )),
                "diamond: one-SE choice (fewest parameters within one SE of the best)",
            ),
        ],
    );
    page.push_str("</section>\n");
}

fn criteria(page: &mut String, result: &SweepResult) {
    page.push_str("<section id=\"criteria\">\n<h2>Penalised criteria: BIC, AIC, ICL</h2>\n");
    page.push_str("<p class=\"lead\">Each criterion is −2 × log-likelihood of the fit on all rows plus a penalty for size; lower is better. \
        BIC penalises parameters by ln N, AIC by 2, and ICL adds the uncertainty of the row assignments to BIC, so it favours well-separated components.</p>\n");
    embed(
        page,
        criteria_chart::chart(result),
        "No candidate has a fit on all rows, so there are no criteria to draw.",
    );
    let mut items: Vec<(String, &str)> = CRITERIA
        .iter()
        .map(|c| {
            (
                swatch(&(line_svg(c.colour, c.dash) + &shape_svg(c.shape, c.colour, false))),
                c.name,
            )
        })
        .collect();
    let ink = palette::INK.hex();
    items.push((
        swatch(&format!(
            "<circle cx=\"18\" cy=\"9\" r=\"7.5\" fill=\"none\" stroke=\"{ink}\" stroke-width=\"2\"/>"
        )),
        "ring: lowest in this panel (non-degenerate fits); named when lowest over the whole sweep",
    ));
    items.push((
        swatch(&shape_svg(Shape::Circle, palette::BIC, true)),
        "hollow: degenerate fit; never recommended",
    ));
    legend(page, &items);
    page.push_str("</section>\n");
}

fn model(page: &mut String, result: &SweepResult, view: Option<&ModelView>) {
    page.push_str("<section id=\"model\">\n<h2>The model in two dimensions</h2>\n");
    let Some(view) = view else {
        page.push_str("<p class=\"note\">No fitted model was supplied with this result, so there is no picture of one.</p>\n</section>\n");
        return;
    };
    let shown = view.choice();
    let which = match result.recommendations.heldout_max {
        Some(best) if best == shown => " (the highest held-out candidate)".to_string(),
        Some(best) => format!(
            " (not the highest held-out candidate, which is {})",
            choice(&best)
        ),
        None => String::new(),
    };
    let drawn = if view.points().len() == view.rows() {
        format!("every row ({})", view.rows())
    } else {
        format!(
            "{} of {} rows, evenly spaced through the data",
            view.points().len(),
            view.rows()
        )
    };
    page.push_str(&format!(
        "<p class=\"lead\">Model shown: <strong>{}</strong>{}. Drawn: {drawn}, each coloured by its most responsible component, \
         on the two directions along which the data varies most. Ellipses are the components' covariances seen on this plane, \
         so components that overlap here may still be apart in other directions.</p>\n",
        escape(&choice(&shown)),
        escape(&which)
    ));
    if view.single_axis() {
        page.push_str("<p class=\"note\">The data has one column, so there is only one axis: the vertical axis is zero and carries nothing.</p>\n");
    }
    embed(page, view_chart::chart(view).map(Some), "");
    let mut counts = vec![0usize; view.components().len()];
    for &k in view.assignment() {
        if let Some(n) = counts.get_mut(k) {
            *n += 1;
        }
    }
    let words: Vec<String> = view
        .components()
        .iter()
        .zip(&counts)
        .enumerate()
        .map(|(k, (c, n))| {
            format!(
                "component {} · weight {} · {n} drawn rows",
                k + 1,
                fixed(c.weight, 3)
            )
        })
        .collect();
    let mut items: Vec<(String, &str)> = view
        .components()
        .iter()
        .enumerate()
        .zip(&words)
        .map(|((k, _), w)| {
            let c = palette::component(k).hex();
            (
                swatch(&format!(
                    "<circle cx=\"18\" cy=\"9\" r=\"6\" fill=\"#ffffff\" stroke=\"{c}\" stroke-width=\"2\"/>\
                     <text x=\"18\" y=\"12.5\" text-anchor=\"middle\" font-size=\"9.5\" font-weight=\"bold\" fill=\"{}\">{}</text>",
                    palette::INK.hex(),
                    k + 1
                )),
                w.as_str(),
            )
        })
        .collect();
    let ink = palette::INK.hex();
    items.push((
        swatch(&format!(
            "<line x1=\"1\" y1=\"9\" x2=\"35\" y2=\"9\" stroke=\"{ink}\" stroke-width=\"2\"/>"
        )),
        "1σ ellipse",
    ));
    items.push((
        swatch(&format!(
            "<line x1=\"1\" y1=\"9\" x2=\"35\" y2=\"9\" stroke=\"{ink}\" stroke-width=\"2\" stroke-dasharray=\"6 4\"/>"
        )),
        "2σ ellipse",
    ));
    legend(page, &items);
    page.push_str("</section>\n");
}

/// The stylesheet: a system font stack, one column up to 1120 px wide, and colours from
/// [`palette`](crate::palette).
const STYLE: &str = r#"
:root {
  --ink: #1d2733; --muted: #5b6776; --line: #dfe4ea; --paper: #ffffff; --back: #f3f5f8;
  --accent: #234f8e; --warm: #dc7f1f; --amber: #fff3e0; --sky: #eef4fb;
  --font: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", "Noto Sans", "Liberation Sans", Arial, sans-serif;
  --mono: ui-monospace, "SF Mono", Menlo, Consolas, "Liberation Mono", monospace;
}
* { box-sizing: border-box; }
html { -webkit-text-size-adjust: 100%; }
body { margin: 0; background: var(--back); color: var(--ink); font: 16px/1.55 var(--font); }
main { max-width: 1120px; margin: 0 auto; padding: 32px 24px 40px; }
header { margin: 0 4px 8px; }
.kicker { margin: 0; color: var(--accent); font-weight: 600; letter-spacing: .06em; text-transform: uppercase; font-size: .8rem; }
h1 { font-size: 1.85rem; line-height: 1.2; margin: .2rem 0 .7rem; letter-spacing: -.01em; }
h2 { font-size: 1.2rem; margin: 0 0 .5rem; }
.meta { margin: .2rem 0; color: var(--muted); font-size: .93rem; }
.meta strong { color: var(--ink); font-weight: 600; margin-right: .3rem; }
code { font-family: var(--mono); font-size: .88em; background: #eaeef3; padding: 0 .3em; border-radius: 4px; }
section { background: var(--paper); border: 1px solid var(--line); border-radius: 12px; padding: 20px 24px 22px; margin: 18px 0; }
.lead { margin: 0 0 .8rem; color: #34404d; max-width: 78ch; }
.note { color: var(--muted); font-style: italic; }
.picks { display: grid; grid-template-columns: repeat(auto-fit, minmax(150px, 1fr)); gap: 10px; margin: 6px 0 14px; }
.pick { border: 1px solid var(--line); border-radius: 8px; padding: 9px 12px; }
.pick .what { color: var(--muted); font-size: .8rem; line-height: 1.3; }
.pick .which { font-weight: 650; font-size: 1.05rem; margin-top: 2px; }
.pick.main { border-color: var(--warm); background: var(--amber); }
.sentences { margin: 0 0 14px; padding-left: 1.2rem; }
.sentences li { margin: .2rem 0; }
.caveat { margin: 0; border-left: 4px solid var(--accent); background: var(--sky); padding: 10px 14px; border-radius: 0 8px 8px 0; }
figure { margin: 6px 0 0; overflow-x: auto; }
/* Below 640 px the chart scrolls sideways rather than shrinking past legibility. */
svg.chart { display: block; width: 100%; min-width: 640px; height: auto; }
svg.chart text, .legend text { font-family: var(--font); }
/* A white halo keeps chart labels readable where a line crosses them. */
svg.chart text { paint-order: stroke; stroke: #ffffff; stroke-width: 3px; stroke-linejoin: round; }
.legend { display: flex; flex-wrap: wrap; gap: 6px 20px; list-style: none; padding: 0; margin: 10px 0 0; font-size: .88rem; color: #3d4956; }
.legend li { display: flex; align-items: center; gap: 6px; }
.legend svg { flex: none; }
.table-wrap { overflow-x: auto; border: 1px solid var(--line); border-radius: 8px; }
table { border-collapse: collapse; font-size: .84rem; font-variant-numeric: tabular-nums; width: 100%; }
th, td { padding: 6px 8px; border-bottom: 1px solid var(--line); text-align: right; white-space: nowrap; vertical-align: top; }
thead th { background: #f7f8fa; font-weight: 600; color: #2c3742; border-bottom: 2px solid var(--line); white-space: normal; vertical-align: bottom; }
tbody th { font-weight: 600; }
th.text, td.text { text-align: left; }
h3 { font-size: 1.02rem; margin: 1.4rem 0 .4rem; }
td.notes { white-space: normal; color: var(--muted); font-size: .8rem; padding-top: 0; }
tr.has-note td, tr.has-note th { border-bottom: 0; }
td.picks-cell { white-space: normal; min-width: 8.5rem; }
td.status { white-space: normal; }
tbody tr:last-child td, tbody tr:last-child th { border-bottom: 0; }
tr.recommended td, tr.recommended th { background: var(--amber); }
tr.recommended > :first-child { box-shadow: inset 4px 0 0 var(--warm); }
tr.one-se td, tr.one-se th { background: var(--sky); }
tr.one-se > :first-child { box-shadow: inset 4px 0 0 var(--accent); }
tr.degenerate td, tr.degenerate th, tr.skipped td, tr.skipped th, tr.failed td, tr.failed th { color: var(--muted); }
.se { color: var(--muted); }
.tag { display: inline-block; padding: 0 7px; border-radius: 999px; font-size: .76rem; line-height: 1.5; border: 1px solid; margin: 1px 3px 1px 0; white-space: nowrap; }
.tag.pick { color: var(--accent); border-color: #b9cbe6; background: var(--sky); }
.tag.warn { color: #8a4b08; border-color: #e9bb86; background: #fdf2e4; }
details summary { cursor: pointer; color: var(--accent); }
ol.folds { margin: 4px 0 0; padding-left: 1.4rem; white-space: nowrap; }
footer { color: var(--muted); font-size: .82rem; text-align: center; margin-top: 20px; }
@media (max-width: 700px) {
  main { padding: 16px 10px 28px; }
  section { padding: 14px 14px 16px; }
  h1 { font-size: 1.45rem; }
}
"#;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::view::tests::{grid, two_components};
    use mixgauge_select::{
        Candidate, CandidateStatus, DatasetInfo, FoldOutcome, FullFit, LabelAgreement,
        MeanWithError, Recommendations, SweepSettings,
    };

    fn candidate(
        covariance: CovarianceForm,
        components: usize,
        train: f64,
        heldout: f64,
    ) -> Candidate {
        let loglik = heldout * 63.0;
        let p = covariance.free_parameters(components, 2);
        Candidate {
            covariance,
            components,
            status: CandidateStatus::Fitted,
            reason: None,
            free_parameters: p,
            train: Some(MeanWithError {
                mean: train,
                stderr: 0.02,
            }),
            heldout: Some(MeanWithError {
                mean: heldout,
                stderr: 0.08,
            }),
            gap: Some(train - heldout),
            full_fit: Some(FullFit {
                loglik,
                bic: -2.0 * loglik + p as f64 * 63f64.ln(),
                aic: -2.0 * loglik + 2.0 * p as f64,
                icl: -2.0 * loglik + p as f64 * 63f64.ln() + 3.0,
                iterations: 17,
                converged: true,
                smallest_component_rows: 63.0 / components as f64,
            }),
            folds: vec![
                FoldOutcome {
                    train_mean: train,
                    heldout_mean: heldout,
                    iterations: 12,
                    converged: true,
                };
                3
            ],
            degenerate: false,
            degenerate_reason: None,
            labels: Some(LabelAgreement {
                adjusted_rand: 0.5,
                normalised_mutual_information: 0.6,
            }),
        }
    }

    fn result() -> SweepResult {
        use CovarianceForm::{Diagonal, Full};
        let choice = |covariance, components| {
            Some(Choice {
                covariance,
                components,
            })
        };
        let mut degenerate = candidate(Full, 4, -1.2, -2.9);
        degenerate.degenerate = true;
        degenerate.degenerate_reason = Some("component 3 collapsed onto 2 rows in fold 1".into());
        let mut skipped = candidate(Diagonal, 4, 0.0, 0.0);
        skipped.status = CandidateStatus::Skipped;
        skipped.reason = Some("needs 35 parameters but folds train on 42 rows".into());
        skipped.train = None;
        skipped.heldout = None;
        skipped.gap = None;
        skipped.full_fit = None;
        skipped.folds.clear();
        skipped.labels = None;
        SweepResult {
            format: "mixgauge.sweep/1".into(),
            dataset: DatasetInfo {
                rows: 63,
                columns: 2,
                column_names: vec!["width".into(), "<height>".into()],
                sha256: "0123456789abcdef0123456789abcdef".into(),
                dropped_rows: 1,
                standardised: false,
            },
            settings: SweepSettings {
                components: vec![1, 2, 3, 4],
                folds: 3,
                ..SweepSettings::default()
            },
            candidates: vec![
                candidate(Full, 1, -3.0, -3.1),
                candidate(Full, 2, -2.4, -2.6),
                candidate(Full, 3, -2.2, -2.5),
                degenerate,
                candidate(Diagonal, 1, -3.2, -3.3),
                candidate(Diagonal, 2, -2.7, -2.9),
                candidate(Diagonal, 3, -2.6, -2.95),
                skipped,
            ],
            recommendations: Recommendations {
                heldout_max: choice(Full, 3),
                heldout_one_se: choice(Full, 2),
                bic_min: choice(Full, 2),
                aic_min: choice(Full, 3),
                icl_min: choice(Full, 2),
                training_elbow: vec![Choice {
                    covariance: Full,
                    components: 2,
                }],
            },
            summary: vec![
                "Held-out log-likelihood peaks at full, K = 3.".into(),
                "A note with <script>alert(1)</script> markup.".into(),
            ],
        }
    }

    fn rendered() -> String {
        let view = ModelView::new(&two_components(), &grid(), 2, 5000).unwrap();
        render(&result(), Some(&view))
    }

    #[test]
    fn the_report_has_three_charts_and_the_caveat() {
        let html = rendered();
        assert!(html.starts_with("<!DOCTYPE html>"));
        assert!(html.trim_end().ends_with("</html>"));
        assert_eq!(
            html.matches("<svg class=\"chart\"").count(),
            3,
            "three charts"
        );
        assert!(html.contains("evidence, not proof"));
        assert!(html.contains(CAVEAT));
        assert!(html.contains("principal axis 1"));
    }

    #[test]
    fn the_recommended_candidate_is_named_and_highlighted() {
        let html = rendered();
        assert!(html.contains("full, K = 3"));
        assert!(html.contains("highest held-out"));
        // The highlighted row is the K = 3 full one.
        let row = html
            .split("<tr class=\"recommended\">")
            .nth(1)
            .expect("a highlighted row");
        assert!(row.starts_with("<td class=\"text\">full</td><th scope=\"row\">3</th>"));
        // Once in each table.
        assert_eq!(html.matches("<tr class=\"recommended\">").count(), 2);
        assert!(html.contains("<tr class=\"one-se\">"));
        // The model drawn (full, K = 2) is not the recommended one, and the page says so.
        assert!(html.contains("(not the highest held-out candidate, which is full, K = 3)"));
        let mut r = result();
        r.recommendations.heldout_max = Some(Choice {
            covariance: CovarianceForm::Full,
            components: 2,
        });
        let view = ModelView::new(&two_components(), &grid(), 2, 5000).unwrap();
        assert!(render(&r, Some(&view)).contains("(the highest held-out candidate)"));
    }

    #[test]
    fn degenerate_skipped_and_labels_are_shown() {
        let html = rendered();
        assert!(html.contains("<tr class=\"degenerate\">"));
        assert!(html.contains("<span class=\"tag warn\">degenerate</span>"));
        assert!(html.contains("component 3 collapsed onto 2 rows in fold 1"));
        assert!(html.contains("hollow: degenerate fit"));
        assert!(html.contains("<tr class=\"skipped\">"));
        assert!(html.contains("needs 35 parameters"));
        assert!(html.contains("1 candidate was skipped or failed and has no point"));
        assert!(html.contains(">ARI</th>") && html.contains(">NMI</th>"));
        // The degenerate candidate's markers in the likelihood chart are hollow (white
        // inside), and only when there is a degenerate candidate.
        let hollow = |html: &str| {
            let chart = html
                .split("<section id=\"likelihood\">")
                .nth(1)
                .and_then(|s| s.split("</svg>").next())
                .unwrap_or_default()
                .to_string();
            chart.matches("fill=\"#FFFFFF\"").count()
        };
        // The chart's white background, then the two hollow markers of full, K = 4.
        assert_eq!(hollow(&html), 1 + 2);
        let mut r = result();
        r.candidates.iter_mut().for_each(|c| c.degenerate = false);
        assert_eq!(hollow(&render(&r, None)), 1);
    }

    #[test]
    fn without_labels_there_are_no_agreement_columns() {
        let mut r = result();
        r.candidates.iter_mut().for_each(|c| c.labels = None);
        let html = render(&r, None);
        assert!(!html.contains(">ARI</th>"));
        assert_eq!(html.matches("<svg class=\"chart\"").count(), 2);
        assert!(html.contains("No fitted model was supplied"));
    }

    #[test]
    fn nothing_is_fetched_and_result_text_is_escaped() {
        let html = rendered();
        let mut rest = html.as_str();
        while let Some(i) = rest.find("http") {
            let before = &rest[..i];
            assert!(
                before.ends_with("xmlns=\"")
                    && rest[i..].starts_with("http://www.w3.org/2000/svg\""),
                "unexpected address near {:?}",
                &rest[i.saturating_sub(40)..(i + 40).min(rest.len())]
            );
            rest = &rest[i + 4..];
        }
        for banned in [
            "<script", "<link", "<img", "<iframe", "@import", "url(", " src=", " href=",
        ] {
            assert!(!html.contains(banned), "found {banned}");
        }
        assert!(html.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
        assert!(html.contains("&lt;height&gt;"));
    }

    #[test]
    fn criteria_minima_are_named() {
        let html = rendered();
        assert!(
            html.contains("lowest BIC")
                && html.contains("lowest AIC")
                && html.contains("lowest ICL")
        );
    }

    #[test]
    fn an_empty_sweep_still_renders_a_page() {
        let mut r = result();
        r.candidates.clear();
        r.recommendations = Recommendations {
            heldout_max: None,
            heldout_one_se: None,
            bic_min: None,
            aic_min: None,
            icl_min: None,
            training_elbow: vec![],
        };
        let html = render(&r, None);
        assert!(html.contains("no eligible candidate"));
        assert!(html.contains("No candidate was fitted"));
        assert!(html.contains(CAVEAT));
    }

    #[test]
    fn the_same_result_renders_the_same_bytes() {
        assert_eq!(rendered(), rendered());
    }
}
