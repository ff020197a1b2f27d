-- Analyses of a structure: one row per run, succeeded or failed, with what went in
-- and the result document. Times are timestamptz (UTC, microseconds); JSON is jsonb.

CREATE TABLE analyses (
    id               UUID PRIMARY KEY,
    structure_key    BIGINT NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    kind             TEXT NOT NULL CHECK (kind IN ('epoch', 'series')),
    status           TEXT NOT NULL CHECK (status IN ('succeeded', 'failed')),
    method           TEXT NOT NULL,
    epoch            TIMESTAMPTZ,
    baseline_epoch   TIMESTAMPTZ,
    series_first     TIMESTAMPTZ,
    series_last      TIMESTAMPTZ,
    parameters       JSONB NOT NULL,
    inputs           JSONB NOT NULL,
    software_version TEXT NOT NULL,
    result           JSONB,
    error            TEXT,
    created_at       TIMESTAMPTZ NOT NULL,
    duration_ms      BIGINT NOT NULL CHECK (duration_ms >= 0),
    CHECK ((status = 'succeeded') = (result IS NOT NULL)),
    CHECK ((status = 'failed') = (error IS NOT NULL))
);

CREATE INDEX analyses_by_structure_time ON analyses (structure_key, created_at DESC, id DESC);
