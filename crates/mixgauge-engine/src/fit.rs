//! EM fitting: options, the iteration loop, the M-step with its ridge and component floor,
//! and best-of-R restarts.
//!
//! Each pass over the data computes the log-likelihood of the current parameters θₜ and, in
//! the same sweep, the statistics for θₜ₊₁. The loop stops when the mean per-row
//! log-likelihood improves by less than the tolerance (returning θₜ, whose log-likelihood is
//! then exactly the last value of the trace) or when the iteration cap is reached (one last
//! scoring-only pass gives the final model's log-likelihood).

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::Error;
use crate::form::CovarianceForm;
use crate::init;
use crate::kernel::{BLOCK_ROWS, PassStats, Tiled, block_count, fit_block, score_block};
use crate::linalg::packed;
use crate::model::Mixture;
use crate::rows::Rows;
use crate::stats::{ColumnMoments, Reseed, reduce_blocks};

/// Where EM starts.
#[derive(Clone, Debug)]
pub enum Start {
    /// k-means++ seeding refined by Lloyd steps, then one M-step on the hard assignment.
    Seeded,
    /// Uniformly random responsibilities, then one M-step.
    RandomResponsibilities,
    /// A caller's model (warm start). Every restart starts from it, so one restart suffices.
    Model(Mixture),
}

/// The covariance ridge: a value added to every covariance diagonal in each M-step, which keeps
/// covariances positive definite and bounds the likelihood of a collapsing component.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase", tag = "kind", content = "value")]
pub enum Ridge {
    /// A fraction of each column's variance over the rows being fitted (scale-aware). A
    /// constant column uses the mean of the other columns' variances (1 if all are constant).
    Relative(f64),
    /// The same absolute value for every column.
    Absolute(f64),
}

/// Why the EM loop stopped.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Termination {
    /// The mean per-row log-likelihood improved by less than the tolerance.
    Converged,
    /// The iteration cap was reached first.
    IterationLimit,
}

/// Settings of one fit. Build with [`FitOptions::new`] and adjust the public fields.
#[derive(Clone, Debug)]
pub struct FitOptions {
    /// Number of components K. No default: given to [`FitOptions::new`].
    pub components: usize,
    /// Covariance form. No default: given to [`FitOptions::new`].
    pub form: CovarianceForm,
    /// Starting point. Default [`Start::Seeded`].
    pub start: Start,
    /// Independent starts; the best final log-likelihood wins (ties: the lower restart).
    /// Default 1.
    pub restarts: usize,
    /// Seed of every random stream. Default 0.
    pub seed: u64,
    /// Stop when the mean per-row log-likelihood improves by less than this, in nats.
    /// Default 1e-6.
    pub tolerance: f64,
    /// Cap on EM updates. Default 1000.
    pub max_iterations: usize,
    /// Covariance ridge. Default `Ridge::Relative(1e-6)`.
    pub ridge: Ridge,
    /// A component whose effective row count (Σ responsibilities) falls below this is
    /// re-seeded at the worst-explained row. Default 1.0.
    pub min_component_rows: f64,
    /// Lloyd steps after k-means++ seeding. Default 10.
    pub lloyd_steps: usize,
}

impl FitOptions {
    /// Options for `components` components of the given form, everything else at its default.
    pub fn new(components: usize, form: CovarianceForm) -> Self {
        FitOptions {
            components,
            form,
            start: Start::Seeded,
            restarts: 1,
            seed: 0,
            tolerance: 1e-6,
            max_iterations: 1000,
            ridge: Ridge::Relative(1e-6),
            min_component_rows: 1.0,
            lloyd_steps: 10,
        }
    }

    fn validate(&self, rows: &Rows) -> Result<(), Error> {
        let bad = |name, value: String, expected| {
            Err(Error::Option {
                name,
                value,
                expected,
            })
        };
        if self.components == 0 {
            return bad("components", "0".into(), "fit at least one component");
        }
        if self.restarts == 0 {
            return bad("restarts", "0".into(), "use at least one restart");
        }
        if !(self.tolerance.is_finite() && self.tolerance >= 0.0) {
            return bad(
                "tolerance",
                self.tolerance.to_string(),
                "use a finite value ≥ 0, e.g. 1e-6",
            );
        }
        let (Ridge::Relative(r) | Ridge::Absolute(r)) = self.ridge;
        if !(r.is_finite() && r >= 0.0) {
            return bad("ridge", r.to_string(), "use a finite value ≥ 0, e.g. 1e-6");
        }
        if !(self.min_component_rows.is_finite() && self.min_component_rows > 0.0) {
            return bad(
                "min_component_rows",
                self.min_component_rows.to_string(),
                "use a value > 0, e.g. 1",
            );
        }
        if rows.len() < self.components {
            return Err(Error::TooFewRows {
                rows: rows.len(),
                components: self.components,
            });
        }
        if let Start::Model(m) = &self.start
            && (m.dims() != rows.dims()
                || m.components() != self.components
                || m.form() != self.form)
        {
            return Err(Error::StartMismatch {
                found: format!(
                    "{} {} components in {} columns",
                    m.components(),
                    m.form(),
                    m.dims()
                ),
                wanted: format!(
                    "{} {} components in {} columns",
                    self.components,
                    self.form,
                    rows.dims()
                ),
            });
        }
        Ok(())
    }
}

