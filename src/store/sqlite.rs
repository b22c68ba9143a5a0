//! The embedded store: one SQLite file in WAL mode with `synchronous=FULL`, so a
//! committed snapshot survives a crash of the process or the machine.

use super::{HistoryQuery, Insertion, NewSnapshot, Revisions, Store, StoreError, StoredSnapshot, UnderlyingSummary};
use chrono::{DateTime, Utc};
use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePool, SqlitePoolOptions, SqliteRow, SqliteSynchronous,
};
use sqlx::Row;
use std::str::FromStr;
use std::time::Duration;

/// How long a statement waits for another writer's lock before failing.
const BUSY_TIMEOUT: Duration = Duration::from_secs(5);
/// Pool size: one writer at a time in SQLite, a few readers beside it (WAL).
const MAX_CONNECTIONS: u32 = 4;

/// SQLite implementation of [`Store`].
#[derive(Debug, Clone)]
pub struct SqliteStore {
    pool: SqlitePool,
}

fn to_micros(t: DateTime<Utc>) -> i64 {
    t.timestamp_micros()
}

fn from_micros(us: i64) -> Result<DateTime<Utc>, StoreError> {
    DateTime::from_timestamp_micros(us).ok_or_else(|| StoreError::Failed(format!("stored time {us} out of range")))
}

/// `select_with_revisions!` over this store's columns.
macro_rules! with_revisions {
    ($columns:literal, $rest:literal) => {
        select_with_revisions!("as_of_us", "stored_at_us", $columns, $rest)
    };
}

fn snapshot_from_row(row: &SqliteRow, with_input: bool) -> Result<StoredSnapshot, StoreError> {
    let input = if with_input {
        Some((row.try_get::<String, _>("input_media_type")?, row.try_get::<String, _>("input")?))
    } else {
        None
    };
    Ok(StoredSnapshot {
        id: row.try_get("id")?,
        underlying: row.try_get("underlying")?,
        as_of: from_micros(row.try_get("as_of_us")?)?,
        stored_at: from_micros(row.try_get("stored_at_us")?)?,
        analysis: row.try_get("analysis")?,
        input,
        revision: row.try_get("revision")?,
        supersedes: row.try_get("supersedes")?,
        superseded_by: row.try_get("superseded_by")?,
    })
}

impl SqliteStore {
    /// Opens (creating if missing) and migrates the database at `url` (`sqlite://PATH`).
    ///
    /// # Errors
    /// [`StoreError`] when the file cannot be opened or migrated.
    pub async fn open(url: &str) -> Result<Self, StoreError> {
        let options = SqliteConnectOptions::from_str(url)
            .map_err(|e| StoreError::Config(format!("{url}: {e}")))?
            .create_if_missing(true)
            .journal_mode(SqliteJournalMode::Wal)
            .synchronous(SqliteSynchronous::Full)
            .foreign_keys(true)
            .busy_timeout(BUSY_TIMEOUT);
        let pool = SqlitePoolOptions::new()
            .max_connections(MAX_CONNECTIONS)
            .acquire_timeout(BUSY_TIMEOUT)
            .connect_with(options)
            .await?;
        sqlx::migrate!("./migrations/sqlite").run(&pool).await?;
        Ok(Self { pool })
    }

    /// Runs SQLite's own consistency check; `Ok(())` when it reports `ok`.
    ///
    /// # Errors
    /// [`StoreError::Failed`] with the report when the file is damaged.
    pub async fn integrity_check(&self) -> Result<(), StoreError> {
        let report: String = sqlx::query_scalar("PRAGMA integrity_check").fetch_one(&self.pool).await?;
        if report == "ok" {
            Ok(())
        } else {
            Err(StoreError::Failed(format!("integrity check: {report}")))
        }
    }
}

impl Store for SqliteStore {
    async fn insert(&self, s: NewSnapshot) -> Result<Insertion, StoreError> {
        // `BEGIN IMMEDIATE` takes the write lock before the look-up, so no other writer
        // stores a revision of the same valuation time in between.
        let mut tx = self.pool.begin_with("BEGIN IMMEDIATE").await?;
        let as_of_us = to_micros(s.as_of);
        let existing =
            sqlx::query(with_revisions!("", "WHERE s.underlying = ?1 AND s.as_of_us = ?2 AND s.content_sha256 = ?3"))
                .bind(&s.underlying)
                .bind(as_of_us)
                .bind(&s.content_sha256)
                .fetch_optional(&mut *tx)
                .await?;
        if let Some(row) = existing {
            tx.commit().await?;
            return Ok(Insertion::found(&snapshot_from_row(&row, false)?));
        }
        let previous: Option<(i64, i64)> = sqlx::query_as(
            "SELECT id, revision FROM snapshots WHERE underlying = ?1 AND as_of_us = ?2 \
             ORDER BY revision DESC LIMIT 1",
        )
        .bind(&s.underlying)
        .bind(as_of_us)
        .fetch_optional(&mut *tx)
        .await?;
        let revision = previous.map_or(1, |(_, r)| r + 1);
        let stored_at_us = to_micros(Utc::now());
        let id: i64 = sqlx::query_scalar(
            "INSERT INTO snapshots \
             (underlying, as_of_us, stored_at_us, content_sha256, input_media_type, input, analysis, revision) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8) RETURNING id",
        )
        .bind(&s.underlying)
        .bind(as_of_us)
        .bind(stored_at_us)
        .bind(&s.content_sha256)
        .bind(&s.input_media_type)
        .bind(&s.input)
        .bind(&s.analysis)
        .bind(revision)
        .fetch_one(&mut *tx)
        .await?;
        tx.commit().await?;
        Ok(Insertion {
            id,
            stored_at: from_micros(stored_at_us)?,
            created: true,
            revision,
            supersedes: previous.map(|(id, _)| id),
        })
    }

