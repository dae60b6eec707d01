-- Tracks: the path of one labelled point through a demo, one sample per frame. A sample is
-- `manual` (placed by a person: the seed, or a correction) or `tracked`; tracking never
-- overwrites a manual sample.
CREATE TABLE tracks (
    id          TEXT PRIMARY KEY,
    team_id     TEXT NOT NULL REFERENCES teams (id),
    demo_id     TEXT NOT NULL REFERENCES demos (id),
    label       TEXT NOT NULL,
    author      TEXT NOT NULL,
    created_at  BIGINT NOT NULL
);
CREATE INDEX tracks_demo_idx ON tracks (demo_id, created_at);

CREATE TABLE track_samples (
    track_id    TEXT NOT NULL REFERENCES tracks (id),
    frame       BIGINT NOT NULL,
    x           DOUBLE PRECISION NOT NULL,
    y           DOUBLE PRECISION NOT NULL,
    origin      TEXT NOT NULL,
    confidence  DOUBLE PRECISION NOT NULL,
    lost        BIGINT NOT NULL,
    PRIMARY KEY (track_id, frame),
    CONSTRAINT track_samples_origin_check CHECK (origin IN ('tracked', 'manual'))
);
