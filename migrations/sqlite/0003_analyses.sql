-- Analyses of a structure: one row per run, succeeded or failed, with what went in
-- and the result document. Times are INTEGER microseconds since
-- 1970-01-01T00:00:00Z (UTC); JSON is TEXT; UUIDs are 16-byte BLOBs.

CREATE TABLE analyses (
    id               BLOB PRIMARY KEY,
    structure_key    INTEGER NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    kind             TEXT NOT NULL CHECK (kind IN ('epoch', 'series')),
    status           TEXT NOT NULL CHECK (status IN ('succeeded', 'failed')),
    method           TEXT NOT NULL,
    epoch            INTEGER,
    baseline_epoch   INTEGER,
    series_first     INTEGER,
    series_last      INTEGER,
    parameters       TEXT NOT NULL,
    inputs           TEXT NOT NULL,
    software_version TEXT NOT NULL,
    result           TEXT,
    error            TEXT,
    created_at       INTEGER NOT NULL,
    duration_ms      INTEGER NOT NULL CHECK (duration_ms >= 0),
    CHECK ((status = 'succeeded') = (result IS NOT NULL)),
    CHECK ((status = 'failed') = (error IS NOT NULL))
);

CREATE INDEX analyses_by_structure_time ON analyses (structure_key, created_at DESC, id DESC);