/// What one restart reached.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RestartOutcome {
    /// Restart number, from 0.
    pub restart: usize,
    /// Final mean per-row log-likelihood.
    pub mean_loglik: f64,
    /// EM updates applied.
    pub iterations: usize,
    /// Why it stopped.
    pub termination: Termination,
}

/// The result of [`fit`]: the best restart's model and how it got there.
#[derive(Clone, Debug)]
pub struct Fit {
    /// The fitted mixture.
    pub model: Mixture,
    /// Rows fitted.
    pub rows: usize,
    /// Total log-likelihood of the fitted rows under `model`, in nats.
    pub loglik: f64,
    /// EM updates applied in the winning restart.
    pub iterations: usize,
    /// Why the winning restart stopped.
    pub termination: Termination,
    /// Mean per-row log-likelihood after each update of the winning restart (first value:
    /// the starting model).
    pub trace: Vec<f64>,
    /// Components re-seeded or held during the fit, over all restarts.
    pub reseeds: Vec<Reseed>,
    /// The ridge added to each column's variance, as actually used.
    pub ridge: Vec<f64>,
    /// The winning restart.
    pub restart: usize,
    /// Every restart's outcome, in restart order.
    pub restarts: Vec<RestartOutcome>,
}

impl Fit {
    /// Mean per-row log-likelihood of the fitted rows.
    pub fn mean_loglik(&self) -> f64 {
        self.loglik / self.rows as f64
    }

    /// Whether the winning restart converged within the iteration cap.
    pub fn converged(&self) -> bool {
        self.termination == Termination::Converged
    }
}

/// Fits a mixture to `rows` by EM.
///
/// # Errors
/// Invalid options ([`Error::Option`], [`Error::TooFewRows`], [`Error::StartMismatch`]),
/// non-finite data ([`Error::NotFinite`]), columns too wide for double precision
/// ([`Error::TooWide`]), or a covariance that stays singular despite the ridge
/// ([`Error::NotPositiveDefinite`]).
pub fn fit(rows: &Rows, options: &FitOptions) -> Result<Fit, Error> {
    fit_until(rows, options, &|| false)
}

/// [`fit`] with cooperative cancellation: `stop` is polled before every pass, and a `true`
/// ends the fit with [`Error::Cancelled`].
///
/// # Errors
/// As [`fit`], plus [`Error::Cancelled`].
pub fn fit_until(
    rows: &Rows,
    options: &FitOptions,
    stop: &(dyn Fn() -> bool + Sync),
) -> Result<Fit, Error> {
    let fits: Vec<Result<Fit, Error>> = (0..options.restarts)
        .into_par_iter()
        .map(|r| fit_restart(rows, options, r, stop))
        .collect();
    Ok(best_of(fits.into_iter().collect::<Result<Vec<_>, _>>()?))
}

/// Runs restart number `restart` of `options` alone (`options.restarts` is ignored). The
/// result equals that restart's run inside [`fit`], so a scheduler can spread restarts over
/// workers and combine them with [`best_of`].
///
/// # Errors
/// As [`fit_until`].
pub fn fit_restart(
    rows: &Rows,
    options: &FitOptions,
    restart: usize,
    stop: &(dyn Fn() -> bool + Sync),
) -> Result<Fit, Error> {
    let mut one = options.clone();
    one.restarts = 1;
    one.validate(rows)?;
    rows.check_finite()?;
    let moments = ColumnMoments::of(rows)?;
    let ridge = ridge_values(options.ridge, &moments.variances);
    let run = run(rows, options, &ridge, &moments, restart, stop)?;
    Ok(Fit {
        rows: rows.len(),
        loglik: run.loglik,
        iterations: run.iterations,
        termination: run.termination,
        restarts: vec![RestartOutcome {
            restart: run.restart,
            mean_loglik: run.loglik / rows.len() as f64,
            iterations: run.iterations,
            termination: run.termination,
        }],
        model: run.model,
        trace: run.trace,
        reseeds: run.reseeds,
        ridge,
        restart: run.restart,
    })
}

