//! Store outage: with PostgreSQL reached through a TCP relay that the test cuts and
//! restores, writes get 503 with `Retry-After`, `/readyz` fails, computation-only
//! endpoints keep working, and the service recovers by itself. Needs
//! `LOGSTRIP_TEST_POSTGRES_URL` (skipped, saying so, without it). And readiness: a
//! store whose write lock another session holds is not ready (SQLite and PostgreSQL).

mod common;

use common::*;
use logstrip::store::AnyStore;
use reqwest::StatusCode;
use std::net::SocketAddr;
use std::time::Duration;
use tokio::net::{TcpListener, TcpStream};
use tokio::sync::watch;

/// Relays connections from `listener` to `target` until `cut` turns true, then closes
/// the listener and every relayed connection.
async fn relay(listener: TcpListener, target: SocketAddr, mut cut: watch::Receiver<bool>) {
    let connection_cut = cut.clone();
    loop {
        tokio::select! {
            accepted = listener.accept() => {
                let Ok((mut client, _)) = accepted else { continue };
                let mut cut_connection = connection_cut.clone();
                tokio::spawn(async move {
                    let Ok(mut server) = TcpStream::connect(target).await else { return };
                    tokio::select! {
                        _ = tokio::io::copy_bidirectional(&mut client, &mut server) => {}
                        _ = cut_connection.wait_for(|c| *c) => {}
                    }
                });
            }
            _ = cut.wait_for(|c| *c) => return,
        }
    }
}

fn start_relay(port: u16, target: SocketAddr) -> watch::Sender<bool> {
    let (cut_tx, cut_rx) = watch::channel(false);
    let listener = std::net::TcpListener::bind(("127.0.0.1", port)).expect("bind relay");
    listener.set_nonblocking(true).expect("nonblocking");
    let listener = TcpListener::from_std(listener).expect("tokio listener");
    tokio::spawn(relay(listener, target, cut_rx));
    cut_tx
}

#[tokio::test]
async fn store_outage_gives_503_and_the_service_recovers() {
    let Some(admin) = postgres_url("store_outage_gives_503_and_the_service_recovers") else { return };
    let db = TempDatabase::create(&admin).await;
    let target: SocketAddr = "127.0.0.1:5432".parse().expect("address");
    let port = std::net::TcpListener::bind("127.0.0.1:0").expect("free port").local_addr().expect("addr").port();
    let cut = start_relay(port, target);
    let relayed_url = format!("postgres://postgres@127.0.0.1:{port}/{}", db.name);
    let store = AnyStore::open(&relayed_url).await.expect("open through the relay");
    let server = start_with_store(store, open_settings(), None).await;
    let example = logstrip::api::examples::snapshot_example();
    let created = post_json(&server, "/v1/snapshots", example.to_string()).await;
    assert_eq!(created.status(), StatusCode::CREATED);

    cut.send(true).expect("cut the relay");
    tokio::time::sleep(Duration::from_millis(200)).await;
    let mut later = example.clone();
    later["as_of"] = serde_json::json!("2026-11-30T15:40:00Z");
    let refused = post_json(&server, "/v1/snapshots", later.to_string()).await;
    assert_eq!(refused.status(), StatusCode::SERVICE_UNAVAILABLE);
    assert_eq!(refused.headers()["retry-after"], "5");
    assert_eq!(refused.headers()["content-type"], "application/problem+json");
    let not_ready = server.client.get(server.url("/readyz")).send().await.expect("readyz");
    assert_eq!(not_ready.status(), StatusCode::SERVICE_UNAVAILABLE);
    let read = server.client.get(server.url("/v1/underlyings")).send().await.expect("read");
    assert_eq!(read.status(), StatusCode::SERVICE_UNAVAILABLE);
    let computed = post_json(&server, "/v1/analyze", later.to_string()).await;
    assert_eq!(computed.status(), StatusCode::OK, "analysis does not need the store");
    let metrics = server.client.get(server.url("/metrics")).send().await.expect("metrics").text().await.expect("text");
    assert!(metrics.contains("logstrip_store_errors_total{operation=\"insert\"}"), "{metrics}");

    // The store comes back: the service recovers without a restart.
    let _restored = start_relay(port, target);
    let mut recovered = false;
    for _ in 0..30 {
        if server.client.get(server.url("/readyz")).send().await.expect("readyz").status() == StatusCode::OK {
            recovered = true;
            break;
        }
        tokio::time::sleep(Duration::from_millis(500)).await;
    }
    assert!(recovered, "ready again within 15 s of the store's return");
    let stored = post_json(&server, "/v1/snapshots", later.to_string()).await;
    assert_eq!(stored.status(), StatusCode::CREATED);
    drop(server);
    db.drop_now().await;
}

/// `/readyz` checks what a write needs: with the SQLite write lock held by another
/// session, writes would wait, so the service is not ready; once it is released, ready.
#[tokio::test]
async fn readyz_fails_while_another_session_holds_the_sqlite_write_lock() {
    use sqlx::Connection;
    let server = start_sqlite(open_settings()).await;
    let path = server._dir.as_ref().expect("temp dir").path().join("history.db");
    assert_eq!(server.client.get(server.url("/readyz")).send().await.expect("readyz").status(), StatusCode::OK);
    let mut other = sqlx::SqliteConnection::connect(&format!("sqlite://{}", path.display())).await.expect("connect");
    sqlx::raw_sql("BEGIN IMMEDIATE").execute(&mut other).await.expect("take the write lock");
    let locked = server.client.get(server.url("/readyz")).send().await.expect("readyz");
    assert_eq!(locked.status(), StatusCode::SERVICE_UNAVAILABLE);
    assert_eq!(locked.headers()["retry-after"], "5");
    sqlx::raw_sql("ROLLBACK").execute(&mut other).await.expect("release");
    assert_eq!(server.client.get(server.url("/readyz")).send().await.expect("readyz").status(), StatusCode::OK);
}

/// The same on PostgreSQL: `LOCK TABLE snapshots` in another session makes inserts
/// wait, and `/readyz` says so; after the commit it is ready again.
#[tokio::test]
async fn readyz_fails_while_the_postgres_table_is_locked() {
    use sqlx::Connection;
    let Some(admin) = postgres_url("readyz_fails_while_the_postgres_table_is_locked") else { return };
    let db = TempDatabase::create(&admin).await;
    let store = AnyStore::open(&db.url).await.expect("open");
    let server = start_with_store(store, open_settings(), None).await;
    assert_eq!(server.client.get(server.url("/readyz")).send().await.expect("readyz").status(), StatusCode::OK);
    let mut other = sqlx::PgConnection::connect(&db.url).await.expect("connect");
    sqlx::raw_sql("BEGIN; LOCK TABLE snapshots IN ACCESS EXCLUSIVE MODE").execute(&mut other).await.expect("lock");
    let locked = server.client.get(server.url("/readyz")).send().await.expect("readyz");
    assert_eq!(locked.status(), StatusCode::SERVICE_UNAVAILABLE);
    sqlx::raw_sql("COMMIT").execute(&mut other).await.expect("release");
    assert_eq!(server.client.get(server.url("/readyz")).send().await.expect("readyz").status(), StatusCode::OK);
    let _ = other.close().await;
    drop(server);
    db.drop_now().await;
}
