//! The store contract against both implementations: a temporary SQLite file, and a
//! fresh database on the PostgreSQL server at `LOGSTRIP_TEST_POSTGRES_URL` (skipped,
//! saying so, when that is not set).

mod common;

use common::*;
use logstrip::store::AnyStore;

#[tokio::test]
async fn sqlite_store_keeps_the_contract() {
    let dir = tempfile::tempdir().expect("temp dir");
    let url = format!("sqlite://{}", dir.path().join("contract.db").display());
    let store = AnyStore::open(&url).await.expect("open");
    exercise_store(&store).await;
    match &store {
        AnyStore::Sqlite(s) => s.integrity_check().await.expect("integrity"),
        AnyStore::Postgres(_) => unreachable!(),
    }
    // Reopening runs the migrations again without harm and keeps the rows.
    drop(store);
    let reopened = AnyStore::open(&url).await.expect("reopen");
    assert_eq!(logstrip::store::Store::underlyings(&reopened).await.expect("list").len(), 3);
}

#[tokio::test]
async fn postgres_store_keeps_the_contract() {
    let Some(admin) = postgres_url("postgres_store_keeps_the_contract") else { return };
    let db = TempDatabase::create(&admin).await;
    let store = AnyStore::open(&db.url).await.expect("open");
    exercise_store(&store).await;
    drop(store);
    let reopened = AnyStore::open(&db.url).await.expect("reopen");
    assert_eq!(logstrip::store::Store::underlyings(&reopened).await.expect("list").len(), 3);
    drop(reopened);
    db.drop_now().await;
}

#[tokio::test]
async fn unknown_database_schemes_are_refused() {
    let err = AnyStore::open("mysql://localhost/x").await.expect_err("refused");
    assert!(err.to_string().contains("sqlite:// or postgres://"), "{err}");
}

/// Rows stored before revisions existed, several at one `as_of`, in this order of id:
/// (underlying, minute, content digest).
const EARLIER_ROWS: [(&str, u32, &str); 5] =
    [("ORIOLE", 10, "a"), ("HERON", 10, "e"), ("ORIOLE", 10, "b"), ("ORIOLE", 20, "c"), ("ORIOLE", 10, "d")];

fn minute(m: u32) -> chrono::DateTime<chrono::Utc> {
    use chrono::TimeZone;
    chrono::Utc.with_ymd_and_hms(2026, 11, 30, 15, m, 0).single().expect("time")
}

/// Only the first migration: the schema before revisions.
fn before_revisions(mut migrator: sqlx::migrate::Migrator) -> sqlx::migrate::Migrator {
    migrator.migrations =
        std::borrow::Cow::Owned(migrator.migrations.iter().filter(|m| m.version == 1).cloned().collect());
    assert_eq!(migrator.migrations.len(), 1);
    migrator
}

/// After the migration, the rows of [`EARLIER_ROWS`] (ids 1 to 5) are revisions in id
/// order: ORIOLE at minute 10 has 1, 3, 5 as revisions 1, 2, 3, and the next post
/// there is revision 4.
async fn earlier_rows_are_numbered(store: &AnyStore) {
    use logstrip::store::{HistoryQuery, NewSnapshot, Revisions, Store};
    let standing = |id: i64| async move {
        let s = store.get(id, false).await.expect("get").expect("kept");
        (s.revision, s.supersedes, s.superseded_by)
    };
    assert_eq!(standing(1).await, (1, None, Some(3)));
    assert_eq!(standing(3).await, (2, Some(1), Some(5)));
    assert_eq!(standing(5).await, (3, Some(3), None));
    assert_eq!(standing(2).await, (1, None, None));
    assert_eq!(standing(4).await, (1, None, None));
    let history = |revisions| HistoryQuery {
        underlying: "ORIOLE".into(),
        from: None,
        to: None,
        after: None,
        limit: 100,
        revisions,
    };
    let ids = |rows: Vec<logstrip::store::StoredSnapshot>| rows.iter().map(|s| s.id).collect::<Vec<_>>();
    assert_eq!(ids(store.history(&history(Revisions::Current)).await.expect("history")), vec![5, 4]);
    assert_eq!(ids(store.history(&history(Revisions::All)).await.expect("history")), vec![1, 3, 5, 4]);
    let counts: Vec<(String, i64, i64)> = store
        .underlyings()
        .await
        .expect("list")
        .into_iter()
        .map(|u| (u.underlying, u.snapshots, u.superseded))
        .collect();
    assert_eq!(counts, vec![("HERON".to_string(), 1, 0), ("ORIOLE".to_string(), 2, 2)]);
    let next = store
        .insert(NewSnapshot::new("ORIOLE".into(), minute(10), "f".into(), "application/json", "{}".into(), "{}".into()))
        .await
        .expect("insert");
    assert_eq!((next.id, next.revision, next.supersedes), (6, 4, Some(5)));
}

