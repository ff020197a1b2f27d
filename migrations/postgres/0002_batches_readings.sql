-- Sensor batches and their readings. Lengths are metres; times are timestamptz (UTC,
-- microseconds).
--
-- `readings` has NO foreign keys, on purpose: a batch may hold 10^6 readings and a
-- per-row foreign-key check on structures, points and batches would cost a large part
-- of the ingestion speed. The service writes readings only through its batch writer,
-- which takes the point keys from the structure's own points inside the same
-- transaction; `delete_structure` deletes a structure's readings explicitly
-- (DELETE_CHILDREN in server/src/store/postgres/structures.rs) before the structure
-- row, whose deletion cascades to `batches` and `points`. Points are never deleted on
-- their own.

CREATE TABLE batches (
    id               UUID PRIMARY KEY,
    structure_key    BIGINT NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    received_at      TIMESTAMPTZ NOT NULL,
    readings         BIGINT NOT NULL CHECK (readings > 0),
    points           BIGINT NOT NULL CHECK (points > 0),
    epochs           BIGINT NOT NULL CHECK (epochs > 0),
    first_epoch      TIMESTAMPTZ NOT NULL,
    last_epoch       TIMESTAMPTZ NOT NULL,
    media_type       TEXT NOT NULL,
    idempotency_key  TEXT,
    body_sha256      TEXT NOT NULL,
    response         JSONB NOT NULL,
    UNIQUE (structure_key, idempotency_key)
);

CREATE INDEX batches_by_time ON batches (structure_key, received_at, id);

CREATE TABLE readings (
    structure_key  BIGINT NOT NULL,
    point_key      BIGINT NOT NULL,
    epoch          TIMESTAMPTZ NOT NULL,
    ux             DOUBLE PRECISION NOT NULL,
    uy             DOUBLE PRECISION NOT NULL,
    uz             DOUBLE PRECISION,
    sigma_x        DOUBLE PRECISION,
    sigma_y        DOUBLE PRECISION,
    sigma_z        DOUBLE PRECISION,
    batch_id       UUID NOT NULL,
    PRIMARY KEY (structure_key, epoch, point_key)
);
