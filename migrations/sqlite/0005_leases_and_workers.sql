-- Schema version 5: many processes on one queue. A claim is a lease that
-- its holder renews; one that lapses puts the evaluation back. Workers
-- report themselves, and an evaluation may ask for workers with labels.

ALTER TABLE evaluations ADD COLUMN lease_expires_ms INTEGER; -- while running: until when the claim holds (Unix ms, which compare exactly)
ALTER TABLE evaluations ADD COLUMN worker_id BLOB;          -- the worker running it, or that last ran it

-- `runs_on` as rows, one `key=value` per row, so a claim can match labels in SQL.
CREATE TABLE evaluation_labels (
    evaluation_id  BLOB NOT NULL REFERENCES evaluations(id) ON DELETE CASCADE,
    label          TEXT NOT NULL,
    PRIMARY KEY (evaluation_id, label)
);

CREATE TABLE workers (
    id             BLOB PRIMARY KEY,
    hostname       TEXT NOT NULL,
    cpu            TEXT NOT NULL,
    labels         TEXT NOT NULL,       -- JSON object of strings
    started_at     TEXT NOT NULL,
    heartbeat_ms   INTEGER NOT NULL,    -- Unix ms, which compare exactly
    pid            INTEGER NOT NULL,    -- its process, valid on `host_key`
    host_key       TEXT NOT NULL,       -- boot id and pid namespace: a process that is gone there holds no lease
    evaluation_id  BLOB                 -- what it runs now; not a foreign key: evaluations may be deleted
);

CREATE INDEX workers_by_heartbeat ON workers (heartbeat_ms);