/// The best of several restarts of one fit: the highest log-likelihood wins, ties going to the
/// lower restart number; the outcomes and re-seeding events of all are kept, in restart order.
///
/// # Panics
/// If `fits` is empty.
pub fn best_of(mut fits: Vec<Fit>) -> Fit {
    assert!(!fits.is_empty(), "best_of needs at least one fit");
    fits.sort_by_key(|f| f.restart);
    let mut outcomes = Vec::new();
    let mut reseeds = Vec::new();
    for f in &fits {
        outcomes.extend(f.restarts.iter().cloned());
        reseeds.extend(f.reseeds.iter().cloned());
    }
    let mut best = 0;
    for (i, f) in fits.iter().enumerate() {
        if f.loglik > fits[best].loglik {
            best = i;
        }
    }
    let mut winner = fits.swap_remove(best);
    winner.restarts = outcomes;
    winner.reseeds = reseeds;
    winner
}

/// The per-column ridge for the chosen rule.
fn ridge_values(ridge: Ridge, variances: &[f64]) -> Vec<f64> {
    match ridge {
        Ridge::Absolute(v) => vec![v; variances.len()],
        Ridge::Relative(f) => {
            let positive: Vec<f64> = variances.iter().copied().filter(|v| *v > 0.0).collect();
            let fallback = if positive.is_empty() {
                1.0
            } else {
                positive.iter().sum::<f64>() / positive.len() as f64
            };
            variances
                .iter()
                .map(|&v| f * if v > 0.0 { v } else { fallback })
                .collect()
        }
    }
}

/// What every M-step of one fit shares.
#[derive(Clone, Copy)]
struct Context<'a> {
    rows: &'a Rows<'a>,
    form: CovarianceForm,
    ridge: &'a [f64],
    moments: &'a ColumnMoments,
}

struct Run {
    restart: usize,
    model: Mixture,
    loglik: f64,
    iterations: usize,
    termination: Termination,
    trace: Vec<f64>,
    reseeds: Vec<Reseed>,
}

/// One pass over all rows: log-likelihood of `model` and, if `accumulate`, the statistics
/// around the model's means.
fn pass(tiled: &Tiled, model: &Mixture, accumulate: bool) -> PassStats {
    let centres = model.means();
    reduce_blocks(
        block_count(tiled.len()),
        &|b| fit_block(model, tiled, b, centres, accumulate),
        &PassStats::merge,
    )
}

fn run(
    rows: &Rows,
    options: &FitOptions,
    ridge: &[f64],
    moments: &ColumnMoments,
    restart: usize,
    stop: &(dyn Fn() -> bool + Sync),
) -> Result<Run, Error> {
    let k = options.components;
    let form = options.form;
    let mut state = Floor::new(options, restart);
    let ctx = Context {
        rows,
        form,
        ridge,
        moments,
    };
    let tiled = Tiled::new(rows);
    let mut model = match &options.start {
        Start::Model(m) => m.clone(),
        Start::Seeded => {
            let mut rng = init::stream(options.seed, restart, 0);
            let (stats, centres) =
                init::seeded(rows, &tiled, k, form, options.lloyd_steps, &mut rng);
            update(&ctx, None, &stats, &centres, &mut state, 0)?
        }
        Start::RandomResponsibilities => {
            let (stats, centres) =
                init::random_responsibilities(rows, k, form, &moments.means, options.seed, restart);
            update(&ctx, None, &stats, &centres, &mut state, 0)?
        }
    };
    let n = rows.len() as f64;
    let mut trace = Vec::new();
    let mut previous = f64::NEG_INFINITY;
    let mut fresh = true;
    let mut iterations = 0;
    let mut last: Option<(Mixture, f64)> = None;
    loop {
        if stop() {
            return Err(Error::Cancelled);
        }
        let accumulate = iterations < options.max_iterations;
        let stats = pass(&tiled, &model, accumulate);
        if stats.lost_rows > 0 {
            return Err(Error::Model(format!(
                "{} rows underflow every component after {iterations} EM steps; raise the ridge or standardise the data",
                stats.lost_rows
            )));
        }
        let mean = stats.loglik / n;
        trace.push(mean);
        let converged = !fresh && mean - previous < options.tolerance;
        if converged || !accumulate {
            let termination = if converged {
                Termination::Converged
            } else {
                Termination::IterationLimit
            };
            // With a ridge an update can lower the likelihood slightly; never return the worse
            // of the last two models. The trace then ends at the returned model's value.
            if let Some((before, loglik)) = last.take()
                && !fresh
                && mean < previous
            {
                trace.pop();
                return Ok(state.finish(before, loglik, iterations - 1, termination, trace));
            }
            return Ok(state.finish(model, stats.loglik, iterations, termination, trace));
        }
        let events = state.events.len();
        let centres = model.means().to_vec();
        let next = update(
            &ctx,
            Some(&model),
            &stats,
            &centres,
            &mut state,
            iterations + 1,
        )?;
        fresh = state.moved_since(events);
        previous = mean;
        last = Some((std::mem::replace(&mut model, next), stats.loglik));
        iterations += 1;
    }
}

