//! [`SqliteStore`]: the embedded store — `DATA_DIR/mixgauge.sqlite3` (bundled SQLite, no system
//! library) for metadata and jobs, `DATA_DIR/datasets/<sha256>` for uploaded bytes.
//!
//! One connection behind a mutex; every call runs on `spawn_blocking` so the async runtime never
//! waits on disk. Schema changes are numbered migrations recorded in the `migrations` table and
//! applied in order at open. Dataset files are written to a temporary file in the same
//! directory and renamed into place, so a reader never sees a half-written file.

use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::time::{SystemTime, UNIX_EPOCH};

use async_trait::async_trait;
use rusqlite::{Connection, OptionalExtension, Row, params};

use super::{
    CreateOutcome, DatasetRecord, DeleteOutcome, Finish, JobProgress, JobState, LocalQueue,
    NewSweep, PutOutcome, Store, SweepJob,
};
use crate::error::StoreError;

/// Numbered schema migrations; entry `i` is version `i + 1`. Append only.
const MIGRATIONS: &[&str] = &[
    r#"
CREATE TABLE datasets (
    id TEXT PRIMARY KEY,
    sha256 TEXT NOT NULL UNIQUE,
    rows INTEGER NOT NULL,
    columns INTEGER NOT NULL,
    column_names TEXT NOT NULL,
    format TEXT NOT NULL,
    created INTEGER NOT NULL
);
CREATE TABLE sweeps (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    dataset TEXT NOT NULL,
    settings TEXT NOT NULL,
    state TEXT NOT NULL,
    done INTEGER NOT NULL DEFAULT 0,
    total INTEGER NOT NULL DEFAULT 0,
    result TEXT,
    report TEXT,
    error TEXT,
    requeues INTEGER NOT NULL DEFAULT 0,
    cancel_requested INTEGER NOT NULL DEFAULT 0,
    idempotency_key TEXT UNIQUE,
    request_hash TEXT NOT NULL,
    created INTEGER NOT NULL,
    updated INTEGER NOT NULL
);
CREATE INDEX sweeps_by_state ON sweeps (state, id);
CREATE INDEX sweeps_by_dataset ON sweeps (dataset, state);
"#,
    r#"
ALTER TABLE sweeps ADD COLUMN data TEXT NOT NULL DEFAULT '{}';
ALTER TABLE sweeps ADD COLUMN finished TEXT NOT NULL DEFAULT '[]';
ALTER TABLE datasets ADD COLUMN incomplete_rows INTEGER NOT NULL DEFAULT 0;
CREATE TABLE models (
    sweep INTEGER NOT NULL REFERENCES sweeps (id),
    covariance TEXT NOT NULL,
    components INTEGER NOT NULL,
    document TEXT NOT NULL,
    PRIMARY KEY (sweep, covariance, components)
);
"#,
    r#"
ALTER TABLE sweeps ADD COLUMN profile TEXT;
"#,
];

const JOB_COLUMNS: &str = "id, dataset, settings, state, done, total, result, error, requeues, created, updated, cancel_requested, data, finished";

/// The embedded SQLite store. Cheap to clone.
#[derive(Clone)]
pub struct SqliteStore {
    conn: Arc<Mutex<Connection>>,
    datasets: PathBuf,
}

fn now_ms() -> i64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map_or(0, |d| d.as_millis() as i64)
}

fn io(action: &'static str, path: &Path) -> impl FnOnce(std::io::Error) -> StoreError {
    let path = path.display().to_string();
    move |source| StoreError::Io {
        action,
        path,
        source,
    }
}

fn job_from_row(row: &Row<'_>) -> rusqlite::Result<(SweepJob, String)> {
    let state: String = row.get(3)?;
    Ok((
        SweepJob {
            id: row.get(0)?,
            dataset: row.get(1)?,
            settings: row.get(2)?,
            state: JobState::Queued,
            done: row.get::<_, i64>(4)? as u64,
            total: row.get::<_, i64>(5)? as u64,
            result: row.get(6)?,
            error: row.get(7)?,
            requeues: row.get::<_, i64>(8)? as u32,
            created: row.get(9)?,
            updated: row.get(10)?,
            cancel_requested: row.get::<_, i64>(11)? != 0,
            data: row.get(12)?,
            finished: row.get(13)?,
        },
        state,
    ))
}

