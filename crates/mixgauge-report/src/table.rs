//! The candidate tables, which between them show every field of every candidate, fitted or
//! not. The first holds what a reader compares (the likelihoods, the gap, the criteria, the
//! views that chose it) with any reason a candidate was skipped, failed or set aside on its
//! own line; the second holds the diagnostics (the fit on all rows, per-fold detail folded
//! away in a `<details>` element, and label agreement, whose columns appear only when a label
//! column was given). Two narrower tables read better than one that scrolls sideways.

use mixgauge_select::{Candidate, CandidateStatus, Choice, MeanWithError, SweepResult};

use crate::format::{escape, fixed, maybe_fixed};

/// Decimals of per-row log-likelihoods and the gap.
const PER_ROW: usize = 3;
/// Decimals of totals and criteria.
const TOTAL: usize = 1;

/// The views that chose `c`, as short names.
pub(crate) fn chosen_by(result: &SweepResult, c: &Candidate) -> Vec<&'static str> {
    let r = &result.recommendations;
    let is = |x: &Option<Choice>| {
        x.is_some_and(|x| x.covariance == c.covariance && x.components == c.components)
    };
    let mut out = Vec::new();
    if is(&r.heldout_max) {
        out.push("highest held-out");
    }
    if is(&r.heldout_one_se) {
        out.push("one-SE");
    }
    if is(&r.bic_min) {
        out.push("lowest BIC");
    }
    if is(&r.aic_min) {
        out.push("lowest AIC");
    }
    if is(&r.icl_min) {
        out.push("lowest ICL");
    }
    if r.training_elbow
        .iter()
        .any(|x| x.covariance == c.covariance && x.components == c.components)
    {
        out.push("training elbow");
    }
    out
}

fn with_error(v: Option<MeanWithError>) -> String {
    match v {
        Some(v) => format!(
            "{} <span class=\"se\">± {}</span>",
            fixed(v.mean, PER_ROW),
            fixed(v.stderr, PER_ROW)
        ),
        None => "—".into(),
    }
}

fn status(c: &Candidate) -> String {
    let word = match c.status {
        CandidateStatus::Fitted => "fitted",
        CandidateStatus::Skipped => "skipped",
        CandidateStatus::Failed => "failed",
    };
    let mut out = word.to_string();
    if c.degenerate {
        out.push_str(" <span class=\"tag warn\">degenerate</span>");
    }
    out
}

fn folds(c: &Candidate) -> String {
    if c.folds.is_empty() {
        return "—".into();
    }
    let converged = c.folds.iter().filter(|f| f.converged).count();
    let mut out = format!(
        "<details><summary>{converged} of {} converged</summary><ol class=\"folds\">",
        c.folds.len()
    );
    for f in &c.folds {
        out.push_str(&format!(
            "<li>train {}, held-out {}, {} iterations{}</li>",
            fixed(f.train_mean, PER_ROW),
            fixed(f.heldout_mean, PER_ROW),
            f.iterations,
            if f.converged { "" } else { ", not converged" }
        ));
    }
    out.push_str("</ol></details>");
    out
}

fn notes(c: &Candidate) -> String {
    let mut parts = Vec::new();
    if let Some(r) = &c.reason {
        parts.push(escape(r));
    }
    if let Some(r) = &c.degenerate_reason {
        parts.push(format!("Degenerate: {}", escape(r)));
    }
    parts.join("<br>")
}

/// The row classes of `c`: highlight for the chosen candidates, muted for the rest.
fn row_classes(picks: &[&str], c: &Candidate) -> Vec<&'static str> {
    let mut classes = Vec::new();
    if picks.contains(&"highest held-out") {
        classes.push("recommended");
    } else if picks.contains(&"one-SE") {
        classes.push("one-se");
    }
    if c.degenerate {
        classes.push("degenerate");
    }
    match c.status {
        CandidateStatus::Fitted => {}
        CandidateStatus::Skipped => classes.push("skipped"),
        CandidateStatus::Failed => classes.push("failed"),
    }
    classes
}

fn class_attr(classes: &[&str]) -> String {
    if classes.is_empty() {
        String::new()
    } else {
        format!(" class=\"{}\"", classes.join(" "))
    }
}

/// `(class, name, hint)` headers as a `<thead>`.
fn head(heads: &[(&str, &str, &str)]) -> String {
    let mut out = String::from("<div class=\"table-wrap\"><table>\n<thead><tr>");
    for (class, name, hint) in heads {
        let class = if class.is_empty() {
            String::new()
        } else {
            format!(" class=\"{class}\"")
        };
        let hint = if hint.is_empty() {
            String::new()
        } else {
            format!(" title=\"{}\"", escape(hint))
        };
        out.push_str(&format!("<th scope=\"col\"{class}{hint}>{name}</th>"));
    }
    out.push_str("</tr></thead>\n<tbody>\n");
    out
}

/// The two cells that name a candidate.
fn name_cells(c: &Candidate) -> String {
    format!(
        "<td class=\"text\">{}</td><th scope=\"row\">{}</th>",
        c.covariance, c.components
    )
}

