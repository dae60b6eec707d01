-- Every change, as the HTTP edge saw it: who (the principal's name, its credential and role),
-- when (unix ms), what (method, the route's pattern and the concrete path, and the answer's
-- status) and from which address. Written once a change has been answered with success, read by
-- the team's owners newest first.
CREATE TABLE audit_log (
    id          TEXT PRIMARY KEY,
    team_id     TEXT NOT NULL REFERENCES teams (id),
    at_ms       BIGINT NOT NULL,
    actor       TEXT NOT NULL,
    credential  TEXT NOT NULL,
    role        TEXT NOT NULL,
    method      TEXT NOT NULL,
    route       TEXT NOT NULL,
    path        TEXT NOT NULL,
    status      BIGINT NOT NULL,
    address     TEXT NOT NULL
);

CREATE INDEX audit_log_by_team ON audit_log (team_id, at_ms, id);
