//! [`sweep`]: every candidate on every fold and on all rows, then the per-candidate summaries.

use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, Ordering};

use mixgauge_engine::{
    CovarianceForm, Error, Fit, Mixture, Rows, aic, best_of, bic, fit_restart, icl,
};
use nalgebra::{DMatrix, SymmetricEigen};
use rayon::prelude::*;

use crate::agreement::{adjusted_rand_index, normalised_mutual_information};
use crate::folds::Folds;
use crate::recommend::recommend;
use crate::result::{
    Candidate, CandidateStatus, Choice, DatasetInfo, FoldOutcome, FullFit, LabelAgreement,
    MeanWithError, RESULT_FORMAT, SweepResult,
};
use crate::schedule::{Progress, run_all};
use crate::{SelectError, SweepSettings};

/// A component is degenerate when its covariance's smallest eigenvalue falls below this
/// fraction of the smallest eigenvalue of the data's own covariance (common practice for
/// spotting a component pinned near the ridge; the threshold is ours).
const SINGULAR_FRACTION: f64 = 1e-3;

/// The data a sweep runs on, with what the result document reports about it.
#[derive(Clone, Debug)]
pub struct SweepInput<'a> {
    /// The rows to fit.
    pub rows: Rows<'a>,
    /// Names of the columns.
    pub column_names: Vec<String>,
    /// SHA-256 of the input bytes.
    pub sha256: String,
    /// Rows dropped before the sweep.
    pub dropped_rows: usize,
    /// One label per row, for agreement scores (never used to choose).
    pub labels: Option<&'a [String]>,
    /// Added to every per-row log-likelihood to report it in the data's own units (the
    /// log-Jacobian of a standardisation; 0 when the rows are in their own units).
    pub log_jacobian: f64,
    /// Whether the rows were standardised.
    pub standardised: bool,
}

/// A finished sweep: the result document and the full-data model of every fitted candidate.
#[derive(Clone, Debug)]
pub struct SweepOutcome {
    /// The result document.
    pub result: SweepResult,
    /// Full-data models, one per fitted candidate, in candidate order.
    pub models: Vec<(Choice, Mixture)>,
    /// The held-out one-standard-error choice and every row's held-out log-likelihood under
    /// it (each row scored by the fold model that did not see it, in the data's units): the
    /// yardstick a new batch is compared with. `None` when nothing is recommended.
    pub recommended_heldout: Option<(Choice, Vec<f64>)>,
}

#[derive(Clone, Copy, Debug)]
enum Part {
    Fold(usize),
    All,
}

#[derive(Clone, Copy, Debug)]
struct Task {
    candidate: usize,
    part: Part,
    restart: usize,
    cost: f64,
}

/// One fit of a sweep as another process sees it: which candidate, on which rows, which
/// restart. Task numbers index [`SweepPlan::fits`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct PlannedFit {
    /// The candidate being fitted.
    pub choice: Choice,
    /// The fold whose training rows are fitted (0-based); `None` for the fit on all rows.
    pub fold: Option<usize>,
    /// The restart (0-based).
    pub restart: usize,
}

/// A candidate of the plan: form, K, free parameters, and why it is skipped, if it is.
type Planned = (CovarianceForm, usize, usize, Option<String>);

/// A sweep split into independent fits, and how their results become a [`SweepOutcome`].
///
/// [`sweep`] runs a plan on this machine's threads; a cluster of workers can instead build the
/// same plan from the same rows and settings (it is deterministic), run its fits anywhere with
/// [`SweepPlan::fit`], and hand every result to [`SweepPlan::assemble`]. Either way the outcome
/// depends only on the fits' results, never on where or in which order they ran.
#[derive(Clone, Debug)]
pub struct SweepPlan {
    folds: Folds,
    candidates: Vec<Planned>,
    tasks: Vec<Task>,
    order: Vec<usize>,
    smallest_data_eigen: f64,
}