fn finish_job((mut job, state): (SweepJob, String)) -> Result<SweepJob, StoreError> {
    job.state = JobState::parse(&state)?;
    Ok(job)
}

fn dataset_from_row(row: &Row<'_>) -> rusqlite::Result<(DatasetRecord, String)> {
    Ok((
        DatasetRecord {
            id: row.get(0)?,
            sha256: row.get(1)?,
            rows: row.get::<_, i64>(2)? as usize,
            columns: row.get::<_, i64>(3)? as usize,
            column_names: Vec::new(),
            format: row.get(5)?,
            created: row.get(6)?,
            incomplete_rows: row.get::<_, i64>(7)? as usize,
        },
        row.get(4)?,
    ))
}

fn finish_dataset((mut d, names): (DatasetRecord, String)) -> Result<DatasetRecord, StoreError> {
    d.column_names = serde_json::from_str(&names)
        .map_err(|e| StoreError::Corrupt(format!("column names of dataset {}: {e}", d.id)))?;
    Ok(d)
}

const DATASET_COLUMNS: &str =
    "id, sha256, rows, columns, column_names, format, created, incomplete_rows";

fn get_job(conn: &Connection, id: i64) -> Result<Option<SweepJob>, StoreError> {
    conn.query_row(
        &format!("SELECT {JOB_COLUMNS} FROM sweeps WHERE id = ?1"),
        [id],
        job_from_row,
    )
    .optional()?
    .map(finish_job)
    .transpose()
}

fn get_dataset_by(
    conn: &Connection,
    column: &str,
    value: &str,
) -> Result<Option<DatasetRecord>, StoreError> {
    conn.query_row(
        &format!("SELECT {DATASET_COLUMNS} FROM datasets WHERE {column} = ?1"),
        [value],
        dataset_from_row,
    )
    .optional()?
    .map(finish_dataset)
    .transpose()
}

/// Applies the migrations newer than the recorded version, each in its own transaction.
fn migrate(conn: &mut Connection) -> Result<(), StoreError> {
    conn.execute_batch(
        "CREATE TABLE IF NOT EXISTS migrations (version INTEGER PRIMARY KEY, applied INTEGER NOT NULL)",
    )?;
    let current: i64 = conn.query_row(
        "SELECT COALESCE(MAX(version), 0) FROM migrations",
        [],
        |r| r.get(0),
    )?;
    for (i, sql) in MIGRATIONS.iter().enumerate() {
        let version = i as i64 + 1;
        if version <= current {
            continue;
        }
        let tx = conn.transaction()?;
        tx.execute_batch(sql)?;
        tx.execute(
            "INSERT INTO migrations (version, applied) VALUES (?1, ?2)",
            params![version, now_ms()],
        )?;
        tx.commit()?;
    }
    Ok(())
}

impl SqliteStore {
    /// Opens (creating if needed) the store in `data_dir` and applies pending migrations.
    ///
    /// # Errors
    /// [`StoreError::Io`] if the directory cannot be created, [`StoreError::Sqlite`] if the
    /// database cannot be opened or migrated.
    pub fn open(data_dir: &Path) -> Result<Self, StoreError> {
        let datasets = data_dir.join("datasets");
        std::fs::create_dir_all(&datasets).map_err(io("create directory", &datasets))?;
        let mut conn = Connection::open(data_dir.join("mixgauge.sqlite3"))?;
        conn.execute_batch("PRAGMA journal_mode = WAL; PRAGMA busy_timeout = 5000;")?;
        migrate(&mut conn)?;
        Ok(SqliteStore {
            conn: Arc::new(Mutex::new(conn)),
            datasets,
        })
    }

    /// The schema version recorded in the database.
    pub async fn schema_version(&self) -> Result<i64, StoreError> {
        self.call(|c| Ok(c.query_row("SELECT MAX(version) FROM migrations", [], |r| r.get(0))?))
            .await
    }

