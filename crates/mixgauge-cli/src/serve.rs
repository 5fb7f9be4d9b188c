//! `mixgauge serve`: the HTTP service on the embedded store, configured from flags and
//! environment variables.

use std::time::Duration;

use mixgauge_service::{DataOptions, Limits, Preload, ReadLimits, ServeConfig};
use serde_json::json;

use crate::args::ServeArgs;
use crate::demo;
use crate::failure::{Failure, io};

/// Reads the access tokens, builds the limits and the demo preload, and serves until SIGTERM
/// or Ctrl-C.
pub fn run(a: ServeArgs) -> Result<(), Failure> {
    let mut tokens = Vec::new();
    if let Some(path) = &a.token_file {
        let text = std::fs::read_to_string(path).map_err(|e| io("read token file", path, e))?;
        let from_file: Vec<String> = text
            .lines()
            .map(str::trim)
            .filter(|l| !l.is_empty() && !l.starts_with('#'))
            .map(String::from)
            .collect();
        if from_file.is_empty() {
            return Err(Failure::Input(format!(
                "{} holds no token; put one token per line, or leave out --token-file",
                path.display()
            )));
        }
        tokens.extend(from_file);
    }
    if let Ok(text) = std::env::var("MIXGAUGE_TOKENS") {
        tokens.extend(
            text.split(',')
                .map(str::trim)
                .filter(|t| !t.is_empty())
                .map(String::from),
        );
    }
    if let Some(short) = tokens.iter().find(|t| t.len() < 16) {
        return Err(Failure::Input(format!(
            "a token of {} characters is too easy to guess; use at least 16 (e.g. `openssl rand -hex 24`)",
            short.len()
        )));
    }
    let preload = a.demo.then(|| Preload {
        bytes: demo::csv().into_bytes(),
        format: mixgauge_data::Format::Csv,
        // The same sweep as `mixgauge demo`, so both show the same result.
        settings: json!({ "components": demo::DEMO_COMPONENTS })
            .as_object()
            .cloned()
            .unwrap_or_default(),
        data: DataOptions {
            labels: Some("regime".into()),
            ..Default::default()
        },
    });
    if a.demo {
        eprintln!(
            "demo: {} rows of invented refrigerated-trailer telemetry are queued for a sweep; open http://{}/ to watch it",
            demo::DEMO_ROWS,
            a.listen
        );
    }
    mixgauge_service::run(ServeConfig {
        listen: a.listen,
        data_dir: a.data_dir,
        workers: a.workers,
        store: a.store,
        blobs: a.blobs,
        limits: Limits {
            upload_bytes: a.max_upload_bytes,
            read: ReadLimits {
                rows: a.max_rows,
                columns: a.max_columns,
            },
            candidates: a.max_candidates,
            request_timeout: Duration::from_secs(a.request_timeout.max(1)),
        },
        tokens,
        cors_origins: a.cors_origins,
        preload,
    })
    .map_err(|e| Failure::Other(format!("{e:#}")))
}

/// `mixgauge worker`.
pub fn work(a: crate::args::WorkerArgs) -> Result<(), Failure> {
    if !(a.lease.is_finite() && a.lease >= 1.0) {
        return Err(Failure::Other(format!(
            "--lease {} is too short; give at least 1 second (30 is a good start)",
            a.lease
        )));
    }
    mixgauge_service::run_worker(mixgauge_service::WorkerConfig {
        store: a.store,
        blobs: a.blobs,
        cache: a.cache,
        lease: Duration::from_secs_f64(a.lease),
        name: a.name.unwrap_or_else(mixgauge_service::worker_name),
        health_listen: a.health_listen,
        loops: a.loops.max(1),
    })
    .map_err(|e| Failure::Other(format!("{e:#}")))
}
