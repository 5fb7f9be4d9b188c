//! `mixgauge score`: per-row log-likelihoods under a saved model, and a summary with the
//! penalised criteria of the model on these rows.

use std::fmt::Write as _;

use mixgauge_engine::{aic, bic, icl};
use serde::Serialize;

use crate::args::ScoreArgs;
use crate::failure::Failure;
use crate::inputs;

/// The summary printed after scoring.
#[derive(Serialize)]
struct Summary {
    rows: usize,
    loglik: f64,
    mean_loglik: f64,
    free_parameters: usize,
    bic: f64,
    aic: f64,
    icl: f64,
    entropy: f64,
}

pub fn run(args: &ScoreArgs) -> Result<(), Failure> {
    let doc = inputs::model(&args.model)?;
    let model = doc
        .to_mixture()
        .map_err(|e| Failure::Input(format!("{}: {e}", args.model.display())))?;
    let data = inputs::dataset(&args.input)?;
    let rows = inputs::rows(&data)?;
    let (loglik, resp) = model.responsibilities(&rows)?;
    let summary = model.summarise(&rows)?;
    let k = model.components();
    let mut csv = String::with_capacity(rows.len() * 32);
    csv.push_str("row,loglik,component\n");
    for (i, (ll, r)) in loglik.iter().zip(resp.chunks(k)).enumerate() {
        let best = (0..k).fold(0, |b, c| if r[c] > r[b] { c } else { b });
        let _ = writeln!(csv, "{i},{},{best}", number(*ll));
    }
    let p = model.free_parameters();
    let s = Summary {
        rows: summary.rows,
        loglik: summary.loglik,
        mean_loglik: summary.mean(),
        free_parameters: p,
        bic: bic(summary.loglik, p, summary.rows),
        aic: aic(summary.loglik, p),
        icl: icl(summary.loglik, p, summary.rows, summary.entropy),
        entropy: summary.entropy,
    };
    let text = if args.json {
        serde_json::to_string_pretty(&s).expect("summary serialises") + "\n"
    } else {
        format!(
            "{} rows: log-likelihood {:.6} ({:.6} nats/row); {} free parameters; BIC {:.3}, AIC {:.3}, ICL {:.3}\n",
            s.rows, s.loglik, s.mean_loglik, s.free_parameters, s.bic, s.aic, s.icl
        )
    };
    match &args.out {
        Some(path) => {
            inputs::write_out(Some(path), &csv)?;
            inputs::write_out(None, &text)
        }
        None => {
            inputs::write_out(None, &csv)?;
            eprint!("{text}");
            Ok(())
        }
    }
}

/// Shortest text that parses back to the same `f64`.
fn number(v: f64) -> String {
    serde_json::to_string(&v).expect("finite numbers serialise")
}
