-- Structures (keyed by the client's asset ID), their monitoring points, and API keys.
-- Lengths are metres; times are timestamptz (UTC, microseconds).

CREATE TABLE structures (
    key          BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    id           TEXT NOT NULL UNIQUE,
    name         TEXT NOT NULL,
    dimension    SMALLINT NOT NULL CHECK (dimension IN (2, 3)),
    frame        JSONB NOT NULL,
    length_unit  TEXT NOT NULL CHECK (length_unit IN ('m', 'mm')),
    material     JSONB,
    metadata     JSONB NOT NULL,
    created_at   TIMESTAMPTZ NOT NULL,
    updated_at   TIMESTAMPTZ NOT NULL
);

CREATE TABLE points (
    key            BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    structure_key  BIGINT NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    id             TEXT NOT NULL,
    x              DOUBLE PRECISION NOT NULL,
    y              DOUBLE PRECISION NOT NULL,
    z              DOUBLE PRECISION,
    sigma_x        DOUBLE PRECISION,
    sigma_y        DOUBLE PRECISION,
    sigma_z        DOUBLE PRECISION,
    UNIQUE (structure_key, id)
);

CREATE TABLE api_keys (
    id            UUID PRIMARY KEY,
    label         TEXT NOT NULL,
    prefix        TEXT NOT NULL,
    token_sha256  TEXT NOT NULL UNIQUE,
    scope         TEXT NOT NULL CHECK (scope IN ('read', 'write', 'admin')),
    structures    JSONB,
    created_at    TIMESTAMPTZ NOT NULL,
    revoked_at    TIMESTAMPTZ
);