impl SweepPlan {
    /// Checks the input and settings and lays out every fit.
    ///
    /// # Errors
    /// As [`sweep`], except cancellation.
    pub fn new(input: &SweepInput, settings: &SweepSettings) -> Result<Self, SelectError> {
        let rows = &input.rows;
        let n = rows.len();
        let d = rows.dims();
        settings.validate(n)?;
        if let Some(labels) = input.labels
            && labels.len() != n
        {
            return Err(SelectError::Labels {
                labels: labels.len(),
                rows: n,
            });
        }
        rows.check_finite()?;
        // Data the engine cannot fit at all is the caller's error, not a column of failed candidates.
        mixgauge_engine::ColumnMoments::of(rows)?;
        let smallest_data_eigen = smallest_covariance_eigenvalue(rows);
        let folds = Folds::shuffled(n, settings.folds, settings.seed);

        // Candidates, and the reason a candidate is skipped.
        let mut candidates = Vec::new();
        for &form in &settings.covariances {
            for &k in &settings.components {
                let p = form.free_parameters(k, d);
                let limit = folds.smallest_training();
                let reason = if k > limit {
                    Some(format!(
                        "{k} components need at least {k} training rows; the smallest fold trains on {limit}"
                    ))
                } else if p > limit {
                    Some(format!(
                        "{p} free parameters exceed the {limit} training rows of the smallest fold"
                    ))
                } else {
                    None
                };
                candidates.push((form, k, p, reason));
            }
        }
        let mut tasks = Vec::new();
        for (c, (form, k, _, reason)) in candidates.iter().enumerate() {
            if reason.is_some() {
                continue;
            }
            let per_row = *k as f64
                * match form {
                    CovarianceForm::Full => (d * d) as f64,
                    CovarianceForm::Diagonal => d as f64,
                };
            for restart in 0..settings.restarts {
                for f in 0..folds.len() {
                    let cost = per_row * folds.training(f).len() as f64;
                    tasks.push(Task {
                        candidate: c,
                        part: Part::Fold(f),
                        restart,
                        cost,
                    });
                }
                tasks.push(Task {
                    candidate: c,
                    part: Part::All,
                    restart,
                    cost: per_row * n as f64,
                });
            }
        }
        let mut order: Vec<usize> = (0..tasks.len()).collect();
        order.sort_by(|&a, &b| tasks[b].cost.total_cmp(&tasks[a].cost).then(a.cmp(&b)));
        Ok(SweepPlan {
            folds,
            candidates,
            tasks,
            order,
            smallest_data_eigen,
        })
    }

    /// Number of fits.
    pub fn len(&self) -> usize {
        self.tasks.len()
    }

    /// True when every candidate is skipped.
    pub fn is_empty(&self) -> bool {
        self.tasks.is_empty()
    }

    /// Every fit, by task number.
    pub fn fits(&self) -> Vec<PlannedFit> {
        (0..self.tasks.len()).map(|t| self.planned(t)).collect()
    }

    /// Task numbers, most expensive first (the order that keeps every worker busy to the end).
    pub fn order(&self) -> &[usize] {
        &self.order
    }

    /// Relative cost of a fit (K × D² or K × D, times the rows it fits).
    pub fn cost(&self, task: usize) -> f64 {
        self.tasks[task].cost
    }

    fn planned(&self, t: usize) -> PlannedFit {
        let task = self.tasks[t];
        let (form, k, _, _) = &self.candidates[task.candidate];
        PlannedFit {
            choice: Choice {
                covariance: *form,
                components: *k,
            },
            fold: match task.part {
                Part::Fold(f) => Some(f),
                Part::All => None,
            },
            restart: task.restart,
        }
    }

    /// Runs fit number `task` on `input`'s rows; `stop` ends it early with
    /// [`Error::Cancelled`].
    ///
    /// # Errors
    /// What the engine reports for this fit.
    pub fn fit(
        &self,
        input: &SweepInput,
        settings: &SweepSettings,
        task: usize,
        stop: &(dyn Fn() -> bool + Sync),
    ) -> Result<Fit, Error> {
        let t = self.tasks[task];
        let (form, k, _, _) = &self.candidates[t.candidate];
        let options = settings.fit_options(*k, *form);
        let view = match t.part {
            Part::Fold(f) => input.rows.with_subset(self.folds.training(f))?,
            Part::All => input.rows,
        };
        fit_restart(&view, &options, t.restart, stop)
    }