/// Book-keeping of the component floor within one restart.
struct Floor {
    restart: usize,
    floor: f64,
    budget: usize,
    held: Vec<bool>,
    events: Vec<Reseed>,
}

impl Floor {
    fn new(options: &FitOptions, restart: usize) -> Self {
        Floor {
            restart,
            floor: options.min_component_rows,
            budget: 2 * options.components,
            held: vec![false; options.components],
            events: Vec::new(),
        }
    }

    fn moved_since(&self, events: usize) -> bool {
        self.events[events..]
            .iter()
            .any(|e| e.moved_to_row.is_some())
    }

    fn finish(
        self,
        model: Mixture,
        loglik: f64,
        iterations: usize,
        termination: Termination,
        trace: Vec<f64>,
    ) -> Run {
        Run {
            restart: self.restart,
            model,
            loglik,
            iterations,
            termination,
            trace,
            reseeds: self.events,
        }
    }
}

/// The M-step: new weights, means and covariances from the statistics taken around `centres`.
///
/// Covariance = Σr(x−c)(x−c)ᵀ/Nₖ − δδᵀ with δ = Σr(x−c)/Nₖ, plus the ridge on the diagonal.
/// Components with Nₖ below the floor are moved to the worst-explained rows under `previous`
/// (while the budget lasts; otherwise they keep their previous mean) with the pooled
/// covariance of the others, and the weights are renormalised.
fn update(
    ctx: &Context,
    previous: Option<&Mixture>,
    stats: &PassStats,
    centres: &[f64],
    floor: &mut Floor,
    iteration: usize,
) -> Result<Mixture, Error> {
    let Context {
        rows,
        form,
        ridge,
        moments,
    } = *ctx;
    let k = stats.weight.len();
    let d = rows.dims();
    let p = form.packed_len(d);
    let n = rows.len() as f64;
    let mut weights = vec![0.0; k];
    let mut means = vec![0.0; k * d];
    let mut covs = vec![0.0; k * p];
    let mut collapsed = Vec::new();
    for c in 0..k {
        let nk = stats.weight[c];
        let healthy = nk >= floor.floor; // false for NaN too
        if !healthy {
            collapsed.push(c);
            continue;
        }
        weights[c] = nk / n;
        let offset: Vec<f64> = stats.first[c * d..(c + 1) * d]
            .iter()
            .map(|s| s / nk)
            .collect();
        for j in 0..d {
            means[c * d + j] = centres[c * d + j] + offset[j];
        }
        let second = &stats.second[c * p..(c + 1) * p];
        let cov = &mut covs[c * p..(c + 1) * p];
        match form {
            CovarianceForm::Full => {
                for i in 0..d {
                    for j in 0..=i {
                        cov[packed(i, j)] = second[packed(i, j)] / nk - offset[i] * offset[j];
                    }
                    cov[packed(i, i)] += ridge[i];
                }
            }
            CovarianceForm::Diagonal => {
                for j in 0..d {
                    cov[j] = (second[j] / nk - offset[j] * offset[j]).max(0.0) + ridge[j];
                }
            }
        }
    }
    if !collapsed.is_empty() {
        let pooled = pooled_covariance(form, d, &covs, &stats.weight, &collapsed, moments);
        let worst = if floor.budget > 0 {
            worst_rows(
                rows,
                previous,
                centres,
                k,
                collapsed.len().min(floor.budget),
            )
        } else {
            Vec::new()
        };
        let mut worst = worst.into_iter();
        for &c in &collapsed {
            let nk = stats.weight[c];
            let moved = if floor.budget > 0 { worst.next() } else { None };
            match moved {
                Some(row) => {
                    floor.budget -= 1;
                    floor.held[c] = false;
                    means[c * d..(c + 1) * d].copy_from_slice(rows.row(row));
                    weights[c] = 1.0 / k as f64;
                }
                None => {
                    let old = previous.map_or(&centres[c * d..(c + 1) * d], |m| m.mean(c));
                    means[c * d..(c + 1) * d].copy_from_slice(old);
                    weights[c] = nk.max(floor.floor) / n;
                }
            }
            covs[c * p..(c + 1) * p].copy_from_slice(&pooled);
            if moved.is_some() || !floor.held[c] {
                floor.events.push(Reseed {
                    restart: floor.restart,
                    iteration,
                    component: c,
                    effective_rows: nk.max(0.0),
                    moved_to_row: moved.map(|r| rows.source_index(r)),
                });
            }
            floor.held[c] = moved.is_none();
        }
        let total: f64 = weights.iter().sum();
        for w in &mut weights {
            *w /= total;
        }
    } else {
        // Weights are Nₖ/N; re-normalise only if rounding left them visibly off.
        let total: f64 = weights.iter().sum();
        if (total - 1.0).abs() > 1e-12 {
            for w in &mut weights {
                *w /= total;
            }
        }
    }
    let context = format!(" after {iteration} EM steps");
    Mixture::from_packed(form, weights, means, covs, &context)
}

