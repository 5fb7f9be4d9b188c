//! [`Metrics`]: the counters behind `GET /metrics`, and their Prometheus text rendering
//! (exposition format 0.0.4). Counters are atomics updated on the hot path; job counts by
//! state and the queue depth are read from the store at scrape time, so they are right even
//! when another process shares the data directory.

use std::fmt::Write as _;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Duration;

use crate::store::JobState;

/// Upper bounds (seconds) of the sweep-duration histogram buckets.
const SWEEP_BUCKETS: [f64; 10] = [0.1, 0.5, 1.0, 5.0, 10.0, 30.0, 60.0, 300.0, 1800.0, 7200.0];

/// Status classes counted for HTTP responses.
const CLASSES: [&str; 5] = ["1xx", "2xx", "3xx", "4xx", "5xx"];

/// Process-wide counters. Share it in an `Arc`.
#[derive(Debug, Default)]
pub struct Metrics {
    upload_bytes: AtomicU64,
    uploads: AtomicU64,
    fits: AtomicU64,
    responses: [AtomicU64; 5],
    sweep_buckets: [AtomicU64; SWEEP_BUCKETS.len()],
    sweep_count: AtomicU64,
    /// Sum of sweep durations in microseconds (kept integral so it can be atomic).
    sweep_micros: AtomicU64,
}

impl Metrics {
    /// One dataset upload of `bytes` bytes was accepted.
    pub fn uploaded(&self, bytes: usize) {
        self.upload_bytes.fetch_add(bytes as u64, Ordering::Relaxed);
        self.uploads.fetch_add(1, Ordering::Relaxed);
    }

    /// `n` more EM fits finished.
    pub fn fits_done(&self, n: u64) {
        self.fits.fetch_add(n, Ordering::Relaxed);
    }

    /// A response with `status` was sent.
    pub fn responded(&self, status: u16) {
        let class = usize::from(status / 100).clamp(1, 5) - 1;
        self.responses[class].fetch_add(1, Ordering::Relaxed);
    }

    /// A sweep succeeded after `took`.
    pub fn sweep_took(&self, took: Duration) {
        let secs = took.as_secs_f64();
        for (bucket, bound) in self.sweep_buckets.iter().zip(SWEEP_BUCKETS) {
            if secs <= bound {
                bucket.fetch_add(1, Ordering::Relaxed);
            }
        }
        self.sweep_count.fetch_add(1, Ordering::Relaxed);
        self.sweep_micros
            .fetch_add(took.as_micros() as u64, Ordering::Relaxed);
    }

    /// The Prometheus text of these counters and of `jobs` (count per state).
    pub fn render(&self, jobs: &[(JobState, u64)]) -> String {
        let mut s = String::with_capacity(2048);
        let count = |state: JobState| {
            jobs.iter()
                .find(|(j, _)| *j == state)
                .map_or(0, |(_, n)| *n)
        };
        s.push_str("# HELP mixgauge_sweeps Sweep jobs in the store, by state.\n");
        s.push_str("# TYPE mixgauge_sweeps gauge\n");
        for state in [
            JobState::Queued,
            JobState::Running,
            JobState::Succeeded,
            JobState::Failed,
            JobState::Cancelled,
        ] {
            let _ = writeln!(
                s,
                "mixgauge_sweeps{{state=\"{}\"}} {}",
                state.as_str(),
                count(state)
            );
        }
        s.push_str("# HELP mixgauge_queue_depth Sweep jobs waiting for a worker.\n");
        s.push_str("# TYPE mixgauge_queue_depth gauge\n");
        let _ = writeln!(s, "mixgauge_queue_depth {}", count(JobState::Queued));
        s.push_str("# HELP mixgauge_sweep_duration_seconds Wall time of succeeded sweeps in this process.\n");
        s.push_str("# TYPE mixgauge_sweep_duration_seconds histogram\n");
        for (bucket, bound) in self.sweep_buckets.iter().zip(SWEEP_BUCKETS) {
            let _ = writeln!(
                s,
                "mixgauge_sweep_duration_seconds_bucket{{le=\"{bound}\"}} {}",
                bucket.load(Ordering::Relaxed)
            );
        }
        let total = self.sweep_count.load(Ordering::Relaxed);
        let _ = writeln!(
            s,
            "mixgauge_sweep_duration_seconds_bucket{{le=\"+Inf\"}} {total}"
        );
        let _ = writeln!(
            s,
            "mixgauge_sweep_duration_seconds_sum {}",
            self.sweep_micros.load(Ordering::Relaxed) as f64 / 1e6
        );
        let _ = writeln!(s, "mixgauge_sweep_duration_seconds_count {total}");
        for (name, help, value) in [
            (
                "mixgauge_fits_total",
                "EM fits finished by sweeps in this process.",
                &self.fits,
            ),
            (
                "mixgauge_upload_bytes_total",
                "Bytes of accepted dataset uploads.",
                &self.upload_bytes,
            ),
            (
                "mixgauge_uploads_total",
                "Accepted dataset uploads.",
                &self.uploads,
            ),
        ] {
            let _ = writeln!(s, "# HELP {name} {help}\n# TYPE {name} counter");
            let _ = writeln!(s, "{name} {}", value.load(Ordering::Relaxed));
        }
        s.push_str("# HELP mixgauge_http_responses_total HTTP responses, by status class.\n");
        s.push_str("# TYPE mixgauge_http_responses_total counter\n");
        for (n, class) in self.responses.iter().zip(CLASSES) {
            let _ = writeln!(
                s,
                "mixgauge_http_responses_total{{class=\"{class}\"}} {}",
                n.load(Ordering::Relaxed)
            );
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Buckets are cumulative (Prometheus histogram semantics): a 2 s sweep counts in every
    /// bucket from `le="5"` up, and in `+Inf`.
    #[test]
    fn histogram_buckets_are_cumulative() {
        let m = Metrics::default();
        m.sweep_took(Duration::from_secs(2));
        let text = m.render(&[(JobState::Queued, 3)]);
        assert!(
            text.contains("mixgauge_sweep_duration_seconds_bucket{le=\"1\"} 0\n"),
            "{text}"
        );
        assert!(
            text.contains("mixgauge_sweep_duration_seconds_bucket{le=\"5\"} 1\n"),
            "{text}"
        );
        assert!(text.contains("mixgauge_sweep_duration_seconds_bucket{le=\"+Inf\"} 1\n"));
        assert!(
            text.contains("mixgauge_sweep_duration_seconds_sum 2\n"),
            "{text}"
        );
        assert!(text.contains("mixgauge_queue_depth 3\n"));
        assert!(text.contains("mixgauge_sweeps{state=\"running\"} 0\n"));
    }
}
