-- People, their team memberships, browser sessions and one-time invites.
-- Same portable rules as 0001: TEXT ids, BIGINT unix-ms times, INTEGER-like BIGINT flags.

-- A person signs in with a login name and a password (argon2id PHC string, never the password).
CREATE TABLE people (
    id            TEXT PRIMARY KEY,
    login         TEXT NOT NULL,
    display_name  TEXT NOT NULL,
    password_hash TEXT NOT NULL,
    created_at    BIGINT NOT NULL,
    CONSTRAINT people_login_key UNIQUE (login)
);

-- A person may belong to several teams, with one role in each.
CREATE TABLE memberships (
    team_id     TEXT NOT NULL REFERENCES teams (id),
    person_id   TEXT NOT NULL REFERENCES people (id),
    role        TEXT NOT NULL,
    created_at  BIGINT NOT NULL,
    CONSTRAINT memberships_pkey PRIMARY KEY (team_id, person_id),
    CONSTRAINT memberships_role_check CHECK (role IN ('viewer', 'editor', 'owner'))
);
CREATE INDEX memberships_person_idx ON memberships (person_id);

-- Only the SHA-256 of the session cookie is stored. The CSRF token is per session and is sent
-- back by pages in a header or hidden field; it is useless without the cookie.
CREATE TABLE sessions (
    id            TEXT PRIMARY KEY,
    token_hash    TEXT NOT NULL,
    person_id     TEXT NOT NULL REFERENCES people (id),
    team_id       TEXT NOT NULL REFERENCES teams (id),
    csrf_token    TEXT NOT NULL,
    created_at    BIGINT NOT NULL,
    expires_at    BIGINT NOT NULL,
    CONSTRAINT sessions_token_key UNIQUE (token_hash)
);
CREATE INDEX sessions_person_idx ON sessions (person_id);

-- One-time invitation links; `kind` is 'startup' for the links printed at start-up (replaced at
-- each start) and 'invite' for those an owner makes.
CREATE TABLE invites (
    id          TEXT PRIMARY KEY,
    team_id     TEXT NOT NULL REFERENCES teams (id),
    token_hash  TEXT NOT NULL,
    role        TEXT NOT NULL,
    kind        TEXT NOT NULL,
    note        TEXT NOT NULL,
    created_by  TEXT NOT NULL,
    created_at  BIGINT NOT NULL,
    expires_at  BIGINT NOT NULL,
    used_at     BIGINT,
    CONSTRAINT invites_token_key UNIQUE (token_hash),
    CONSTRAINT invites_role_check CHECK (role IN ('viewer', 'editor', 'owner'))
);
CREATE INDEX invites_team_idx ON invites (team_id);
