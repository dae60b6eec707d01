-- Portable across SQLite and PostgreSQL through sqlx's Any driver:
-- ids TEXT (UUIDs), times BIGINT (unix milliseconds), JSON as TEXT, booleans INTEGER 0/1,
-- blobs BYTEA (SQLite keeps them as-is), every integer BIGINT (so both decode as i64). Constraint names are stable: the store maps them
-- to field errors.

CREATE TABLE teams (
    id          TEXT PRIMARY KEY,
    name        TEXT NOT NULL,
    created_at  BIGINT NOT NULL,
    CONSTRAINT teams_name_key UNIQUE (name)
);

-- Only the SHA-256 of a token is stored; the token itself is shown once.
CREATE TABLE tokens (
    id          TEXT PRIMARY KEY,
    team_id     TEXT NOT NULL REFERENCES teams (id),
    token_hash  TEXT NOT NULL,
    role        TEXT NOT NULL,
    label       TEXT NOT NULL,
    created_at  BIGINT NOT NULL,
    revoked_at  BIGINT,
    CONSTRAINT tokens_hash_key UNIQUE (token_hash),
    CONSTRAINT tokens_role_check CHECK (role IN ('viewer', 'editor', 'owner'))
);
CREATE INDEX tokens_team_idx ON tokens (team_id);

CREATE TABLE cameras (
    id          TEXT PRIMARY KEY,
    team_id     TEXT NOT NULL REFERENCES teams (id),
    name        TEXT NOT NULL,
    width       BIGINT NOT NULL,
    height      BIGINT NOT NULL,
    -- intrinsics, work plane, pose, zones: the camera document as JSON
    document    TEXT NOT NULL,
    created_at  BIGINT NOT NULL
);
CREATE INDEX cameras_team_idx ON cameras (team_id, created_at);

-- Image bytes, stored once per SHA-256 whatever the number of frames or teams using them.
CREATE TABLE images (
    sha256       TEXT PRIMARY KEY,
    content_type TEXT NOT NULL,
    width        BIGINT NOT NULL,
    height       BIGINT NOT NULL,
    bytes        BYTEA NOT NULL,
    created_at   BIGINT NOT NULL
);

CREATE TABLE frames (
    id          TEXT PRIMARY KEY,
    team_id     TEXT NOT NULL REFERENCES teams (id),
    camera_id   TEXT NOT NULL REFERENCES cameras (id),
    sha256      TEXT NOT NULL REFERENCES images (sha256),
    width       BIGINT NOT NULL,
    height      BIGINT NOT NULL,
    created_at  BIGINT NOT NULL,
    CONSTRAINT frames_camera_image_key UNIQUE (camera_id, sha256)
);
CREATE INDEX frames_team_idx ON frames (team_id, created_at);

CREATE TABLE goals (
    id              TEXT PRIMARY KEY,
    team_id         TEXT NOT NULL REFERENCES teams (id),
    frame_id        TEXT NOT NULL REFERENCES frames (id),
    name            TEXT NOT NULL,
    latest_revision BIGINT NOT NULL,
    created_at      BIGINT NOT NULL,
    updated_at      BIGINT NOT NULL
);
CREATE INDEX goals_team_idx ON goals (team_id, updated_at);

-- Immutable: rows are only ever inserted. `document` holds the exact bytes served.
CREATE TABLE goal_revisions (
    goal_id     TEXT NOT NULL REFERENCES goals (id),
    revision    BIGINT NOT NULL,
    frame_id    TEXT NOT NULL REFERENCES frames (id),
    name        TEXT NOT NULL,
    sha256      TEXT NOT NULL,
    author      TEXT NOT NULL,
    note        TEXT NOT NULL,
    override_safety BIGINT NOT NULL,
    document    TEXT NOT NULL,
    created_at  BIGINT NOT NULL,
    CONSTRAINT goal_revisions_pkey PRIMARY KEY (goal_id, revision)
);
