-- Secrets every server process on this database shares: the key that signs pre-session form
-- tokens (the sign-in and welcome forms), so a form served by one process can be posted to
-- another behind a load balancer. Made once, by whichever process starts first; never copied
-- by `goalsmith copy` (a new database gets keys of its own).
CREATE TABLE server_secrets (
    name        TEXT PRIMARY KEY,
    value       TEXT NOT NULL
);
