-- The monitoring loop: durable analysis jobs, the automatic analysis of a structure,
-- alert rules with the state of each region and the log of alert events, webhook
-- subscriptions with the events they receive and their deliveries (the outbox), and
-- the log of delivery attempts. Times are INTEGER microseconds since
-- 1970-01-01T00:00:00Z (UTC); JSON is TEXT; UUIDs are 16-byte BLOBs.
--
-- Every table goes with its structure (ON DELETE CASCADE, directly or through its
-- parent), so `delete_structure` needs no extra statements. `alert_events.rule_id`
-- has no foreign key on purpose: the log outlives a deleted rule. Global webhook
-- subscriptions (structure_key NULL) stay when a structure is deleted; their
-- deliveries of its events go with the events.

CREATE TABLE auto_analyses (
    structure_key  INTEGER PRIMARY KEY REFERENCES structures (key) ON DELETE CASCADE,
    config         TEXT NOT NULL,
    updated_at     INTEGER NOT NULL
);

CREATE TABLE jobs (
    id                BLOB PRIMARY KEY,
    structure_key     INTEGER NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    status            TEXT NOT NULL CHECK (status IN ('queued', 'running', 'succeeded', 'failed')),
    origin            TEXT NOT NULL CHECK (origin IN ('request', 'batch')),
    batch_id          BLOB,
    request           TEXT NOT NULL,
    attempts          INTEGER NOT NULL CHECK (attempts >= 0),
    max_attempts      INTEGER NOT NULL CHECK (max_attempts >= 1),
    run_after         INTEGER NOT NULL,
    worker            TEXT,
    lease_expires_at  INTEGER,
    errors            TEXT NOT NULL,
    analysis_id       BLOB UNIQUE,
    created_at        INTEGER NOT NULL,
    started_at        INTEGER,
    finished_at       INTEGER
);

-- The claim: queued jobs by run_after (and running jobs, whose leases are checked).
CREATE INDEX jobs_claim ON jobs (status, run_after);
CREATE INDEX jobs_by_structure_time ON jobs (structure_key, created_at DESC, id DESC);

CREATE TABLE alert_rules (
    id             BLOB PRIMARY KEY,
    structure_key  INTEGER NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    definition     TEXT NOT NULL,
    created_at     INTEGER NOT NULL,
    updated_at     INTEGER NOT NULL
);

CREATE INDEX alert_rules_by_structure ON alert_rules (structure_key, created_at, id);

CREATE TABLE alert_states (
    rule_id     BLOB NOT NULL REFERENCES alert_rules (id) ON DELETE CASCADE,
    region      TEXT NOT NULL,
    level       INTEGER NOT NULL CHECK (level >= 0),
    data        TEXT NOT NULL,
    updated_at  INTEGER NOT NULL,
    PRIMARY KEY (rule_id, region)
);

CREATE TABLE alert_events (
    seq            INTEGER PRIMARY KEY AUTOINCREMENT,
    id             BLOB NOT NULL UNIQUE,
    structure_key  INTEGER NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    rule_id        BLOB NOT NULL,
    region         TEXT NOT NULL,
    kind           TEXT NOT NULL CHECK (kind IN ('raised', 'cleared', 'not_significant')),
    from_level     INTEGER NOT NULL CHECK (from_level >= 0),
    to_level       INTEGER NOT NULL CHECK (to_level >= 0),
    analysis_id    BLOB NOT NULL,
    evidence       TEXT NOT NULL,
    created_at     INTEGER NOT NULL
);

CREATE INDEX alert_events_by_structure ON alert_events (structure_key, seq);

CREATE TABLE webhook_subscriptions (
    id               BLOB PRIMARY KEY,
    structure_key    INTEGER REFERENCES structures (key) ON DELETE CASCADE,
    url              TEXT NOT NULL,
    events           TEXT NOT NULL,
    description      TEXT NOT NULL,
    secret           TEXT NOT NULL,
    created_at       INTEGER NOT NULL,
    dispatch_worker  TEXT,
    dispatch_until   INTEGER
);

CREATE TABLE events (
    seq            INTEGER PRIMARY KEY AUTOINCREMENT,
    id             BLOB NOT NULL UNIQUE,
    structure_key  INTEGER NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    type           TEXT NOT NULL CHECK (type IN ('analysis.finished', 'analysis.failed',
                                                 'alert.raised', 'alert.cleared')),
    occurred_at    INTEGER NOT NULL,
    body           TEXT NOT NULL
);

CREATE TABLE deliveries (
    seq              INTEGER PRIMARY KEY AUTOINCREMENT,
    id               BLOB NOT NULL UNIQUE,
    subscription_id  BLOB NOT NULL REFERENCES webhook_subscriptions (id) ON DELETE CASCADE,
    event_id         BLOB NOT NULL REFERENCES events (id) ON DELETE CASCADE,
    status           TEXT NOT NULL CHECK (status IN ('pending', 'delivered', 'failed')),
    attempts         INTEGER NOT NULL CHECK (attempts >= 0),
    next_attempt_at  INTEGER NOT NULL,
    last_error       TEXT,
    delivered_at     INTEGER,
    created_at       INTEGER NOT NULL
);

-- A subscription's pending deliveries in order (the dispatcher's head of line).
CREATE INDEX deliveries_by_subscription ON deliveries (subscription_id, status, seq);
CREATE INDEX deliveries_by_event ON deliveries (event_id);

CREATE TABLE delivery_attempts (
    delivery_id  BLOB NOT NULL REFERENCES deliveries (id) ON DELETE CASCADE,
    attempt      INTEGER NOT NULL CHECK (attempt >= 1),
    at           INTEGER NOT NULL,
    worker       TEXT NOT NULL,
    status_code  INTEGER,
    error        TEXT,
    duration_ms  INTEGER NOT NULL CHECK (duration_ms >= 0),
    PRIMARY KEY (delivery_id, attempt)
);
