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
    assert_eq!(logstrip::store::Store::underlyings(&reopened).await.expect("list").len(), 2);
}

#[tokio::test]
async fn postgres_store_keeps_the_contract() {
    let Some(admin) = postgres_url("postgres_store_keeps_the_contract") else { return };
    let db = TempDatabase::create(&admin).await;
    let store = AnyStore::open(&db.url).await.expect("open");
    exercise_store(&store).await;
    drop(store);
    let reopened = AnyStore::open(&db.url).await.expect("reopen");
    assert_eq!(logstrip::store::Store::underlyings(&reopened).await.expect("list").len(), 2);
    drop(reopened);
    db.drop_now().await;
}

#[tokio::test]
async fn unknown_database_schemes_are_refused() {
    let err = AnyStore::open("mysql://localhost/x").await.expect_err("refused");
    assert!(err.to_string().contains("sqlite:// or postgres://"), "{err}");
}
