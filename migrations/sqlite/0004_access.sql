-- Schema version 4: access tokens, and who created and canceled each
-- evaluation. A token's secret is kept only as its SHA-256.

CREATE TABLE tokens (
    id             BLOB PRIMARY KEY,
    name           TEXT NOT NULL UNIQUE,
    role           TEXT NOT NULL CHECK (role IN ('reader', 'submitter', 'maintainer', 'admin')),
    project        TEXT NOT NULL,      -- a project name, or '*' for all
    secret_sha256  TEXT NOT NULL UNIQUE,
    created_at     TEXT NOT NULL,
    revoked_at     TEXT
);

ALTER TABLE evaluations ADD COLUMN created_by TEXT;
ALTER TABLE evaluations ADD COLUMN canceled_by TEXT;
-- The baseline an evaluation compares with, beside its request, so that a
-- model in use can be found without reading JSON.
ALTER TABLE evaluations ADD COLUMN baseline_id BLOB REFERENCES models(id);

-- A deleted model or set keeps its row, so that finished evaluations still
-- name it; only its file goes. A new upload of the same bytes revives it.
ALTER TABLE models ADD COLUMN deleted_at TEXT;
ALTER TABLE datasets ADD COLUMN deleted_at TEXT;
