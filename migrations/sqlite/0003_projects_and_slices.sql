-- Schema version 3: sets record their class names and how many slices they
-- hold; a project's baseline and its history are kept.

ALTER TABLE datasets ADD COLUMN class_names TEXT;   -- JSON list of strings, or NULL
ALTER TABLE datasets ADD COLUMN slice_count INTEGER;

-- Every baseline a project was given, newest last; the project's current
-- baseline is its latest row.
CREATE TABLE baselines (
    project        TEXT NOT NULL,
    position       INTEGER NOT NULL,   -- 1, 2, ... per project, in the order they were set
    model_id       BLOB NOT NULL REFERENCES models(id),
    set_at         TEXT NOT NULL,
    set_by         TEXT,               -- the token's name; NULL with access off
    evaluation_id  BLOB REFERENCES evaluations(id),
    PRIMARY KEY (project, position)
);