#[tokio::test]
async fn sqlite_migration_numbers_earlier_corrections_as_revisions() {
    use sqlx::sqlite::{SqliteConnectOptions, SqlitePool};
    use std::str::FromStr;
    let dir = tempfile::tempdir().expect("temp dir");
    let url = format!("sqlite://{}", dir.path().join("before.db").display());
    let options = SqliteConnectOptions::from_str(&url).expect("url").create_if_missing(true);
    let pool = SqlitePool::connect_with(options).await.expect("open");
    before_revisions(sqlx::migrate!("./migrations/sqlite")).run(&pool).await.expect("first migration");
    for (underlying, m, digest) in EARLIER_ROWS {
        sqlx::query(
            "INSERT INTO snapshots (underlying, as_of_us, stored_at_us, content_sha256, input_media_type, input, analysis) \
             VALUES (?1, ?2, ?2, ?3, 'application/json', '{}', '{}')",
        )
        .bind(underlying)
        .bind(minute(m).timestamp_micros())
        .bind(digest)
        .execute(&pool)
        .await
        .expect("insert");
    }
    pool.close().await;
    let store = AnyStore::open(&url).await.expect("open and migrate");
    earlier_rows_are_numbered(&store).await;
}

#[tokio::test]
async fn postgres_migration_numbers_earlier_corrections_as_revisions() {
    use sqlx::Connection;
    let Some(admin) = postgres_url("postgres_migration_numbers_earlier_corrections_as_revisions") else { return };
    let db = TempDatabase::create(&admin).await;
    let mut conn = sqlx::PgConnection::connect(&db.url).await.expect("connect");
    before_revisions(sqlx::migrate!("./migrations/postgres")).run(&mut conn).await.expect("first migration");
    for (underlying, m, digest) in EARLIER_ROWS {
        sqlx::query(
            "INSERT INTO snapshots (underlying, as_of, content_sha256, input_media_type, input, analysis) \
             VALUES ($1, $2, $3, 'application/json', '{}', '{}')",
        )
        .bind(underlying)
        .bind(minute(m))
        .bind(digest)
        .execute(&mut conn)
        .await
        .expect("insert");
    }
    conn.close().await.expect("close");
    let store = AnyStore::open(&db.url).await.expect("open and migrate");
    earlier_rows_are_numbered(&store).await;
    drop(store);
    db.drop_now().await;
}

/// A value PostgreSQL's text type cannot hold (NUL) is the request's fault: the store
/// says `Refused` (the service answers 422 and counts no store error), not `Failed`.
/// SQLite keeps it. The service refuses such underlyings before the store; this is the
/// net below, for any other text.
#[tokio::test]
async fn a_nul_in_text_is_refused_by_postgres_not_a_failure() {
    use logstrip::store::{NewSnapshot, Store, StoreError};
    let record = || {
        NewSnapshot::new(
            "NUL\u{0}IN".to_string(),
            chrono::DateTime::from_timestamp(1_796_052_600, 0).expect("time"),
            "digest".into(),
            "text/csv",
            "a\u{0}b".into(),
            "{}".into(),
        )
    };
    let dir = tempfile::tempdir().expect("temp dir");
    let sqlite = AnyStore::open(&format!("sqlite://{}", dir.path().join("h.db").display())).await.expect("sqlite");
    assert!(sqlite.insert(record()).await.expect("SQLite keeps it").created);
    let Some(admin) = postgres_url("a_nul_in_text_is_refused_by_postgres_not_a_failure") else { return };
    let db = TempDatabase::create(&admin).await;
    let store = AnyStore::open(&db.url).await.expect("open");
    let inserted = store.insert(record()).await;
    assert!(matches!(inserted, Err(StoreError::Refused(_))), "expected Refused, got {inserted:?}");
    let read = store.latest("NUL\u{0}IN").await;
    assert!(matches!(read, Err(StoreError::Refused(_))), "a read with a NUL is refused too, got {read:?}");
    store.ping().await.expect("the store is fine afterwards");
    drop(store);
    db.drop_now().await;
}
