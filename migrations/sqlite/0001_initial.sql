-- Proctor's schema. Written in portable SQL (TEXT ids and RFC 3339 times,
-- INTEGER flags) so that a PostgreSQL store can reuse it.

CREATE TABLE models (
    id          TEXT PRIMARY KEY,
    name        TEXT NOT NULL,
    sha256      TEXT NOT NULL UNIQUE,
    bytes       INTEGER NOT NULL,
    info        TEXT NOT NULL,          -- JSON: parameters, macs, opset, producer, inputs, outputs
    created_at  TEXT NOT NULL
);

CREATE TABLE datasets (
    id          TEXT PRIMARY KEY,
    name        TEXT NOT NULL,
    sha256      TEXT NOT NULL UNIQUE,
    bytes       INTEGER NOT NULL,
    samples     INTEGER NOT NULL,
    has_labels  INTEGER NOT NULL,
    arrays      TEXT NOT NULL,          -- JSON: [{name, dtype, shape}]
    created_at  TEXT NOT NULL
);

CREATE TABLE evaluations (
    id              TEXT PRIMARY KEY,   -- UUID v7: sorts by creation time
    project         TEXT NOT NULL,
    teacher_id      TEXT NOT NULL REFERENCES models(id),
    dataset_id      TEXT NOT NULL REFERENCES datasets(id),
    status          TEXT NOT NULL CHECK (status IN ('queued', 'running', 'succeeded', 'failed', 'canceled')),
    request         TEXT NOT NULL,      -- JSON: the settings as applied
    tags            TEXT NOT NULL,      -- JSON object of strings
    progress_stage  TEXT,
    progress_done   INTEGER NOT NULL DEFAULT 0,
    progress_total  INTEGER NOT NULL DEFAULT 0,
    error           TEXT,               -- JSON problem object when failed
    attempts        INTEGER NOT NULL DEFAULT 0,
    lease_owner     TEXT,
    created_at      TEXT NOT NULL,
    started_at      TEXT,
    finished_at     TEXT,
    verdict         TEXT,
    recommended_id  TEXT REFERENCES models(id)
);

CREATE INDEX evaluations_by_project ON evaluations (project, id);
CREATE INDEX evaluations_by_teacher ON evaluations (teacher_id, id);
CREATE INDEX evaluations_by_status ON evaluations (status, id);

CREATE TABLE evaluation_students (
    evaluation_id  TEXT NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    position       INTEGER NOT NULL,
    model_id       TEXT NOT NULL REFERENCES models(id),
    PRIMARY KEY (evaluation_id, position)
);

CREATE TABLE evaluation_tags (
    evaluation_id  TEXT NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    key            TEXT NOT NULL,
    value          TEXT NOT NULL,
    PRIMARY KEY (evaluation_id, key)
);

CREATE INDEX evaluation_tags_by_pair ON evaluation_tags (key, value);

-- One row per candidate with the headline figures, so that lists and the
-- dashboard need not parse reports.
CREATE TABLE candidates (
    evaluation_id   TEXT NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    model_id        TEXT NOT NULL REFERENCES models(id),
    rank            INTEGER NOT NULL,
    agreement       REAL NOT NULL,
    kl              REAL NOT NULL,
    top1            REAL,
    top1_delta      REAL,
    p50_ms          REAL NOT NULL,
    p90_ms          REAL NOT NULL,
    speedup         REAL NOT NULL,
    bytes           INTEGER NOT NULL,
    size_ratio      REAL NOT NULL,
    passed          INTEGER NOT NULL,
    pareto_optimal  INTEGER NOT NULL,
    PRIMARY KEY (evaluation_id, rank)
);

CREATE TABLE reports (
    evaluation_id  TEXT PRIMARY KEY REFERENCES evaluations(id) ON DELETE CASCADE,
    body           TEXT NOT NULL
);
