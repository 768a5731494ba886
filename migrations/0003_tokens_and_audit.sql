-- Access tokens and the audit trail.

-- API tokens. Only the SHA-256 (hex) of a token is stored; the token itself is shown once, when
-- it is made. A revoked token keeps its row (and its name, which the audit trail refers to).
CREATE TABLE api_tokens (
    name TEXT PRIMARY KEY,
    role TEXT NOT NULL,
    token_sha256 TEXT NOT NULL,
    created_at_ms BIGINT NOT NULL,
    last_used_at_ms BIGINT,
    revoked_at_ms BIGINT
);

CREATE UNIQUE INDEX api_tokens_hash ON api_tokens (token_sha256);

-- Every change of the library or of the tokens, written in the transaction of the change.
-- `actor` is a token name, "open mode", "command line" or "service start"; `address` the
-- client's IP address when the change came over HTTP.
CREATE TABLE audit_events (
    id TEXT PRIMARY KEY,
    at_ms BIGINT NOT NULL,
    actor TEXT NOT NULL,
    action TEXT NOT NULL,
    calibration_id TEXT REFERENCES calibrations (id),
    detail TEXT NOT NULL,
    address TEXT
);

CREATE INDEX audit_events_order ON audit_events (at_ms, id);
CREATE INDEX audit_events_calibration ON audit_events (calibration_id, at_ms, id);