/// The Nₖ-weighted mean covariance of the healthy components, or the column variances when
/// every component collapsed.
fn pooled_covariance(
    form: CovarianceForm,
    d: usize,
    covs: &[f64],
    weight: &[f64],
    collapsed: &[usize],
    moments: &ColumnMoments,
) -> Vec<f64> {
    let p = form.packed_len(d);
    let mut pooled = vec![0.0; p];
    let mut total = 0.0;
    for c in 0..weight.len() {
        if collapsed.contains(&c) {
            continue;
        }
        total += weight[c];
        for q in 0..p {
            pooled[q] += weight[c] * covs[c * p + q];
        }
    }
    if total > 0.0 {
        for v in &mut pooled {
            *v /= total;
        }
    } else {
        pooled.fill(0.0);
        for j in 0..d {
            let v = moments.variances[j].max(f64::MIN_POSITIVE.sqrt());
            match form {
                CovarianceForm::Full => pooled[packed(j, j)] = v,
                CovarianceForm::Diagonal => pooled[j] = v,
            }
        }
    }
    pooled
}

/// The `m` rows (view positions) with the lowest log-density under `model`, lowest first
/// (ties: lower position). Without a model (at the start), the rows farthest from their
/// nearest centre.
fn worst_rows(
    rows: &Rows,
    model: Option<&Mixture>,
    centres: &[f64],
    k: usize,
    m: usize,
) -> Vec<usize> {
    let n = rows.len();
    let d = rows.dims();
    let keep = |mut v: Vec<(f64, usize)>| {
        v.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        v.truncate(m);
        v
    };
    let worst = reduce_blocks(
        block_count(n),
        &|b| {
            let start = b * BLOCK_ROWS;
            let len = (n - start).min(BLOCK_ROWS);
            let mut score = vec![0.0; len];
            match model {
                Some(model) => {
                    score_block(model, rows, b, &mut score, None);
                }
                None => {
                    for (r, s) in score.iter_mut().enumerate() {
                        let x = rows.row(start + r);
                        let nearest = (0..k)
                            .map(|c| {
                                x.iter()
                                    .zip(&centres[c * d..(c + 1) * d])
                                    .map(|(a, b)| (a - b) * (a - b))
                                    .sum::<f64>()
                            })
                            .fold(f64::INFINITY, f64::min);
                        *s = -nearest;
                    }
                }
            }
            keep(
                score
                    .into_iter()
                    .enumerate()
                    .map(|(r, s)| (s, start + r))
                    .collect(),
            )
        },
        &|mut a, b| {
            a.extend(b);
            keep(a)
        },
    );
    worst.into_iter().map(|(_, r)| r).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn relative_ridge_scales_with_each_column_and_covers_constant_columns() {
        let r = ridge_values(Ridge::Relative(1e-3), &[4.0, 0.0, 2.0]);
        assert_eq!(r, vec![4e-3, 3e-3, 2e-3]);
        assert_eq!(ridge_values(Ridge::Relative(0.5), &[0.0]), vec![0.5]);
        assert_eq!(
            ridge_values(Ridge::Absolute(1e-6), &[9.0, 1.0]),
            vec![1e-6, 1e-6]
        );
    }
}