    /// Runs `f` with the connection on the blocking pool.
    async fn call<T, F>(&self, f: F) -> Result<T, StoreError>
    where
        T: Send + 'static,
        F: FnOnce(&mut Connection) -> Result<T, StoreError> + Send + 'static,
    {
        let conn = Arc::clone(&self.conn);
        tokio::task::spawn_blocking(move || {
            let mut guard = conn
                .lock()
                .map_err(|_| StoreError::Task("connection lock poisoned".into()))?;
            f(&mut guard)
        })
        .await
        .map_err(|e| StoreError::Task(e.to_string()))?
    }

    fn file_of(&self, sha256: &str) -> PathBuf {
        self.datasets.join(sha256)
    }
}

#[async_trait]
impl Store for SqliteStore {
    async fn ping(&self) -> Result<(), StoreError> {
        self.call(|c| {
            Ok(c.query_row("SELECT 1", [], |r| r.get::<_, i64>(0))
                .map(|_| ())?)
        })
        .await
    }

    async fn put_dataset(
        &self,
        meta: DatasetRecord,
        bytes: Vec<u8>,
    ) -> Result<PutOutcome, StoreError> {
        let path = self.file_of(&meta.sha256);
        let dir = self.datasets.clone();
        self.call(move |c| {
            if let Some(existing) = get_dataset_by(c, "sha256", &meta.sha256)? {
                return Ok(PutOutcome::Existing(existing));
            }
            // The file first, then the row: a row never points at a missing file.
            let mut tmp = tempfile::NamedTempFile::new_in(&dir).map_err(io("create", &dir))?;
            std::io::Write::write_all(&mut tmp, &bytes).map_err(io("write", tmp.path()))?;
            tmp.as_file().sync_all().map_err(io("sync", &path))?;
            tmp.persist(&path)
                .map_err(|e| io("rename into", &path)(e.error))?;
            let names = serde_json::to_string(&meta.column_names)
                .map_err(|e| StoreError::Corrupt(e.to_string()))?;
            c.execute(
                &format!(
                    "INSERT INTO datasets ({DATASET_COLUMNS}) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)"
                ),
                params![
                    meta.id,
                    meta.sha256,
                    meta.rows as i64,
                    meta.columns as i64,
                    names,
                    meta.format,
                    meta.created,
                    meta.incomplete_rows as i64
                ],
            )?;
            Ok(PutOutcome::Created(meta))
        })
        .await
    }

    async fn get_dataset(&self, id: &str) -> Result<Option<DatasetRecord>, StoreError> {
        let id = id.to_string();
        self.call(move |c| get_dataset_by(c, "id", &id)).await
    }

    async fn dataset_bytes(&self, id: &str) -> Result<Option<Vec<u8>>, StoreError> {
        let Some(meta) = self.get_dataset(id).await? else {
            return Ok(None);
        };
        let path = self.file_of(&meta.sha256);
        tokio::fs::read(&path)
            .await
            .map(Some)
            .map_err(io("read", &path))
    }

    async fn list_datasets(
        &self,
        limit: usize,
        after: Option<String>,
    ) -> Result<Vec<DatasetRecord>, StoreError> {
        self.call(move |c| {
            let mut stmt = c.prepare(&format!(
                "SELECT {DATASET_COLUMNS} FROM datasets WHERE id > ?1 ORDER BY id LIMIT ?2"
            ))?;
            let rows = stmt
                .query_map(
                    params![after.unwrap_or_default(), limit as i64],
                    dataset_from_row,
                )?
                .collect::<Result<Vec<_>, _>>()?;
            rows.into_iter().map(finish_dataset).collect()
        })
        .await
    }

    async fn delete_dataset(&self, id: &str) -> Result<DeleteOutcome, StoreError> {
        let id = id.to_string();
        let dir = self.datasets.clone();
        self.call(move |c| {
            let tx = c.transaction()?;
            let Some(meta) = get_dataset_by(&tx, "id", &id)? else {
                return Ok(DeleteOutcome::NotFound);
            };
            let users = {
                let mut stmt = tx.prepare(
                    "SELECT id FROM sweeps WHERE dataset = ?1 AND state IN ('queued', 'running') ORDER BY id",
                )?;
                stmt.query_map([&id], |r| r.get::<_, i64>(0))?
                    .collect::<Result<Vec<_>, _>>()?
            };
            if !users.is_empty() {
                return Ok(DeleteOutcome::InUse(users));
            }
            tx.execute("DELETE FROM datasets WHERE id = ?1", [&id])?;
            tx.commit()?;
            let path = dir.join(&meta.sha256);
            match std::fs::remove_file(&path) {
                Ok(()) => Ok(DeleteOutcome::Deleted),
                Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(DeleteOutcome::Deleted),
                Err(e) => Err(io("remove", &path)(e)),
            }
        })
        .await
    }