/// The main table: what each candidate scored and which views chose it, with any reason it
/// was skipped, failed or set aside on a line of its own beneath it.
pub(crate) fn candidates(result: &SweepResult) -> String {
    let heads = [
        ("text", "Covariance", ""),
        ("", "K", "component count"),
        ("text", "Status", ""),
        ("", "Free parameters", ""),
        (
            "",
            "Training mean ± SE",
            "mean per-row log-likelihood of the training rows, over folds",
        ),
        (
            "",
            "Held-out mean ± SE",
            "mean per-row log-likelihood of rows the model did not see",
        ),
        ("", "Gap", "training minus held-out: overfitting"),
        ("", "BIC", "fit on all rows; lower is better"),
        ("", "AIC", "fit on all rows; lower is better"),
        ("", "ICL", "fit on all rows; lower is better"),
        ("text", "Chosen by", ""),
    ];
    let mut out = head(&heads);
    for c in &result.candidates {
        let picks = chosen_by(result, c);
        let mut classes = row_classes(&picks, c);
        let note = notes(c);
        if !note.is_empty() {
            classes.push("has-note");
        }
        let fit = c.full_fit.as_ref();
        let cells = [
            name_cells(c),
            format!("<td class=\"text status\">{}</td>", status(c)),
            format!("<td>{}</td>", c.free_parameters),
            format!("<td>{}</td>", with_error(c.train)),
            format!("<td>{}</td>", with_error(c.heldout)),
            format!("<td>{}</td>", maybe_fixed(c.gap, PER_ROW)),
            format!("<td>{}</td>", maybe_fixed(fit.map(|f| f.bic), TOTAL)),
            format!("<td>{}</td>", maybe_fixed(fit.map(|f| f.aic), TOTAL)),
            format!("<td>{}</td>", maybe_fixed(fit.map(|f| f.icl), TOTAL)),
            format!(
                "<td class=\"text picks-cell\">{}</td>",
                picks
                    .iter()
                    .map(|p| format!("<span class=\"tag pick\">{p}</span>"))
                    .collect::<String>()
            ),
        ];
        out.push_str(&format!(
            "<tr{}>{}</tr>\n",
            class_attr(&classes),
            cells.concat()
        ));
        if !note.is_empty() {
            classes.retain(|&c| c != "has-note");
            classes.push("note-row");
            out.push_str(&format!(
                "<tr{}><td colspan=\"{}\" class=\"text notes\">{note}</td></tr>\n",
                class_attr(&classes),
                heads.len()
            ));
        }
    }
    out.push_str("</tbody></table></div>\n");
    out
}

/// The diagnostics table: the fit on all rows, the folds, and agreement with the labels when
/// a label column was given.
pub(crate) fn diagnostics(result: &SweepResult) -> String {
    let labels = result.candidates.iter().any(|c| c.labels.is_some());
    let mut heads = vec![
        ("text", "Covariance", ""),
        ("", "K", "component count"),
        ("", "Log-likelihood", "total, fit on all rows"),
        ("", "EM iterations", "fit on all rows, winning start"),
        ("", "Converged", "fit on all rows, winning start"),
        (
            "",
            "Smallest component (rows)",
            "effective rows (N × weight) of the smallest component, fit on all rows",
        ),
        ("text", "Folds", "each fold's fit; open for the numbers"),
    ];
    if labels {
        heads.push(("", "ARI", "adjusted Rand index with the labels"));
        heads.push(("", "NMI", "normalised mutual information with the labels"));
    }
    let mut out = head(&heads);
    for c in &result.candidates {
        let picks = chosen_by(result, c);
        let classes = row_classes(&picks, c);
        let fit = c.full_fit.as_ref();
        let mut cells = vec![
            name_cells(c),
            format!("<td>{}</td>", maybe_fixed(fit.map(|f| f.loglik), TOTAL)),
            format!(
                "<td>{}</td>",
                fit.map_or_else(|| "—".into(), |f| f.iterations.to_string())
            ),
            format!(
                "<td>{}</td>",
                fit.map_or("—", |f| if f.converged {
                    "yes"
                } else {
                    "<span class=\"tag warn\">no</span>"
                })
            ),
            format!(
                "<td>{}</td>",
                maybe_fixed(fit.map(|f| f.smallest_component_rows), TOTAL)
            ),
            format!("<td class=\"text\">{}</td>", folds(c)),
        ];
        if labels {
            cells.push(format!(
                "<td>{}</td>",
                maybe_fixed(c.labels.map(|l| l.adjusted_rand), PER_ROW)
            ));
            cells.push(format!(
                "<td>{}</td>",
                maybe_fixed(c.labels.map(|l| l.normalised_mutual_information), PER_ROW)
            ));
        }
        out.push_str(&format!(
            "<tr{}>{}</tr>\n",
            class_attr(&classes),
            cells.concat()
        ));
    }
    out.push_str("</tbody></table></div>\n");
    out
}
