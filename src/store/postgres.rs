//! The shared store: PostgreSQL, for any number of `serve` replicas. Each insert also
//! sends a `NOTIFY` on [`CHANNEL`] (delivered at commit) so that replicas wake their
//! long-polling readers.

use super::{HistoryQuery, Insertion, NewSnapshot, Revisions, Store, StoreError, StoredSnapshot, UnderlyingSummary};
use chrono::{DateTime, Utc};
use sqlx::postgres::{PgConnectOptions, PgPool, PgPoolOptions, PgRow};
use sqlx::Row;
use std::str::FromStr;
use std::time::Duration;

/// The notification channel announcing new snapshots (payload: the underlying).
pub const CHANNEL: &str = "logstrip_snapshots";
/// How long a request waits for a free connection before the store counts as unavailable.
const ACQUIRE_TIMEOUT: Duration = Duration::from_secs(3);
/// Connections per replica.
const MAX_CONNECTIONS: u32 = 10;

/// PostgreSQL implementation of [`Store`].
#[derive(Debug, Clone)]
pub struct PostgresStore {
    pool: PgPool,
    url: String,
}

/// `select_with_revisions!` over this store's columns.
macro_rules! with_revisions {
    ($columns:literal, $rest:literal) => {
        select_with_revisions!("as_of", "stored_at", $columns, $rest)
    };
}

fn snapshot_from_row(row: &PgRow, with_input: bool) -> Result<StoredSnapshot, StoreError> {
    let input = if with_input {
        Some((row.try_get::<String, _>("input_media_type")?, row.try_get::<String, _>("input")?))
    } else {
        None
    };
    Ok(StoredSnapshot {
        id: row.try_get("id")?,
        underlying: row.try_get("underlying")?,
        as_of: row.try_get("as_of")?,
        stored_at: row.try_get("stored_at")?,
        analysis: row.try_get("analysis")?,
        input,
        revision: i64::from(row.try_get::<i32, _>("revision")?),
        supersedes: row.try_get("supersedes")?,
        superseded_by: row.try_get("superseded_by")?,
    })
}

/// `url` without secret query parameters the driver does not take (`sslpassword`,
/// say): it would log their values when ignoring them. Each one dropped is logged by
/// name only. `password` is kept: the driver takes it.
fn without_unsupported_secrets(url: &str) -> String {
    let Ok(mut parsed) = url::Url::parse(url) else {
        return url.to_string();
    };
    if parsed.query().is_none() {
        return url.to_string();
    }
    let (kept, dropped): (Vec<_>, Vec<_>) = parsed
        .query_pairs()
        .map(|(k, v)| (k.into_owned(), v.into_owned()))
        .partition(|(k, _)| k == "password" || !super::is_secret_parameter(k));
    if dropped.is_empty() {
        return url.to_string();
    }
    for (key, _) in &dropped {
        tracing::warn!(%key, "ignoring a connect parameter the driver does not support (value not shown)");
    }
    if kept.is_empty() {
        parsed.set_query(None);
    } else {
        parsed.query_pairs_mut().clear().extend_pairs(kept);
    }
    parsed.to_string()
}

impl PostgresStore {
    /// Connects to and migrates the database at `url`.
    ///
    /// # Errors
    /// [`StoreError`] when the server cannot be reached or the schema not migrated.
    pub async fn open(url: &str) -> Result<Self, StoreError> {
        let options = PgConnectOptions::from_str(&without_unsupported_secrets(url))
            .map_err(|e| StoreError::Config(format!("{}: {e}", super::redact_url(url))))?;
        let pool = PgPoolOptions::new()
            .max_connections(MAX_CONNECTIONS)
            .acquire_timeout(ACQUIRE_TIMEOUT)
            .connect_with(options)
            .await?;
        sqlx::migrate!("./migrations/postgres").run(&pool).await?;
        Ok(Self { pool, url: url.to_string() })
    }

    /// The URL this store was opened with (for a notification listener).
    pub fn url(&self) -> &str {
        &self.url
    }
}

impl Store for PostgresStore {
    async fn insert(&self, s: NewSnapshot) -> Result<Insertion, StoreError> {
        let mut tx = self.pool.begin().await?;
        // Writers of one underlying and `as_of` queue on a lock held until commit; each
        // statement after it sees what the previous holder committed (read committed).
        // So the look-up below finds an identical snapshot stored a moment ago instead
        // of a failed insert using up a sequence value, and two corrections posted at
        // once get consecutive revisions.
        sqlx::query("SELECT pg_advisory_xact_lock(hashtextextended($1, $2))")
            .bind(&s.underlying)
            .bind(s.as_of.timestamp_micros())
            .execute(&mut *tx)
            .await?;
        let existing =
            sqlx::query(with_revisions!("", "WHERE s.underlying = $1 AND s.as_of = $2 AND s.content_sha256 = $3"))
                .bind(&s.underlying)
                .bind(s.as_of)
                .bind(&s.content_sha256)
                .fetch_optional(&mut *tx)
                .await?;
        if let Some(row) = existing {
            tx.commit().await?;
            return Ok(Insertion::found(&snapshot_from_row(&row, false)?));
        }
        let previous: Option<(i64, i32)> = sqlx::query_as(
            "SELECT id, revision FROM snapshots WHERE underlying = $1 AND as_of = $2 \
             ORDER BY revision DESC LIMIT 1",
        )
        .bind(&s.underlying)
        .bind(s.as_of)
        .fetch_optional(&mut *tx)
        .await?;
        let revision = previous.map_or(1, |(_, r)| r.saturating_add(1));
        let row = sqlx::query(
            "INSERT INTO snapshots (underlying, as_of, content_sha256, input_media_type, input, analysis, revision) \
             VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING id, stored_at",
        )
        .bind(&s.underlying)
        .bind(s.as_of)
        .bind(&s.content_sha256)
        .bind(&s.input_media_type)
        .bind(&s.input)
        .bind(&s.analysis)
        .bind(revision)
        .fetch_one(&mut *tx)
        .await?;
        sqlx::query("SELECT pg_notify($1, $2)").bind(CHANNEL).bind(&s.underlying).execute(&mut *tx).await?;
        tx.commit().await?;
        Ok(Insertion {
            id: row.try_get("id")?,
            stored_at: row.try_get("stored_at")?,
            created: true,
            revision: i64::from(revision),
            supersedes: previous.map(|(id, _)| id),
        })
    }