    /// The reason a failed fit gives its candidate, as the result document shows it.
    pub fn failure(&self, task: usize, e: &Error) -> String {
        describe_failure(self.tasks[task].part, e)
    }

    /// The outcome from every fit's result, by task number: the fit, or the reason from
    /// [`SweepPlan::failure`].
    ///
    /// # Errors
    /// [`SelectError::Engine`] when a fitted model cannot score the rows; a result list of
    /// the wrong length is a [`SelectError::Setting`].
    pub fn assemble(
        &self,
        input: &SweepInput,
        settings: &SweepSettings,
        results: Vec<Result<Fit, String>>,
    ) -> Result<SweepOutcome, SelectError> {
        if results.len() != self.tasks.len() {
            return Err(SelectError::Setting {
                name: "fit results",
                value: results.len().to_string(),
                expected: format!("one result per fit of the plan ({})", self.tasks.len()),
            });
        }
        let rows = &input.rows;
        let n = rows.len();
        let d = rows.dims();
        let folds = &self.folds;
        let candidates = &self.candidates;
        let smallest_data_eigen = self.smallest_data_eigen;
        let heldout_rows: Vec<Rows> = (0..folds.len())
            .map(|f| rows.with_subset(folds.heldout(f)))
            .collect::<Result<_, _>>()?;
        // Group the restarts of each (candidate, part).
        let mut by_part: Vec<Vec<Vec<Fit>>> =
            vec![vec![Vec::new(); folds.len() + 1]; candidates.len()];
        let mut failures: Vec<Option<String>> = vec![None; candidates.len()];
        for (task, result) in self.tasks.iter().zip(results) {
            let slot = match task.part {
                Part::Fold(f) => f,
                Part::All => folds.len(),
            };
            match result {
                Ok(fit) => by_part[task.candidate][slot].push(fit),
                Err(reason) => {
                    failures[task.candidate].get_or_insert(reason);
                }
            }
        }

        let lj = input.log_jacobian;
        let mut out = Vec::with_capacity(candidates.len());
        let mut models = Vec::new();
        let mut fold_models: Vec<Option<Vec<Mixture>>> = Vec::with_capacity(candidates.len());
        for (c, (form, k, p, reason)) in candidates.iter().enumerate() {
            let mut cand = Candidate {
                covariance: *form,
                components: *k,
                status: CandidateStatus::Fitted,
                reason: None,
                free_parameters: *p,
                train: None,
                heldout: None,
                gap: None,
                full_fit: None,
                folds: Vec::new(),
                degenerate: false,
                degenerate_reason: None,
                labels: None,
            };
            if let Some(r) = reason {
                cand.status = CandidateStatus::Skipped;
                cand.reason = Some(r.clone());
                out.push(cand);
                fold_models.push(None);
                continue;
            }
            if let Some(r) = &failures[c] {
                cand.status = CandidateStatus::Failed;
                cand.reason = Some(r.clone());
                out.push(cand);
                fold_models.push(None);
                continue;
            }
            let parts = std::mem::take(&mut by_part[c]);
            let mut fits: Vec<Fit> = parts.into_iter().map(best_of).collect();
            let full = fits.pop().expect("the full-data part");
            // Training means per fold, and the held-out rows' log-likelihoods.
            let mut train_means = Vec::with_capacity(fits.len());
            for (f, fit) in fits.iter().enumerate() {
                let heldout = fit.model.summarise(&heldout_rows[f])?;
                cand.folds.push(FoldOutcome {
                    train_mean: fit.mean_loglik() + lj,
                    heldout_mean: heldout.mean() + lj,
                    iterations: fit.iterations,
                    converged: fit.converged(),
                });
                train_means.push(fit.mean_loglik() + lj);
            }
            let heldout = heldout_vector(&fits, &heldout_rows, folds, n)?;
            let (hm, hs) = mean_and_stderr(&heldout);
            let (tm, ts) = mean_and_stderr(&train_means);
            cand.train = Some(MeanWithError {
                mean: tm,
                stderr: ts,
            });
            cand.heldout = Some(MeanWithError {
                mean: hm + lj,
                stderr: hs,
            });
            cand.gap = Some(tm - (hm + lj));
            let summary = full.model.summarise(rows)?;
            let loglik = summary.loglik + n as f64 * lj;
            let smallest = full
                .model
                .weights()
                .iter()
                .copied()
                .fold(f64::INFINITY, f64::min)
                * n as f64;
            cand.full_fit = Some(FullFit {
                loglik,
                bic: bic(loglik, *p, n),
                aic: aic(loglik, *p),
                icl: icl(loglik, *p, n, summary.entropy),
                iterations: full.iterations,
                converged: full.converged(),
                smallest_component_rows: smallest,
            });
            let mut checked: Vec<(&Mixture, usize, String)> =
                vec![(&full.model, n, "the fit on all rows".to_string())];
            for (f, fit) in fits.iter().enumerate() {
                checked.push((&fit.model, fit.rows, format!("fold {}", f + 1)));
            }
            for (model, fitted_rows, which) in checked {
                if let Some(why) = degeneracy(model, fitted_rows, smallest_data_eigen) {
                    cand.degenerate = true;
                    cand.degenerate_reason = Some(format!("{which}: {why}"));
                    break;
                }
            }
            if let Some(labels) = input.labels {
                let assigned = full.model.assign(rows)?;
                cand.labels = Some(LabelAgreement {
                    adjusted_rand: adjusted_rand_index(labels, &assigned),
                    normalised_mutual_information: normalised_mutual_information(labels, &assigned),
                });
            }
            models.push((
                Choice {
                    covariance: *form,
                    components: *k,
                },
                full.model.clone(),
            ));
            fold_models.push(Some(fits.into_iter().map(|f| f.model).collect()));
            out.push(cand);
        }

        // Paired standard errors against the best held-out candidate, for the one-SE rule.
        let best = out
            .iter()
            .enumerate()
            .filter(|(_, c)| c.eligible())
            .max_by(|a, b| {
                let (ma, mb) = (
                    a.1.heldout.map_or(f64::NEG_INFINITY, |h| h.mean),
                    b.1.heldout.map_or(f64::NEG_INFINITY, |h| h.mean),
                );
                ma.total_cmp(&mb).then(b.0.cmp(&a.0))
            })
            .map(|(i, _)| i);
        let mut paired = vec![None; out.len()];
        if let Some(b) = best {
            let best_rows = heldout_from_models(
                fold_models[b].as_ref().expect("eligible"),
                &heldout_rows,
                folds,
                n,
            )?;
            for (c, cand) in out.iter().enumerate() {
                if !cand.eligible() {
                    continue;
                }
                if c == b {
                    paired[c] = Some(0.0);
                    continue;
                }
                let v = heldout_from_models(
                    fold_models[c].as_ref().expect("eligible"),
                    &heldout_rows,
                    folds,
                    n,
                )?;
                let diff: Vec<f64> = best_rows.iter().zip(&v).map(|(x, y)| x - y).collect();
                paired[c] = Some(mean_and_stderr(&diff).1);
            }
        }
        let (recommendations, summary) = recommend(&out, &paired);
        let recommended_heldout = match recommendations.heldout_one_se {
            Some(choice) => {
                let c = out
                    .iter()
                    .position(|c| {
                        c.covariance == choice.covariance && c.components == choice.components
                    })
                    .expect("a recommended candidate is a candidate");
                let mut v = heldout_from_models(
                    fold_models[c].as_ref().expect("recommended implies fitted"),
                    &heldout_rows,
                    folds,
                    n,
                )?;
                v.iter_mut().for_each(|x| *x += lj);
                Some((choice, v))
            }
            None => None,
        };
        Ok(SweepOutcome {
            result: SweepResult {
                format: RESULT_FORMAT.to_string(),
                dataset: DatasetInfo {
                    rows: n,
                    columns: d,
                    column_names: input.column_names.clone(),
                    sha256: input.sha256.clone(),
                    dropped_rows: input.dropped_rows,
                    standardised: input.standardised,
                },
                settings: settings.clone(),
                candidates: out,
                recommendations,
                summary,
            },
            models,
            recommended_heldout,
        })
    }
}