    async fn create_sweep(&self, new: NewSweep) -> Result<CreateOutcome, StoreError> {
        self.call(move |c| {
            let tx = c.transaction()?;
            if let Some(key) = &new.idempotency_key {
                let earlier: Option<(i64, String)> = tx
                    .query_row(
                        "SELECT id, request_hash FROM sweeps WHERE idempotency_key = ?1",
                        [key],
                        |r| Ok((r.get(0)?, r.get(1)?)),
                    )
                    .optional()?;
                if let Some((id, hash)) = earlier {
                    if hash != new.request_hash {
                        return Ok(CreateOutcome::KeyConflict);
                    }
                    let job = get_job(&tx, id)?
                        .ok_or_else(|| StoreError::Corrupt(format!("sweep {id} vanished")))?;
                    return Ok(CreateOutcome::Existing(job));
                }
            }
            let now = now_ms();
            tx.execute(
                "INSERT INTO sweeps (dataset, settings, data, state, idempotency_key, request_hash, created, updated)
                 VALUES (?1, ?2, ?3, 'queued', ?4, ?5, ?6, ?6)",
                params![new.dataset, new.settings, new.data, new.idempotency_key, new.request_hash, now],
            )?;
            let id = tx.last_insert_rowid();
            let job = get_job(&tx, id)?
                .ok_or_else(|| StoreError::Corrupt(format!("sweep {id} vanished")))?;
            tx.commit()?;
            Ok(CreateOutcome::Created(job))
        })
        .await
    }

    async fn get_sweep(&self, id: i64) -> Result<Option<SweepJob>, StoreError> {
        self.call(move |c| get_job(c, id)).await
    }

    async fn list_sweeps(
        &self,
        limit: usize,
        after: Option<i64>,
    ) -> Result<Vec<SweepJob>, StoreError> {
        self.call(move |c| {
            let mut stmt = c.prepare(&format!(
                "SELECT {JOB_COLUMNS} FROM sweeps WHERE id > ?1 ORDER BY id LIMIT ?2"
            ))?;
            let rows = stmt
                .query_map(params![after.unwrap_or(0), limit as i64], job_from_row)?
                .collect::<Result<Vec<_>, _>>()?;
            rows.into_iter().map(finish_job).collect()
        })
        .await
    }

    async fn finish(&self, id: i64, how: Finish) -> Result<bool, StoreError> {
        self.call(move |c| {
            let (state, result, report, error, models, profile) = how.into_columns();
            // The result, the report and the models land together or not at all.
            let tx = c.transaction()?;
            let n = tx.execute(
                "UPDATE sweeps SET state = ?2, result = ?3, report = ?4, error = ?5, updated = ?6,
                 profile = ?7 WHERE id = ?1 AND state = 'running'",
                params![id, state, result, report, error, now_ms(), profile],
            )?;
            if n != 1 {
                return Ok(false);
            }
            {
                let mut insert = tx.prepare(
                    "INSERT OR REPLACE INTO models (sweep, covariance, components, document)
                     VALUES (?1, ?2, ?3, ?4)",
                )?;
                for m in &models {
                    insert.execute(params![id, m.covariance, m.components as i64, m.document])?;
                }
            }
            tx.commit()?;
            Ok(true)
        })
        .await
    }

    async fn request_cancel(&self, id: i64) -> Result<Option<JobState>, StoreError> {
        self.call(move |c| {
            let now = now_ms();
            c.execute(
                "UPDATE sweeps SET state = 'cancelled', cancel_requested = 1, updated = ?2
                 WHERE id = ?1 AND state = 'queued'",
                params![id, now],
            )?;
            c.execute(
                "UPDATE sweeps SET cancel_requested = 1, updated = ?2 WHERE id = ?1 AND state = 'running'",
                params![id, now],
            )?;
            Ok(get_job(c, id)?.map(|j| j.state))
        })
        .await
    }

