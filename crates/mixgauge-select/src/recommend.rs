//! From candidates to recommendations and a plain-language summary.
//!
//! Only eligible candidates (fitted, not degenerate) are recommended. The views:
//! - the highest held-out mean per-row log-likelihood;
//! - the one-standard-error rule (common practice, e.g. Hastie, Tibshirani & Friedman, The
//!   Elements of Statistical Learning, §7.10): the candidate with the fewest free parameters
//!   whose held-out mean is within one standard error of the best, the standard error taken
//!   from the paired per-row differences against the best;
//! - the BIC, AIC and ICL minima of the fits on all rows;
//! - the knee of each covariance form's training curve (Kneedle), shown, never deciding.

use mixgauge_engine::CovarianceForm;

use crate::kneedle::knee;
use crate::result::{Candidate, Choice, Recommendations};

fn choice(c: &Candidate) -> Choice {
    Choice {
        covariance: c.covariance,
        components: c.components,
    }
}

fn name(c: Choice) -> String {
    format!(
        "{} covariance with {} component{}",
        c.covariance,
        c.components,
        if c.components == 1 { "" } else { "s" }
    )
}

/// The eligible candidate minimising `key` (ties: the earlier candidate).
fn argmin(candidates: &[Candidate], key: impl Fn(&Candidate) -> Option<f64>) -> Option<Choice> {
    let mut best: Option<(f64, &Candidate)> = None;
    for c in candidates.iter().filter(|c| c.eligible()) {
        if let Some(v) = key(c)
            && best.is_none_or(|(b, _)| v < b)
        {
            best = Some((v, c));
        }
    }
    best.map(|(_, c)| choice(c))
}

/// Recommendations and summary sentences for `candidates`; `paired_stderr[i]` is the standard
/// error of the per-row held-out differences between the best candidate and candidate `i`.
pub fn recommend(
    candidates: &[Candidate],
    paired_stderr: &[Option<f64>],
) -> (Recommendations, Vec<String>) {
    let heldout_max = argmin(candidates, |c| c.heldout.map(|h| -h.mean));
    let best_mean = heldout_max
        .and_then(|b| candidates.iter().find(|c| choice(c) == b))
        .and_then(|c| c.heldout.map(|h| h.mean));
    let heldout_one_se = best_mean.and_then(|best| {
        let mut pick: Option<&Candidate> = None;
        for (c, se) in candidates.iter().zip(paired_stderr) {
            let (Some(h), Some(se)) = (c.heldout, se) else {
                continue;
            };
            if c.eligible()
                && h.mean >= best - se
                && pick.is_none_or(|p| {
                    (c.free_parameters, c.components) < (p.free_parameters, p.components)
                })
            {
                pick = Some(c);
            }
        }
        pick.map(choice)
    });
    let bic_min = argmin(candidates, |c| c.full_fit.as_ref().map(|f| f.bic));
    let aic_min = argmin(candidates, |c| c.full_fit.as_ref().map(|f| f.aic));
    let icl_min = argmin(candidates, |c| c.full_fit.as_ref().map(|f| f.icl));
    let mut training_elbow = Vec::new();
    let forms: Vec<CovarianceForm> = {
        let mut f: Vec<CovarianceForm> = candidates.iter().map(|c| c.covariance).collect();
        f.dedup();
        f
    };
    for &form in &forms {
        let curve: Vec<&Candidate> = candidates
            .iter()
            .filter(|c| c.covariance == form && c.train.is_some())
            .collect();
        let x: Vec<f64> = curve.iter().map(|c| c.components as f64).collect();
        let y: Vec<f64> = curve
            .iter()
            .map(|c| c.train.map_or(0.0, |t| t.mean))
            .collect();
        if let Some(i) = knee(&x, &y) {
            training_elbow.push(choice(curve[i]));
        }
    }
    let rec = Recommendations {
        heldout_max,
        heldout_one_se,
        bic_min,
        aic_min,
        icl_min,
        training_elbow,
    };
    let summary = sentences(candidates, &rec, &forms);
    (rec, summary)
}

fn sentences(
    candidates: &[Candidate],
    rec: &Recommendations,
    forms: &[CovarianceForm],
) -> Vec<String> {
    let mut out = Vec::new();
    let Some(best) = rec.heldout_max else {
        out.push(
            "No candidate could be recommended: every one was skipped, failed or degenerate."
                .into(),
        );
        return out;
    };
    let find = |c: Choice| candidates.iter().find(|x| choice(x) == c);
    let mean = find(best).and_then(|c| c.heldout).map_or(0.0, |h| h.mean);
    out.push(format!(
        "Held-out log-likelihood is highest for {} ({mean:.4} nats/row).",
        name(best)
    ));
    if let Some(simple) = rec.heldout_one_se
        && simple != best
    {
        out.push(format!(
            "Within one standard error of it, the simplest candidate is {}: the extra parameters of the best do not \
             clearly pay for themselves on unseen rows.",
            name(simple)
        ));
    }
    let views = [
        ("BIC", rec.bic_min),
        ("AIC", rec.aic_min),
        ("ICL", rec.icl_min),
        ("one-SE held-out", rec.heldout_one_se),
    ];
    let agree: Vec<&str> = views
        .iter()
        .filter(|(_, c)| *c == Some(best))
        .map(|(n, _)| *n)
        .collect();
    let differ: Vec<String> = views
        .iter()
        .filter_map(|(n, c)| {
            c.filter(|c| *c != best)
                .map(|c| format!("{n} picks {}", name(c)))
        })
        .collect();
    if differ.is_empty() {
        out.push("BIC, AIC, ICL and the one-standard-error rule all agree with it.".into());
    } else {
        if !agree.is_empty() {
            out.push(format!(
                "{} agree{} with it.",
                agree.join(", "),
                if agree.len() == 1 { "s" } else { "" }
            ));
        }
        out.push(format!("The views differ: {}.", differ.join("; ")));
    }
    for &form in forms {
        let curve: Vec<&Candidate> = candidates
            .iter()
            .filter(|c| c.covariance == form && c.heldout.is_some() && c.train.is_some())
            .collect();
        for w in curve.windows(2) {
            let (a, b) = (w[0], w[1]);
            let (ha, hb) = (
                a.heldout.map_or(0.0, |h| h.mean),
                b.heldout.map_or(0.0, |h| h.mean),
            );
            let (ta, tb) = (
                a.train.map_or(0.0, |t| t.mean),
                b.train.map_or(0.0, |t| t.mean),
            );
            if hb <= ha && tb > ta {
                out.push(format!(
                    "With {form} covariance the held-out curve stops improving after {} components while the training \
                     curve still rises (gap {:.4} → {:.4} nats/row): components beyond {} fit noise, not signal.",
                    a.components,
                    a.gap.unwrap_or(0.0),
                    b.gap.unwrap_or(0.0),
                    a.components
                ));
                break;
            }
        }
    }
    let degenerate: Vec<String> = candidates
        .iter()
        .filter(|c| c.degenerate)
        .map(|c| format!("{} {}", c.covariance, c.components))
        .collect();
    if !degenerate.is_empty() {
        out.push(format!(
            "Degenerate fits (a component collapsed onto a few rows) were set aside: {}.",
            degenerate.join(", ")
        ));
    }
    out.push("A selected K is evidence, not proof: review the components with someone who knows the data.".into());
    out
}