/// Runs a sweep. `progress` is called after every finished fit; setting `cancel` stops it
/// (with [`SelectError::Cancelled`]).
///
/// # Errors
/// [`SelectError::Setting`] for invalid settings, [`SelectError::Labels`] for a label count that
/// does not match, [`SelectError::Engine`] for data the engine refuses (non-finite values,
/// columns too wide), [`SelectError::Cancelled`].
pub fn sweep(
    input: &SweepInput,
    settings: &SweepSettings,
    progress: &(dyn Fn(&Progress) + Sync),
    cancel: &AtomicBool,
) -> Result<SweepOutcome, SelectError> {
    let plan = SweepPlan::new(input, settings)?;
    let n = input.rows.len();
    let stop = || cancel.load(Ordering::Relaxed);
    let (tasks, candidates) = (&plan.tasks, &plan.candidates);
    // Fits left per candidate, to report candidates as they complete.
    let mut left = vec![0usize; candidates.len()];
    for t in tasks {
        left[t.candidate] += 1;
    }
    let finished = Mutex::new((0usize, None::<(Choice, f64)>, left, Vec::<Choice>::new()));
    let total = tasks.len();
    let results = run_all(
        &plan.order,
        total,
        |t| plan.fit(input, settings, t, &stop),
        |t, result| {
            let task = tasks[t];
            let mut state = finished.lock().expect("progress lock");
            state.0 += 1;
            state.2[task.candidate] -= 1;
            if state.2[task.candidate] == 0 {
                let (form, k, _, _) = &candidates[task.candidate];
                state.3.push(Choice {
                    covariance: *form,
                    components: *k,
                });
            }
            if let (Part::All, Ok(fit)) = (task.part, result) {
                let (form, k, p, _) = &candidates[task.candidate];
                let b = bic(fit.loglik + n as f64 * input.log_jacobian, *p, n);
                if state.1.is_none_or(|(_, best)| b < best) {
                    state.1 = Some((
                        Choice {
                            covariance: *form,
                            components: *k,
                        },
                        b,
                    ));
                }
            }
            progress(&Progress {
                done: state.0,
                total,
                best_so_far: state.1,
                finished: state.3.clone(),
            });
        },
        cancel,
    );
    if stop() {
        return Err(SelectError::Cancelled);
    }
    let mut outcomes = Vec::with_capacity(results.len());
    for (t, result) in results.into_iter().enumerate() {
        match result.expect("every task ran") {
            Ok(fit) => outcomes.push(Ok(fit)),
            Err(Error::Cancelled) => return Err(SelectError::Cancelled),
            Err(e) => outcomes.push(Err(plan.failure(t, &e))),
        }
    }
    plan.assemble(input, settings, outcomes)
}

