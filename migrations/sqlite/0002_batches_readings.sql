-- Sensor batches and their readings. Lengths are metres; times are INTEGER
-- microseconds since 1970-01-01T00:00:00Z (UTC); JSON is TEXT; UUIDs are 16-byte BLOBs.
--
-- `readings` has NO foreign keys, on purpose: a batch may hold 10^6 readings and a
-- per-row foreign-key check on structures, points and batches would cost a large part
-- of the ingestion speed. The service writes readings only through its batch writer,
-- which takes the point keys from the structure's own points inside the same
-- transaction; `delete_structure` deletes a structure's readings explicitly
-- (DELETE_CHILDREN in server/src/store/sqlite/structures.rs) before the structure
-- row, whose deletion cascades to `batches` and `points`. Points are never deleted on
-- their own. The table is WITHOUT ROWID: the primary key is the storage order.

CREATE TABLE batches (
    id               BLOB PRIMARY KEY,
    structure_key    INTEGER NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    received_at      INTEGER NOT NULL,
    readings         INTEGER NOT NULL CHECK (readings > 0),
    points           INTEGER NOT NULL CHECK (points > 0),
    epochs           INTEGER NOT NULL CHECK (epochs > 0),
    first_epoch      INTEGER NOT NULL,
    last_epoch       INTEGER NOT NULL,
    media_type       TEXT NOT NULL,
    idempotency_key  TEXT,
    body_sha256      TEXT NOT NULL,
    response         TEXT NOT NULL,
    UNIQUE (structure_key, idempotency_key)
);

CREATE INDEX batches_by_time ON batches (structure_key, received_at, id);

CREATE TABLE readings (
    structure_key  INTEGER NOT NULL,
    point_key      INTEGER NOT NULL,
    epoch          INTEGER NOT NULL,
    ux             REAL NOT NULL,
    uy             REAL NOT NULL,
    uz             REAL,
    sigma_x        REAL,
    sigma_y        REAL,
    sigma_z        REAL,
    batch_id       BLOB NOT NULL,
    PRIMARY KEY (structure_key, epoch, point_key)
) WITHOUT ROWID;
