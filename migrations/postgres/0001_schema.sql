-- The schema of SQLite's migrations 0001 to 0005 as one PostgreSQL schema,
-- with PostgreSQL's own types: UUID ids (which sort as UUID v7 sort: by
-- time), TIMESTAMPTZ times, JSONB for JSON read back into types. A report
-- body is TEXT: it is served byte for byte as the engine wrote it, and JSONB
-- would reorder its keys. Names sort bytewise ("C"), as SQLite sorts them,
-- whatever the cluster's locale.

CREATE TABLE models (
    id          UUID PRIMARY KEY,
    name        TEXT COLLATE "C" NOT NULL,
    sha256      TEXT NOT NULL UNIQUE,
    bytes       BIGINT NOT NULL,
    info        JSONB NOT NULL,
    created_at  TIMESTAMPTZ NOT NULL,
    deleted_at  TIMESTAMPTZ
);

CREATE TABLE datasets (
    id             UUID PRIMARY KEY,
    name           TEXT COLLATE "C" NOT NULL,
    sha256         TEXT NOT NULL UNIQUE,
    bytes          BIGINT NOT NULL,
    samples        BIGINT NOT NULL,
    has_labels     BOOLEAN NOT NULL,
    arrays         JSONB NOT NULL,
    largest_label  JSONB,
    created_at     TIMESTAMPTZ NOT NULL,
    class_names    JSONB,
    slice_count    BIGINT,
    deleted_at     TIMESTAMPTZ
);

CREATE TABLE evaluations (
    id                UUID PRIMARY KEY,
    project           TEXT COLLATE "C" NOT NULL,
    teacher_id        UUID NOT NULL REFERENCES models(id),
    dataset_id        UUID NOT NULL REFERENCES datasets(id),
    status            TEXT NOT NULL CHECK (status IN ('queued', 'running', 'succeeded', 'failed', 'canceled')),
    request           JSONB NOT NULL,
    tags              JSONB NOT NULL,
    progress_stage    TEXT,
    progress_done     BIGINT NOT NULL DEFAULT 0,
    progress_total    BIGINT NOT NULL DEFAULT 0,
    error             JSONB,
    attempts          BIGINT NOT NULL DEFAULT 0,
    claimed_by        TEXT,
    created_at        TIMESTAMPTZ NOT NULL,
    started_at        TIMESTAMPTZ,
    finished_at       TIMESTAMPTZ,
    verdict           TEXT,
    recommended_id    UUID REFERENCES models(id),
    created_by        TEXT,
    canceled_by       TEXT,
    baseline_id       UUID REFERENCES models(id),
    lease_expires_ms  BIGINT,
    worker_id         UUID
);

CREATE TABLE evaluation_students (
    evaluation_id  UUID NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    position       BIGINT NOT NULL,
    model_id       UUID NOT NULL REFERENCES models(id),
    PRIMARY KEY (evaluation_id, position)
);

CREATE TABLE evaluation_tags (
    evaluation_id  UUID NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    key            TEXT COLLATE "C" NOT NULL,
    value          TEXT NOT NULL,
    PRIMARY KEY (evaluation_id, key)
);

CREATE TABLE evaluation_labels (
    evaluation_id  UUID NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    label          TEXT NOT NULL,
    PRIMARY KEY (evaluation_id, label)
);

CREATE TABLE candidates (
    evaluation_id   UUID NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    model_id        UUID NOT NULL REFERENCES models(id),
    rank            BIGINT NOT NULL,
    agreement       DOUBLE PRECISION NOT NULL,
    kl              DOUBLE PRECISION NOT NULL,
    top1            DOUBLE PRECISION,
    top1_delta      DOUBLE PRECISION,
    p50_ms          DOUBLE PRECISION NOT NULL,
    p90_ms          DOUBLE PRECISION NOT NULL,
    speedup         DOUBLE PRECISION NOT NULL,
    bytes           BIGINT NOT NULL,
    size_ratio      DOUBLE PRECISION NOT NULL,
    passed          BOOLEAN NOT NULL,
    pareto_optimal  BOOLEAN NOT NULL,
    PRIMARY KEY (evaluation_id, rank)
);

CREATE TABLE reports (
    evaluation_id  UUID PRIMARY KEY REFERENCES evaluations(id) ON DELETE CASCADE,
    body           TEXT NOT NULL
);

CREATE TABLE timings (
    evaluation_id  UUID PRIMARY KEY REFERENCES evaluations(id) ON DELETE CASCADE,
    rounds         JSONB NOT NULL
);

CREATE TABLE baselines (
    project        TEXT COLLATE "C" NOT NULL,
    position       BIGINT NOT NULL,
    model_id       UUID NOT NULL REFERENCES models(id),
    set_at         TIMESTAMPTZ NOT NULL,
    set_by         TEXT,
    evaluation_id  UUID REFERENCES evaluations(id),
    PRIMARY KEY (project, position)
);

CREATE TABLE tokens (
    id             UUID PRIMARY KEY,
    name           TEXT COLLATE "C" NOT NULL UNIQUE,
    role           TEXT NOT NULL CHECK (role IN ('reader', 'submitter', 'maintainer', 'admin')),
    project        TEXT COLLATE "C" NOT NULL,
    secret_sha256  TEXT NOT NULL UNIQUE,
    created_at     TIMESTAMPTZ NOT NULL,
    revoked_at     TIMESTAMPTZ
);

CREATE TABLE workers (
    id             UUID PRIMARY KEY,
    hostname       TEXT NOT NULL,
    cpu            TEXT NOT NULL,
    labels         JSONB NOT NULL,
    started_at     TIMESTAMPTZ NOT NULL,
    heartbeat_ms   BIGINT NOT NULL,
    pid            BIGINT NOT NULL,
    host_key       TEXT NOT NULL,
    evaluation_id  UUID
);

CREATE INDEX evaluations_by_project ON evaluations (project, id);
CREATE INDEX evaluations_by_teacher ON evaluations (teacher_id, id);
CREATE INDEX evaluations_by_status ON evaluations (status, id);
CREATE INDEX evaluation_tags_by_pair ON evaluation_tags (key, value);
CREATE INDEX workers_by_heartbeat ON workers (heartbeat_ms);