fn describe_failure(part: Part, e: &Error) -> String {
    match part {
        Part::Fold(f) => format!("fold {}: {e}", f + 1),
        Part::All => format!("the fit on all rows: {e}"),
    }
}

/// Every row's held-out log-likelihood, each row scored by the model of the fold that held it
/// out, in row order.
fn heldout_vector(
    fits: &[Fit],
    heldout_rows: &[Rows],
    folds: &Folds,
    n: usize,
) -> Result<Vec<f64>, Error> {
    let models: Vec<Mixture> = fits.iter().map(|f| f.model.clone()).collect();
    heldout_from_models(&models, heldout_rows, folds, n)
}

fn heldout_from_models(
    models: &[Mixture],
    heldout_rows: &[Rows],
    folds: &Folds,
    n: usize,
) -> Result<Vec<f64>, Error> {
    let mut out = vec![0.0; n];
    for (f, model) in models.iter().enumerate() {
        let ll = model.log_density(&heldout_rows[f])?;
        for (&r, v) in folds.heldout(f).iter().zip(ll) {
            out[r as usize] = v;
        }
    }
    Ok(out)
}

/// Mean and standard error (sd with divisor n−1, over √n) of some values.
fn mean_and_stderr(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let mean = v.iter().sum::<f64>() / n;
    if v.len() < 2 {
        return (mean, 0.0);
    }
    let var = v.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / (n - 1.0);
    (mean, (var / n).sqrt())
}

