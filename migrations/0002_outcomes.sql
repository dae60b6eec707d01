-- What happened when a robot tried a goal revision. Rows are only inserted.
CREATE TABLE outcomes (
    id           TEXT PRIMARY KEY,
    team_id      TEXT NOT NULL REFERENCES teams (id),
    goal_id      TEXT NOT NULL REFERENCES goals (id),
    revision     BIGINT NOT NULL,
    final_points TEXT NOT NULL,
    per_point    TEXT NOT NULL,
    success      BIGINT NOT NULL,
    cost         DOUBLE PRECISION NOT NULL,
    mean_residual_px DOUBLE PRECISION NOT NULL,
    note         TEXT NOT NULL,
    author       TEXT NOT NULL,
    created_at   BIGINT NOT NULL,
    CONSTRAINT outcomes_revision_fkey FOREIGN KEY (goal_id, revision)
        REFERENCES goal_revisions (goal_id, revision)
);
CREATE INDEX outcomes_goal_idx ON outcomes (goal_id, created_at);
