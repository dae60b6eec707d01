//! Durable operations in the store: each queued operation is claimed by exactly one worker
//! however many claim at once (on PostgreSQL with `FOR UPDATE SKIP LOCKED`), an operation whose
//! worker stopped sending heartbeats is queued again and finally failed with a reason, and a
//! cancel stops a queued one at once and a running one at its next heartbeat.

use crate::support::*;
use goalsmith::store::operations::{self, OpState};
use goalsmith::store::{self, Store};
use std::collections::HashSet;

async fn store_of(kind: Db, test: &str) -> Option<(Store, TestDb)> {
    let db = fresh_db(kind, test).await?;
    let store = Store::connect(&db.url).await.expect("connect");
    Some((store, db))
}

async fn exactly_once(kind: Db) {
    let Some((store, _db)) = store_of(kind, "operations_exactly_once").await else {
        return;
    };
    let team = store::teams::get_or_create_team(&store, "potting shed")
        .await
        .expect("team");
    let mut made = HashSet::new();
    for k in 0..60 {
        let id = operations::create(&store, &team.id, "track", &format!("{{\"k\":{k}}}"))
            .await
            .expect("create");
        made.insert(id);
    }
    // Four workers claim at once until nothing is left; each finishes what it claimed.
    let mut workers = Vec::new();
    for w in 0..4 {
        let store = store.clone();
        workers.push(tokio::spawn(async move {
            let worker = format!("worker {w}");
            let mut mine = Vec::new();
            while let Some(op) = operations::claim(&store, &worker).await.expect("claim") {
                assert_eq!(op.state, OpState::Running);
                assert_eq!(op.attempts, 1);
                assert!(
                    operations::finish(
                        &store,
                        &op.id,
                        &worker,
                        OpState::Succeeded,
                        Some("{}"),
                        None
                    )
                    .await
                    .expect("finish")
                );
                mine.push(op.id);
            }
            mine
        }));
    }
    let mut claimed = Vec::new();
    for w in workers {
        claimed.extend(w.await.expect("join"));
    }
    let unique: HashSet<String> = claimed.iter().cloned().collect();
    assert_eq!(
        claimed.len(),
        60,
        "every operation claimed once, none twice"
    );
    assert_eq!(unique, made);
    for id in &made {
        let op = operations::get(&store, &team.id, id)
            .await
            .expect("get")
            .expect("op");
        assert_eq!(op.state, OpState::Succeeded);
        assert_eq!(op.progress, 1.0);
    }
}

async fn stale_and_cancel(kind: Db) {
    let Some((store, _db)) = store_of(kind, "operations_stale").await else {
        return;
    };
    let team = store::teams::get_or_create_team(&store, "potting shed")
        .await
        .expect("team");
    let other = store::teams::get_or_create_team(&store, "seed room")
        .await
        .expect("team");
    let id = operations::create(&store, &team.id, "track", "{}")
        .await
        .expect("create");
    assert!(
        operations::get(&store, &other.id, &id)
            .await
            .expect("get")
            .is_none(),
        "team scoped"
    );
    let op = operations::claim(&store, "w1")
        .await
        .expect("claim")
        .expect("op");
    assert_eq!(op.id, id);
    assert_eq!(
        operations::heartbeat(&store, &id, "w1", 0.25, None)
            .await
            .expect("beat"),
        Some(false)
    );
    // w1 goes silent: past the stale time the operation is queued again and w2 takes it.
    let later = store::now_ms() + 60_000;
    assert_eq!(
        operations::recover_stale(&store, later, 3)
            .await
            .expect("recover"),
        (1, 0)
    );
    let again = operations::claim(&store, "w2")
        .await
        .expect("claim")
        .expect("op");
    assert_eq!((again.id.as_str(), again.attempts), (id.as_str(), 2));
    assert_eq!(again.progress, 0.25, "progress so far is kept");
    // w1 has lost it: its heartbeats and its finish change nothing.
    assert_eq!(
        operations::heartbeat(&store, &id, "w1", 0.5, Some("{\"x\":1}"))
            .await
            .expect("beat"),
        None
    );
    assert!(
        !operations::finish(&store, &id, "w1", OpState::Succeeded, Some("{}"), None)
            .await
            .expect("finish")
    );
    // w2 goes silent too, and the attempts are used up: failed, with the reason.
    assert_eq!(
        operations::recover_stale(&store, later, 2)
            .await
            .expect("recover"),
        (0, 1)
    );
    let failed = operations::get(&store, &team.id, &id)
        .await
        .expect("get")
        .expect("op");
    assert_eq!(failed.state, OpState::Failed);
    assert!(
        failed.error.as_deref().unwrap_or("").contains("stopped"),
        "{failed:?}"
    );
    assert!(
        operations::claim(&store, "w3")
            .await
            .expect("claim")
            .is_none()
    );

    // A queued operation is cancelled at once; a running one at its worker's next heartbeat.
    let queued = operations::create(&store, &team.id, "track", "{}")
        .await
        .expect("create");
    assert!(
        !operations::request_cancel(&store, &other.id, &queued)
            .await
            .expect("cancel")
    );
    assert!(
        operations::request_cancel(&store, &team.id, &queued)
            .await
            .expect("cancel")
    );
    let op = operations::get(&store, &team.id, &queued)
        .await
        .expect("get")
        .expect("op");
    assert_eq!(op.state, OpState::Cancelled);
    assert!(
        operations::claim(&store, "w4")
            .await
            .expect("claim")
            .is_none(),
        "never started"
    );
    let running = operations::create(&store, &team.id, "track", "{}")
        .await
        .expect("create");
    operations::claim(&store, "w4")
        .await
        .expect("claim")
        .expect("op");
    assert!(
        operations::request_cancel(&store, &team.id, &running)
            .await
            .expect("cancel")
    );
    assert_eq!(
        operations::heartbeat(&store, &running, "w4", 0.1, None)
            .await
            .expect("beat"),
        Some(true),
        "the worker hears of it"
    );
    assert!(
        operations::finish(&store, &running, "w4", OpState::Cancelled, None, None)
            .await
            .expect("finish")
    );
    // A cancelled operation whose worker died is not queued again.
    let dead = operations::create(&store, &team.id, "track", "{}")
        .await
        .expect("create");
    operations::claim(&store, "w5")
        .await
        .expect("claim")
        .expect("op");
    assert!(
        operations::request_cancel(&store, &team.id, &dead)
            .await
            .expect("cancel")
    );
    assert_eq!(
        operations::recover_stale(&store, later, 3)
            .await
            .expect("recover"),
        (0, 1)
    );
    let op = operations::get(&store, &team.id, &dead)
        .await
        .expect("get")
        .expect("op");
    assert_eq!((op.state, op.error), (OpState::Cancelled, None));
}

#[tokio::test(flavor = "multi_thread", worker_threads = 4)]
async fn claimed_exactly_once_sqlite() {
    exactly_once(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 4)]
async fn claimed_exactly_once_postgres() {
    exactly_once(Db::Postgres).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn stale_and_cancelled_sqlite() {
    stale_and_cancel(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn stale_and_cancelled_postgres() {
    stale_and_cancel(Db::Postgres).await;
}
