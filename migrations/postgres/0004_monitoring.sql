-- The monitoring loop: durable analysis jobs, the automatic analysis of a structure,
-- alert rules with the state of each region and the log of alert events, webhook
-- subscriptions with the events they receive and their deliveries (the outbox), and
-- the log of delivery attempts. Times are timestamptz (UTC, microseconds); JSON is
-- jsonb; UUIDs are uuid.
--
-- Every table goes with its structure (ON DELETE CASCADE, directly or through its
-- parent), so `delete_structure` needs no extra statements. `alert_events.rule_id`
-- has no foreign key on purpose: the log outlives a deleted rule. Global webhook
-- subscriptions (structure_key NULL) stay when a structure is deleted; their
-- deliveries of its events go with the events.

CREATE TABLE auto_analyses (
    structure_key  BIGINT PRIMARY KEY REFERENCES structures (key) ON DELETE CASCADE,
    config         JSONB NOT NULL,
    updated_at     TIMESTAMPTZ NOT NULL
);

CREATE TABLE jobs (
    id                UUID PRIMARY KEY,
    structure_key     BIGINT NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    status            TEXT NOT NULL CHECK (status IN ('queued', 'running', 'succeeded', 'failed')),
    origin            TEXT NOT NULL CHECK (origin IN ('request', 'batch')),
    batch_id          UUID,
    request           JSONB NOT NULL,
    attempts          INTEGER NOT NULL CHECK (attempts >= 0),
    max_attempts      INTEGER NOT NULL CHECK (max_attempts >= 1),
    run_after         TIMESTAMPTZ NOT NULL,
    worker            TEXT,
    lease_expires_at  TIMESTAMPTZ,
    errors            JSONB NOT NULL,
    analysis_id       UUID UNIQUE,
    created_at        TIMESTAMPTZ NOT NULL,
    started_at        TIMESTAMPTZ,
    finished_at       TIMESTAMPTZ
);

-- The claim: queued jobs by run_after (and running jobs, whose leases are checked).
CREATE INDEX jobs_claim ON jobs (status, run_after);
CREATE INDEX jobs_by_structure_time ON jobs (structure_key, created_at DESC, id DESC);

CREATE TABLE alert_rules (
    id             UUID PRIMARY KEY,
    structure_key  BIGINT NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    definition     JSONB NOT NULL,
    created_at     TIMESTAMPTZ NOT NULL,
    updated_at     TIMESTAMPTZ NOT NULL
);

CREATE INDEX alert_rules_by_structure ON alert_rules (structure_key, created_at, id);

CREATE TABLE alert_states (
    rule_id     UUID NOT NULL REFERENCES alert_rules (id) ON DELETE CASCADE,
    region      TEXT NOT NULL,
    level       INTEGER NOT NULL CHECK (level >= 0),
    data        JSONB NOT NULL,
    updated_at  TIMESTAMPTZ NOT NULL,
    PRIMARY KEY (rule_id, region)
);

CREATE TABLE alert_events (
    seq            BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    id             UUID NOT NULL UNIQUE,
    structure_key  BIGINT NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    rule_id        UUID NOT NULL,
    region         TEXT NOT NULL,
    kind           TEXT NOT NULL CHECK (kind IN ('raised', 'cleared', 'not_significant')),
    from_level     INTEGER NOT NULL CHECK (from_level >= 0),
    to_level       INTEGER NOT NULL CHECK (to_level >= 0),
    analysis_id    UUID NOT NULL,
    evidence       JSONB NOT NULL,
    created_at     TIMESTAMPTZ NOT NULL
);

CREATE INDEX alert_events_by_structure ON alert_events (structure_key, seq);

CREATE TABLE webhook_subscriptions (
    id               UUID PRIMARY KEY,
    structure_key    BIGINT REFERENCES structures (key) ON DELETE CASCADE,
    url              TEXT NOT NULL,
    events           JSONB NOT NULL,
    description      TEXT NOT NULL,
    secret           TEXT NOT NULL,
    created_at       TIMESTAMPTZ NOT NULL,
    dispatch_worker  TEXT,
    dispatch_until   TIMESTAMPTZ
);

CREATE TABLE events (
    seq            BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    id             UUID NOT NULL UNIQUE,
    structure_key  BIGINT NOT NULL REFERENCES structures (key) ON DELETE CASCADE,
    type           TEXT NOT NULL CHECK (type IN ('analysis.finished', 'analysis.failed',
                                                 'alert.raised', 'alert.cleared')),
    occurred_at    TIMESTAMPTZ NOT NULL,
    body           JSONB NOT NULL
);

CREATE TABLE deliveries (
    seq              BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    id               UUID NOT NULL UNIQUE,
    subscription_id  UUID NOT NULL REFERENCES webhook_subscriptions (id) ON DELETE CASCADE,
    event_id         UUID NOT NULL REFERENCES events (id) ON DELETE CASCADE,
    status           TEXT NOT NULL CHECK (status IN ('pending', 'delivered', 'failed')),
    attempts         INTEGER NOT NULL CHECK (attempts >= 0),
    next_attempt_at  TIMESTAMPTZ NOT NULL,
    last_error       TEXT,
    delivered_at     TIMESTAMPTZ,
    created_at       TIMESTAMPTZ NOT NULL
);

-- A subscription's pending deliveries in order (the dispatcher's head of line).
CREATE INDEX deliveries_by_subscription ON deliveries (subscription_id, status, seq);
CREATE INDEX deliveries_by_event ON deliveries (event_id);

CREATE TABLE delivery_attempts (
    delivery_id  UUID NOT NULL REFERENCES deliveries (id) ON DELETE CASCADE,
    attempt      INTEGER NOT NULL CHECK (attempt >= 1),
    at           TIMESTAMPTZ NOT NULL,
    worker       TEXT NOT NULL,
    status_code  INTEGER,
    error        TEXT,
    duration_ms  BIGINT NOT NULL CHECK (duration_ms >= 0),
    PRIMARY KEY (delivery_id, attempt)
);
