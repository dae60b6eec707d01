//! Recently read revisions, bounded by bytes. A revision is immutable and never deleted or
//! moved to another team, so a cached row is always right; the cache keeps the team it
//! belongs to and serves it only to that team (any other team gets the same 404 as from the
//! database). It saves the database round trip of the most frequent read a planner makes:
//! `GET …/revisions/{n}` and the revision lookup before every cost evaluation.

use super::byte_lru::ByteLru;
use crate::store::goals::RevisionRow;
use std::sync::{Arc, Mutex};

/// Default budget: 32 MiB of documents (goal documents are a few kB; the largest allowed are
/// a few MB, and one larger than the budget is simply not kept); `Limits` has the same
/// default for the server.
pub const DEFAULT_BYTES: usize = 32 << 20;

type Key = (String, i64);
/// The owning team's id and the row.
type Entry = (Arc<str>, Arc<RevisionRow>);

/// The cache: (goal id, revision) → (team id, row).
pub struct RevisionCache {
    inner: Mutex<ByteLru<Key, Entry>>,
}

impl RevisionCache {
    /// A cache that holds at most `bytes` of rows (documents and metadata).
    pub fn with_budget(bytes: usize) -> Self {
        Self {
            inner: Mutex::new(ByteLru::new(bytes)),
        }
    }

    /// The row of revision `n` of `goal_id` when it is cached and belongs to `team_id`.
    pub fn get(&self, team_id: &str, goal_id: &str, n: i64) -> Option<Arc<RevisionRow>> {
        let mut inner = self.inner.lock().ok()?;
        let (team, row) = inner.get(&(goal_id.to_string(), n))?;
        (&*team == team_id).then_some(row)
    }

    /// Keeps `row`, which belongs to `team_id`.
    pub fn put(&self, team_id: &str, row: Arc<RevisionRow>) {
        let size = row.document.len()
            + row.name.len()
            + row.note.len()
            + row.author.len()
            + row.goal_id.len()
            + row.frame_id.len()
            + row.sha256.len()
            + team_id.len()
            + 160;
        if let Ok(mut inner) = self.inner.lock() {
            inner.put(
                (row.goal_id.clone(), row.revision),
                (Arc::from(team_id), row),
                size,
            );
        }
    }

    /// Bytes held now.
    pub fn bytes(&self) -> usize {
        self.inner.lock().map_or(0, |i| i.bytes())
    }
}

impl Default for RevisionCache {
    fn default() -> Self {
        Self::with_budget(DEFAULT_BYTES)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(goal: &str, n: i64, doc: &str) -> Arc<RevisionRow> {
        Arc::new(RevisionRow {
            goal_id: goal.into(),
            revision: n,
            frame_id: "f".into(),
            name: "tray".into(),
            sha256: "s".into(),
            author: "a".into(),
            note: String::new(),
            override_safety: false,
            document: doc.into(),
            created_at: 0,
        })
    }

    #[test]
    fn serves_only_the_owning_team_and_stays_in_budget() {
        let c = RevisionCache::with_budget(1000);
        c.put("team a", row("g1", 1, "{}"));
        assert!(c.get("team a", "g1", 1).is_some());
        assert!(
            c.get("team b", "g1", 1).is_none(),
            "another team's revision is not served"
        );
        assert!(c.get("team a", "g1", 2).is_none());
        for k in 0..50 {
            c.put("team a", row(&format!("g{k}"), 1, &"x".repeat(100)));
            assert!(c.bytes() <= 1000);
        }
        c.put("team a", row("huge", 1, &"x".repeat(5000)));
        assert!(
            c.get("team a", "huge", 1).is_none(),
            "larger than the budget: not kept"
        );
    }
}
