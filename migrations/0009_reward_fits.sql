-- Reward fits: a maximum-entropy inverse-RL estimate from demonstrations on one frame.
-- `settings` holds everything the fit used, the demos' paths resolved to samples (canonical
-- JSON), so a fit can be repeated exactly whatever happens to the tracks later. `result` (JSON)
-- and `reward_map` (float32 little-endian, rows × cols) are written once, when the fit ends.
CREATE TABLE reward_fits (
    id            TEXT PRIMARY KEY,
    team_id       TEXT NOT NULL REFERENCES teams (id),
    frame_id      TEXT NOT NULL REFERENCES frames (id),
    operation_id  TEXT NOT NULL,
    settings      TEXT NOT NULL,
    result        TEXT,
    reward_map    BYTEA,
    author        TEXT NOT NULL,
    created_at    BIGINT NOT NULL
);
CREATE INDEX reward_fits_team_idx ON reward_fits (team_id, created_at);