    async fn get(&self, id: i64, with_input: bool) -> Result<Option<StoredSnapshot>, StoreError> {
        let row = sqlx::query(with_revisions!("s.input_media_type, s.input,", "WHERE s.id = $1"))
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        row.map(|r| snapshot_from_row(&r, with_input)).transpose()
    }

    async fn latest(&self, underlying: &str) -> Result<Option<StoredSnapshot>, StoreError> {
        let row = sqlx::query(with_revisions!(
            "",
            "WHERE s.underlying = $1 AND next.id IS NULL ORDER BY s.as_of DESC LIMIT 1"
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
            "WHERE s.underlying = $1 AND s.as_of < $2 AND next.id IS NULL ORDER BY s.as_of DESC LIMIT 1"
        ))
        .bind(underlying)
        .bind(before)
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| snapshot_from_row(&r, false)).transpose()
    }

    async fn latest_id(&self, underlying: &str) -> Result<Option<i64>, StoreError> {
        Ok(sqlx::query_scalar(
            "SELECT id FROM snapshots WHERE underlying = $1 ORDER BY as_of DESC, revision DESC LIMIT 1",
        )
        .bind(underlying)
        .fetch_optional(&self.pool)
        .await?)
    }

    async fn underlyings(&self) -> Result<Vec<UnderlyingSummary>, StoreError> {
        // Revisions run 1, 2, ... without gaps, so the rows of revision 1 count the
        // valuation times.
        let rows = sqlx::query(
            "SELECT underlying, MAX(as_of) AS latest, COUNT(*) FILTER (WHERE revision = 1) AS n, \
             COUNT(*) FILTER (WHERE revision > 1) AS superseded \
             FROM snapshots GROUP BY underlying ORDER BY underlying",
        )
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                Ok(UnderlyingSummary {
                    underlying: r.try_get("underlying")?,
                    latest_as_of: r.try_get("latest")?,
                    snapshots: r.try_get("n")?,
                    superseded: r.try_get("superseded")?,
                })
            })
            .collect()
    }

    async fn history(&self, q: &HistoryQuery) -> Result<Vec<StoredSnapshot>, StoreError> {
        let rows = sqlx::query(with_revisions!(
            "",
            "WHERE s.underlying = $1 \
               AND ($2::timestamptz IS NULL OR s.as_of >= $2) \
               AND ($3::timestamptz IS NULL OR s.as_of < $3) \
               AND ($4::timestamptz IS NULL OR s.as_of > $4 OR (s.as_of = $4 AND s.id > $5)) \
               AND ($6::boolean OR next.id IS NULL) \
             ORDER BY s.as_of, s.id LIMIT $7"
        ))
        .bind(&q.underlying)
        .bind(q.from)
        .bind(q.to)
        .bind(q.after.map(|p| p.as_of))
        .bind(q.after.map(|p| p.id))
        .bind(q.revisions == Revisions::All)
        .bind(i64::from(q.limit))
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(|r| snapshot_from_row(r, false)).collect()
    }

    async fn ping(&self) -> Result<(), StoreError> {
        // What an insert needs: a connection, a writable database (not a standby) and
        // the table's ROW EXCLUSIVE lock, which `LOCK TABLE` or a migration holding a
        // stronger one would make it wait for. Taken with a short lock timeout, then
        // rolled back: nothing is written.
        let mut tx = self.pool.begin().await?;
        sqlx::query("SET LOCAL lock_timeout = '1s'").execute(&mut *tx).await?;
        sqlx::query("LOCK TABLE snapshots IN ROW EXCLUSIVE MODE").execute(&mut *tx).await?;
        tx.rollback().await?;
        Ok(())
    }
}

/// Listens on [`CHANNEL`] and calls `on_change` for every notification, until `stop`
/// turns `true`. Reconnects after a lost connection, calling `on_change` once more
/// then, since notifications sent meanwhile are lost.
pub async fn forward_notifications(url: &str, on_change: impl Fn(), mut stop: tokio::sync::watch::Receiver<bool>) {
    const RECONNECT_DELAY: Duration = Duration::from_secs(1);
    loop {
        let listener = async {
            let mut listener = sqlx::postgres::PgListener::connect(url).await?;
            listener.listen(CHANNEL).await?;
            Ok::<_, sqlx::Error>(listener)
        };
        match listener.await {
            Ok(mut listener) => {
                on_change();
                loop {
                    tokio::select! {
                        received = listener.try_recv() => match received {
                            Ok(Some(_)) => on_change(),
                            Ok(None) => {
                                tracing::warn!("notification connection lost; reconnecting");
                                on_change();
                            }
                            Err(e) => {
                                tracing::warn!(error = %e, "notification listener failed; reconnecting");
                                break;
                            }
                        },
                        _ = stop.wait_for(|down| *down) => return,
                    }
                }
            }
            Err(e) => tracing::warn!(error = %e, "cannot listen for store notifications; retrying"),
        }
        tokio::select! {
            _ = tokio::time::sleep(RECONNECT_DELAY) => {}
            _ = stop.wait_for(|down| *down) => return,
        }
    }
}
