-- isotint schema, portable between SQLite and PostgreSQL (through sqlx::Any).
-- Times are Unix milliseconds (BIGINT); flags are BIGINT 0/1; ids are UUID text.

CREATE TABLE calibrations (
    id TEXT PRIMARY KEY,
    name TEXT NOT NULL,
    material TEXT NOT NULL,
    light_source TEXT NOT NULL,
    camera TEXT NOT NULL,
    metadata_json TEXT NOT NULL,
    table_json TEXT NOT NULL,
    source_kind TEXT NOT NULL,
    order_step DOUBLE PRECISION NOT NULL,
    max_order DOUBLE PRECISION NOT NULL,
    residual_de2000 DOUBLE PRECISION,
    created_at_ms BIGINT NOT NULL,
    stored_at_ms BIGINT NOT NULL,
    supersedes TEXT REFERENCES calibrations (id),
    archived BIGINT NOT NULL DEFAULT 0,
    content_sha256 TEXT NOT NULL
);

-- A calibration is corrected at most once; the correction names it in `supersedes`.
CREATE UNIQUE INDEX calibrations_supersedes ON calibrations (supersedes);
CREATE UNIQUE INDEX calibrations_content ON calibrations (content_sha256);
CREATE INDEX calibrations_created ON calibrations (created_at_ms);

-- Files of the calibration-sets directory already imported, keyed by the SHA-256 of their bytes.
CREATE TABLE calibration_imports (
    file_sha256 TEXT PRIMARY KEY,
    file_name TEXT NOT NULL,
    calibration_id TEXT NOT NULL REFERENCES calibrations (id),
    imported_at_ms BIGINT NOT NULL
);

-- Order-map results, kept until `expires_at_ms`. Arrays are row-major little-endian
-- float32 (orders, residuals, margins) and one byte per pixel (flags).
CREATE TABLE order_maps (
    id TEXT PRIMARY KEY,
    calibration_id TEXT NOT NULL REFERENCES calibrations (id),
    created_at_ms BIGINT NOT NULL,
    expires_at_ms BIGINT NOT NULL,
    width BIGINT NOT NULL,
    height BIGINT NOT NULL,
    statistics_json TEXT NOT NULL,
    exposure_json TEXT NOT NULL,
    orders BYTEA NOT NULL,
    residuals BYTEA NOT NULL,
    margins BYTEA NOT NULL,
    flags BYTEA NOT NULL
);

CREATE INDEX order_maps_expiry ON order_maps (expires_at_ms);