/// Why a fitted model is degenerate, if it is: a component with at most D+1 effective rows, or
/// a covariance far more singular than the data's own.
fn degeneracy(model: &Mixture, rows: usize, smallest_data_eigen: f64) -> Option<String> {
    let d = model.dims();
    for c in 0..model.components() {
        let effective = model.weights()[c] * rows as f64;
        if effective <= (d + 1) as f64 {
            return Some(format!(
                "component {} has {effective:.2} effective rows, no more than D+1 = {}",
                c + 1,
                d + 1
            ));
        }
        let smallest = match model.form() {
            CovarianceForm::Full => {
                let m = DMatrix::from_row_slice(d, d, &model.covariance(c));
                SymmetricEigen::new(m)
                    .eigenvalues
                    .iter()
                    .copied()
                    .fold(f64::INFINITY, f64::min)
            }
            CovarianceForm::Diagonal => {
                model.variances(c).into_iter().fold(f64::INFINITY, f64::min)
            }
        };
        if smallest < SINGULAR_FRACTION * smallest_data_eigen {
            return Some(format!(
                "component {} has a covariance eigenvalue of {smallest:.3e}, below {SINGULAR_FRACTION} of the data \
                 covariance's smallest ({smallest_data_eigen:.3e}): it has collapsed onto a few rows",
                c + 1
            ));
        }
    }
    None
}

/// The smallest eigenvalue of the rows' covariance (two-pass, centred; fixed-size chunks summed
/// in order so the value does not depend on the thread count).
fn smallest_covariance_eigenvalue(rows: &Rows) -> f64 {
    const CHUNK: usize = 4096;
    let (n, d) = (rows.len(), rows.dims());
    let chunks = n.div_ceil(CHUNK);
    let range = |c: usize| (c * CHUNK)..((c + 1) * CHUNK).min(n);
    let sums: Vec<Vec<f64>> = (0..chunks)
        .into_par_iter()
        .map(|c| {
            let mut s = vec![0.0; d];
            for i in range(c) {
                for (a, v) in s.iter_mut().zip(rows.row(i)) {
                    *a += v;
                }
            }
            s
        })
        .collect();
    let mut mean = vec![0.0; d];
    for s in &sums {
        for (m, v) in mean.iter_mut().zip(s) {
            *m += v;
        }
    }
    for m in &mut mean {
        *m /= n as f64;
    }
    let parts: Vec<Vec<f64>> = (0..chunks)
        .into_par_iter()
        .map(|c| {
            let mut s = vec![0.0; d * d];
            let mut x = vec![0.0; d];
            for i in range(c) {
                for ((xc, v), m) in x.iter_mut().zip(rows.row(i)).zip(&mean) {
                    *xc = v - m;
                }
                for a in 0..d {
                    for b in 0..=a {
                        s[a * d + b] += x[a] * x[b];
                    }
                }
            }
            s
        })
        .collect();
    let mut cov = DMatrix::<f64>::zeros(d, d);
    for s in &parts {
        for a in 0..d {
            for b in 0..=a {
                cov[(a, b)] += s[a * d + b];
            }
        }
    }
    for a in 0..d {
        for b in 0..=a {
            let v = cov[(a, b)] / n as f64;
            cov[(a, b)] = v;
            cov[(b, a)] = v;
        }
    }
    SymmetricEigen::new(cov)
        .eigenvalues
        .iter()
        .copied()
        .fold(f64::INFINITY, f64::min)
        .max(0.0)
}
