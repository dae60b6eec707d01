//! Secrets shared by every process on one database (`server_secrets`).

use super::{Result, Store, StoreError};

/// The 32-byte secret called `name`: the one already stored, or a fresh random one that this
/// call stores. Two processes starting at once both end with the same value: the insert of the
/// one that comes second does nothing, and both read the row back.
pub async fn shared_key(store: &Store, name: &str) -> Result<[u8; 32]> {
    let mut fresh = [0u8; 32];
    getrandom::fill(&mut fresh).map_err(|e| StoreError::Corrupt(format!("no randomness: {e}")))?;
    sqlx::query(
        "INSERT INTO server_secrets (name, value) VALUES ($1, $2) ON CONFLICT (name) DO NOTHING",
    )
    .bind(name)
    .bind(hex::encode(fresh))
    .execute(store.pool())
    .await?;
    let stored: String = sqlx::query_scalar("SELECT value FROM server_secrets WHERE name = $1")
        .bind(name)
        .fetch_one(store.pool())
        .await?;
    let mut key = [0u8; 32];
    hex::decode_to_slice(stored.trim(), &mut key)
        .map_err(|_| StoreError::Corrupt(format!("server secret {name:?} is not 32 hex bytes")))?;
    Ok(key)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Two processes on one database (two stores on one file here) end with one key, and a
    /// second name gets a key of its own.
    #[tokio::test]
    async fn every_store_on_a_database_reads_the_same_key() {
        let dir = tempfile::tempdir().expect("temp dir");
        let url = format!("sqlite://{}?mode=rwc", dir.path().join("t.db").display());
        let a = Store::connect(&url).await.expect("store");
        let b = Store::connect(&url).await.expect("store");
        let (ka, kb) = tokio::join!(shared_key(&a, "form"), shared_key(&b, "form"));
        let (ka, kb) = (ka.expect("key a"), kb.expect("key b"));
        assert_eq!(ka, kb);
        assert_eq!(shared_key(&a, "form").await.expect("again"), ka, "stable");
        assert_ne!(shared_key(&a, "other").await.expect("other"), ka);
    }
}
