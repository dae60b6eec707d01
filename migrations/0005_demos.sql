-- Demonstrations: ordered frames of one camera, each image stored once in `images` by SHA-256.
CREATE TABLE demos (
    id           TEXT PRIMARY KEY,
    team_id      TEXT NOT NULL REFERENCES teams (id),
    camera_id    TEXT NOT NULL REFERENCES cameras (id),
    frame_count  BIGINT NOT NULL,
    width        BIGINT NOT NULL,
    height       BIGINT NOT NULL,
    author       TEXT NOT NULL,
    created_at   BIGINT NOT NULL
);
CREATE INDEX demos_team_idx ON demos (team_id, created_at);

CREATE TABLE demo_frames (
    demo_id  TEXT NOT NULL REFERENCES demos (id),
    idx      BIGINT NOT NULL,
    sha256   TEXT NOT NULL REFERENCES images (sha256),
    -- seconds from the first frame, when the upload said (timestamps.csv, GIF delays)
    time_s   DOUBLE PRECISION,
    PRIMARY KEY (demo_id, idx)
);