    async fn get(&self, id: i64, with_input: bool) -> Result<Option<StoredSnapshot>, StoreError> {
        let row = sqlx::query(with_revisions!("s.input_media_type, s.input,", "WHERE s.id = ?1"))
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        row.map(|r| snapshot_from_row(&r, with_input)).transpose()
    }

    async fn latest(&self, underlying: &str) -> Result<Option<StoredSnapshot>, StoreError> {
        let row = sqlx::query(with_revisions!(
            "",
            "WHERE s.underlying = ?1 AND next.id IS NULL ORDER BY s.as_of_us DESC LIMIT 1"
        ))
        .bind(underlying)
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| snapshot_from_row(&r, false)).transpose()
    }

    async fn latest_before(
        &self,
        underlying: &str,
        before: DateTime<Utc>,
    ) -> Result<Option<StoredSnapshot>, StoreError> {
        let row = sqlx::query(with_revisions!(
            "",
            "WHERE s.underlying = ?1 AND s.as_of_us < ?2 AND next.id IS NULL ORDER BY s.as_of_us DESC LIMIT 1"
        ))
        .bind(underlying)
        .bind(to_micros(before))
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| snapshot_from_row(&r, false)).transpose()
    }

    async fn latest_id(&self, underlying: &str) -> Result<Option<i64>, StoreError> {
        Ok(sqlx::query_scalar(
            "SELECT id FROM snapshots WHERE underlying = ?1 ORDER BY as_of_us DESC, revision DESC LIMIT 1",
        )
        .bind(underlying)
        .fetch_optional(&self.pool)
        .await?)
    }

    async fn underlyings(&self) -> Result<Vec<UnderlyingSummary>, StoreError> {
        // Revisions run 1, 2, ... without gaps, so the rows of revision 1 count the
        // valuation times.
        let rows = sqlx::query(
            "SELECT underlying, MAX(as_of_us) AS latest_us, SUM(revision = 1) AS n, SUM(revision > 1) AS superseded \
             FROM snapshots GROUP BY underlying ORDER BY underlying",
        )
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                Ok(UnderlyingSummary {
                    underlying: r.try_get("underlying")?,
                    latest_as_of: from_micros(r.try_get("latest_us")?)?,
                    snapshots: r.try_get("n")?,
                    superseded: r.try_get("superseded")?,
                })
            })
            .collect()
    }

    async fn history(&self, q: &HistoryQuery) -> Result<Vec<StoredSnapshot>, StoreError> {
        let rows = sqlx::query(with_revisions!(
            "",
            "WHERE s.underlying = ?1 \
               AND (?2 IS NULL OR s.as_of_us >= ?2) \
               AND (?3 IS NULL OR s.as_of_us < ?3) \
               AND (?4 IS NULL OR s.as_of_us > ?4 OR (s.as_of_us = ?4 AND s.id > ?5)) \
               AND (?6 OR next.id IS NULL) \
             ORDER BY s.as_of_us, s.id LIMIT ?7"
        ))
        .bind(&q.underlying)
        .bind(q.from.map(to_micros))
        .bind(q.to.map(to_micros))
        .bind(q.after.map(|p| to_micros(p.as_of)))
        .bind(q.after.map(|p| p.id))
        .bind(q.revisions == Revisions::All)
        .bind(i64::from(q.limit))
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(|r| snapshot_from_row(r, false)).collect()
    }

    async fn ping(&self) -> Result<(), StoreError> {
        // What an insert needs: the database's write lock (`BEGIN IMMEDIATE`, as
        // `insert` takes it), which another writer holding it makes us wait for.
        // Rolled back at once: nothing is written.
        let tx = self.pool.begin_with("BEGIN IMMEDIATE").await?;
        tx.rollback().await?;
        Ok(())
    }
}