    async fn report(&self, id: i64) -> Result<Option<String>, StoreError> {
        self.call(move |c| {
            Ok(
                c.query_row("SELECT report FROM sweeps WHERE id = ?1", [id], |r| {
                    r.get::<_, Option<String>>(0)
                })
                .optional()?
                .flatten(),
            )
        })
        .await
    }

    async fn profile(&self, id: i64) -> Result<Option<String>, StoreError> {
        self.call(move |c| {
            Ok(c.query_row(
                "SELECT profile FROM sweeps WHERE id = ?1 AND state = 'succeeded'",
                [id],
                |r| r.get::<_, Option<String>>(0),
            )
            .optional()?
            .flatten())
        })
        .await
    }

    async fn model(
        &self,
        id: i64,
        covariance: &str,
        components: usize,
    ) -> Result<Option<String>, StoreError> {
        let covariance = covariance.to_string();
        self.call(move |c| {
            Ok(c.query_row(
                "SELECT document FROM models WHERE sweep = ?1 AND covariance = ?2 AND components = ?3",
                params![id, covariance, components as i64],
                |r| r.get::<_, String>(0),
            )
            .optional()?)
        })
        .await
    }

    async fn count_by_state(&self) -> Result<Vec<(JobState, u64)>, StoreError> {
        self.call(|c| {
            let mut stmt = c.prepare("SELECT state, COUNT(*) FROM sweeps GROUP BY state")?;
            let rows = stmt
                .query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, i64>(1)?)))?
                .collect::<Result<Vec<_>, _>>()?;
            rows.into_iter()
                .map(|(s, n)| Ok((JobState::parse(&s)?, n as u64)))
                .collect()
        })
        .await
    }
}

#[async_trait]
impl LocalQueue for SqliteStore {
    async fn claim_next(&self) -> Result<Option<SweepJob>, StoreError> {
        self.call(|c| {
            // IMMEDIATE takes the write lock up front, so two claimers never get the same row.
            let tx = c.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
            let id: Option<i64> = tx
                .query_row(
                    "SELECT id FROM sweeps WHERE state = 'queued' ORDER BY id LIMIT 1",
                    [],
                    |r| r.get(0),
                )
                .optional()?;
            let Some(id) = id else { return Ok(None) };
            tx.execute(
                "UPDATE sweeps SET state = 'running', updated = ?2 WHERE id = ?1",
                params![id, now_ms()],
            )?;
            let job = get_job(&tx, id)?;
            tx.commit()?;
            Ok(job)
        })
        .await
    }

    async fn update_progress(&self, id: i64, p: JobProgress) -> Result<(), StoreError> {
        self.call(move |c| {
            c.execute(
                "UPDATE sweeps SET done = ?2, total = ?3, finished = ?4, updated = ?5
                 WHERE id = ?1 AND state = 'running'",
                params![id, p.done as i64, p.total as i64, p.finished, now_ms()],
            )?;
            Ok(())
        })
        .await
    }

    async fn hand_back(&self, id: i64) -> Result<bool, StoreError> {
        self.call(move |c| {
            let n = c.execute(
                "UPDATE sweeps SET state = CASE WHEN cancel_requested = 1 THEN 'cancelled' ELSE 'queued' END,
                        done = 0, finished = '[]', updated = ?2
                 WHERE id = ?1 AND state = 'running'",
                params![id, now_ms()],
            )?;
            Ok(n == 1)
        })
        .await
    }

    async fn requeue_running(&self) -> Result<usize, StoreError> {
        self.call(|c| {
            let tx = c.transaction()?;
            let now = now_ms();
            // A job whose cancel was asked for is not run again.
            tx.execute(
                "UPDATE sweeps SET state = 'cancelled', updated = ?1
                 WHERE state = 'running' AND cancel_requested = 1",
                [now],
            )?;
            let n = tx.execute(
                "UPDATE sweeps SET state = 'queued', requeues = requeues + 1, done = 0,
                        finished = '[]', updated = ?1
                 WHERE state = 'running'",
                [now],
            )?;
            tx.commit()?;
            Ok(n)
        })
        .await
    }
}
