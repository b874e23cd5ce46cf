-- Schema version 2. Ids become sqlx's own UUID encoding (16 bytes, which
-- sort as UUID v7 sort: by time), so that rows decode into typed structs;
-- the queue's `lease_owner`, which never expired, is `claimed_by`; a set
-- records its largest label for checks without reading it again; timed
-- rounds are kept for GET /v1/evaluations/{id}/timings.
--
-- Old tables are renamed away first (SQLite rewrites the foreign keys that
-- name them), new ones are made under the old names, rows are copied with
-- their ids converted, and the old tables are dropped.

ALTER TABLE reports RENAME TO reports_v1;
ALTER TABLE candidates RENAME TO candidates_v1;
ALTER TABLE evaluation_tags RENAME TO evaluation_tags_v1;
ALTER TABLE evaluation_students RENAME TO evaluation_students_v1;
ALTER TABLE evaluations RENAME TO evaluations_v1;
ALTER TABLE datasets RENAME TO datasets_v1;
ALTER TABLE models RENAME TO models_v1;

CREATE TABLE models (
    id          BLOB PRIMARY KEY,
    name        TEXT NOT NULL,
    sha256      TEXT NOT NULL UNIQUE,
    bytes       INTEGER NOT NULL,
    info        TEXT NOT NULL,          -- JSON: parameters, macs, opset, producer, inputs, outputs
    created_at  TEXT NOT NULL
);

CREATE TABLE datasets (
    id             BLOB PRIMARY KEY,
    name           TEXT NOT NULL,
    sha256         TEXT NOT NULL UNIQUE,
    bytes          INTEGER NOT NULL,
    samples        INTEGER NOT NULL,
    has_labels     INTEGER NOT NULL,
    arrays         TEXT NOT NULL,       -- JSON: [{name, dtype, shape}]
    largest_label  TEXT,                -- JSON {value, sample}; NULL: none, or not recorded (version 1)
    created_at     TEXT NOT NULL
);

CREATE TABLE evaluations (
    id              BLOB PRIMARY KEY,   -- UUID v7: sorts by creation time
    project         TEXT NOT NULL,
    teacher_id      BLOB NOT NULL REFERENCES models(id),
    dataset_id      BLOB NOT NULL REFERENCES datasets(id),
    status          TEXT NOT NULL CHECK (status IN ('queued', 'running', 'succeeded', 'failed', 'canceled')),
    request         TEXT NOT NULL,      -- JSON: the request as applied
    tags            TEXT NOT NULL,      -- JSON object of strings
    progress_stage  TEXT,               -- NULL while waiting
    progress_done   INTEGER NOT NULL DEFAULT 0,
    progress_total  INTEGER NOT NULL DEFAULT 0,
    error           TEXT,               -- JSON problem object when failed
    attempts        INTEGER NOT NULL DEFAULT 0,
    claimed_by      TEXT,               -- the worker running it, while it runs
    created_at      TEXT NOT NULL,
    started_at      TEXT,
    finished_at     TEXT,
    verdict         TEXT,
    recommended_id  BLOB REFERENCES models(id)
);

CREATE TABLE evaluation_students (
    evaluation_id  BLOB NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    position       INTEGER NOT NULL,
    model_id       BLOB NOT NULL REFERENCES models(id),
    PRIMARY KEY (evaluation_id, position)
);

CREATE TABLE evaluation_tags (
    evaluation_id  BLOB NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    key            TEXT NOT NULL,
    value          TEXT NOT NULL,
    PRIMARY KEY (evaluation_id, key)
);

-- One row per candidate with the headline figures, so that lists and the
-- dashboard need not parse reports.
CREATE TABLE candidates (
    evaluation_id   BLOB NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    model_id        BLOB NOT NULL REFERENCES models(id),
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
    evaluation_id  BLOB PRIMARY KEY REFERENCES evaluations(id) ON DELETE CASCADE,
    body           TEXT NOT NULL
);

-- Every timed run of a succeeded evaluation: JSON [[ms, ...], ...], one row
-- per round, one column per timed model.
CREATE TABLE timings (
    evaluation_id  BLOB PRIMARY KEY REFERENCES evaluations(id) ON DELETE CASCADE,
    rounds         TEXT NOT NULL
);

INSERT INTO models (id, name, sha256, bytes, info, created_at)
    SELECT unhex(replace(id, '-', '')), name, sha256, bytes, info, created_at FROM models_v1;
INSERT INTO datasets (id, name, sha256, bytes, samples, has_labels, arrays, largest_label, created_at)
    SELECT unhex(replace(id, '-', '')), name, sha256, bytes, samples, has_labels, arrays, NULL,
           created_at FROM datasets_v1;
INSERT INTO evaluations (id, project, teacher_id, dataset_id, status, request, tags,
                         progress_stage, progress_done, progress_total, error, attempts,
                         claimed_by, created_at, started_at, finished_at, verdict, recommended_id)
    SELECT unhex(replace(id, '-', '')), project, unhex(replace(teacher_id, '-', '')),
           unhex(replace(dataset_id, '-', '')), status, request, tags,
           CASE progress_stage WHEN 'offline' THEN 'bulk' WHEN 'warmup' THEN 'timing'
                               WHEN 'latency' THEN 'timing' ELSE progress_stage END,
           progress_done, progress_total, error, attempts, lease_owner, created_at, started_at,
           finished_at, verdict, unhex(replace(recommended_id, '-', ''))
    FROM evaluations_v1;
INSERT INTO evaluation_students (evaluation_id, position, model_id)
    SELECT unhex(replace(evaluation_id, '-', '')), position, unhex(replace(model_id, '-', ''))
    FROM evaluation_students_v1;
INSERT INTO evaluation_tags (evaluation_id, key, value)
    SELECT unhex(replace(evaluation_id, '-', '')), key, value FROM evaluation_tags_v1;
INSERT INTO candidates (evaluation_id, model_id, rank, agreement, kl, top1, top1_delta, p50_ms,
                        p90_ms, speedup, bytes, size_ratio, passed, pareto_optimal)
    SELECT unhex(replace(evaluation_id, '-', '')), unhex(replace(model_id, '-', '')), rank,
           agreement, kl, top1, top1_delta, p50_ms, p90_ms, speedup, bytes, size_ratio, passed,
           pareto_optimal FROM candidates_v1;
INSERT INTO reports (evaluation_id, body)
    SELECT unhex(replace(evaluation_id, '-', '')), body FROM reports_v1;

DROP TABLE reports_v1;
DROP TABLE candidates_v1;
DROP TABLE evaluation_tags_v1;
DROP TABLE evaluation_students_v1;
DROP TABLE evaluations_v1;
DROP TABLE datasets_v1;
DROP TABLE models_v1;

CREATE INDEX evaluations_by_project ON evaluations (project, id);
CREATE INDEX evaluations_by_teacher ON evaluations (teacher_id, id);
CREATE INDEX evaluations_by_status ON evaluations (status, id);
CREATE INDEX evaluation_tags_by_pair ON evaluation_tags (key, value);
