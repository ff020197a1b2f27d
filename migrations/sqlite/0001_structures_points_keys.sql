-- Structures (keyed by the client's asset ID), their monitoring points, and API keys.
-- Lengths are metres; times are INTEGER microseconds since 1970-01-01T00:00:00Z (UTC);
-- JSON is TEXT; UUIDs are 16-byte BLOBs.

CREATE TABLE structures (
    key          INTEGER PRIMARY KEY,
    id           TEXT NOT NULL UNIQUE,
    name         TEXT NOT NULL,
    dimension    INTEGER NOT NULL CHECK (dimension IN (2, 3)),
    frame        TEXT NOT NULL,
    length_unit  TEXT NOT NULL CHECK (length_unit IN ('m', 'mm')),
    material     TEXT,
    metadata     TEXT NOT NULL,
    created_at   INTEGER NOT NULL,
    updated_at   INTEGER NOT NULL
);

CREATE TABLE points (
    key            INTEGER PRIMARY KEY,
    structure_key  INTEGER NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    id             TEXT NOT NULL,
    x              REAL NOT NULL,
    y              REAL NOT NULL,
    z              REAL,
    sigma_x        REAL,
    sigma_y        REAL,
    sigma_z        REAL,
    UNIQUE (structure_key, id)
);

CREATE TABLE api_keys (
    id            BLOB PRIMARY KEY,
    label         TEXT NOT NULL,
    prefix        TEXT NOT NULL,
    token_sha256  TEXT NOT NULL UNIQUE,
    scope         TEXT NOT NULL CHECK (scope IN ('read', 'write', 'admin')),
    structures    TEXT,
    created_at    INTEGER NOT NULL,
    revoked_at    INTEGER
);
