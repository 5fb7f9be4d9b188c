//! A small scheduler for independent fits: biggest first, as many at once as the rayon pool has
//! threads, results stored by task number so completion order never shows in the result.

use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use crate::result::Choice;

/// Progress of a sweep, passed to the caller's callback after every finished fit.
#[derive(Clone, Debug, PartialEq)]
pub struct Progress {
    /// Fits finished.
    pub done: usize,
    /// Fits in the sweep.
    pub total: usize,
    /// The lowest BIC among the full-data fits finished so far, and its candidate.
    pub best_so_far: Option<(Choice, f64)>,
    /// Candidates whose every fit (all folds and restarts, and the full-data fit) has
    /// finished, in the order they finished.
    pub finished: Vec<Choice>,
}

/// Runs `run(i)` for every `i` in `order` (most expensive first), calling `done(i, &result)` as
/// each finishes. Stops taking new work once `cancel` is set; unrun tasks come back `None`.
pub(crate) fn run_all<T, R, D>(
    order: &[usize],
    total: usize,
    run: R,
    done: D,
    cancel: &AtomicBool,
) -> Vec<Option<T>>
where
    T: Send,
    R: Fn(usize) -> T + Sync,
    D: Fn(usize, &T) + Sync,
{
    let slots: Vec<Mutex<Option<T>>> = (0..total).map(|_| Mutex::new(None)).collect();
    let next = AtomicUsize::new(0);
    let workers = rayon::current_num_threads().max(1);
    rayon::scope(|s| {
        for _ in 0..workers {
            s.spawn(|_| {
                loop {
                    if cancel.load(Ordering::Relaxed) {
                        break;
                    }
                    let i = next.fetch_add(1, Ordering::Relaxed);
                    let Some(&task) = order.get(i) else { break };
                    let result = run(task);
                    done(task, &result);
                    *slots[task]
                        .lock()
                        .expect("no worker panics while holding a slot") = Some(result);
                }
            });
        }
    });
    slots
        .into_iter()
        .map(|m| m.into_inner().expect("slot lock not poisoned"))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_task_runs_once_and_lands_in_its_slot() {
        let order: Vec<usize> = (0..50).rev().collect();
        let count = AtomicUsize::new(0);
        let out = run_all(
            &order,
            50,
            |i| i * i,
            |_, _| {
                count.fetch_add(1, Ordering::Relaxed);
            },
            &AtomicBool::new(false),
        );
        assert_eq!(count.load(Ordering::Relaxed), 50);
        assert!(out.iter().enumerate().all(|(i, v)| *v == Some(i * i)));
    }

    #[test]
    fn cancelled_runs_take_no_new_work() {
        let out = run_all(&[0, 1, 2], 3, |i| i, |_, _| {}, &AtomicBool::new(true));
        assert!(out.iter().all(Option::is_none));
    }
}
