-- Long work (tracking, reward fits, large exports) as durable operations. Any server process
-- sharing the database may claim a queued one (on PostgreSQL with FOR UPDATE SKIP LOCKED, on
-- SQLite under its single writer); the claimer sends heartbeats, and an operation whose
-- heartbeats stop is queued again or failed with a reason, so none stays running for ever.
CREATE TABLE operations (
    id                TEXT PRIMARY KEY,
    team_id           TEXT NOT NULL REFERENCES teams (id),
    kind              TEXT NOT NULL,
    state             TEXT NOT NULL,
    -- what to do, as JSON; the work reads everything else from the database
    input             TEXT NOT NULL,
    progress          DOUBLE PRECISION NOT NULL,
    result            TEXT,
    error             TEXT,
    worker            TEXT,
    heartbeat_at      BIGINT,
    attempts          BIGINT NOT NULL,
    cancel_requested  BIGINT NOT NULL,
    created_at        BIGINT NOT NULL,
    started_at        BIGINT,
    finished_at       BIGINT,
    CONSTRAINT operations_state_check
        CHECK (state IN ('queued', 'running', 'succeeded', 'failed', 'cancelled'))
);
CREATE INDEX operations_claim_idx ON operations (state, created_at);
CREATE INDEX operations_team_idx ON operations (team_id, created_at);
