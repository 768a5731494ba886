-- The stress inputs a calibration was made for (isotint_core's `CalibrationTable::stress_defaults`):
-- the material fringe value f_σ (N/mm per fringe) and the thickness h (mm), NULL where unknown.
-- Stress requests that leave them out take these. `stress_defaults_filled` 0 marks a row stored
-- before this migration: the service fills its two columns from its table when it starts.
ALTER TABLE calibrations ADD COLUMN fringe_value_n_per_mm DOUBLE PRECISION;
ALTER TABLE calibrations ADD COLUMN thickness_mm DOUBLE PRECISION;
ALTER TABLE calibrations ADD COLUMN stress_defaults_filled BIGINT NOT NULL DEFAULT 0;
