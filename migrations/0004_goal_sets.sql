-- A goal set: a named, ordered list of goals pinned at revisions (a task suite).
-- `version` counts saves for If-Match; `document` holds the exact JSON served.
CREATE TABLE goal_sets (
    id          TEXT PRIMARY KEY,
    team_id     TEXT NOT NULL REFERENCES teams (id),
    name        TEXT NOT NULL,
    version     BIGINT NOT NULL,
    document    TEXT NOT NULL,
    created_at  BIGINT NOT NULL,
    updated_at  BIGINT NOT NULL
);
CREATE INDEX goal_sets_team_idx ON goal_sets (team_id, updated_at);
