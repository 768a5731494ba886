-- Order maps in compact form (isotint_core::compact): the map's rows in bands of `band_rows`
-- rows, each band one compressed BLOB of order_map_bands (orders and uncertainties to 1e-4
-- fringe, residuals to 0.01 ΔE*ab, flags exact). Maps stored this way leave the per-pixel
-- columns of 0001 and 0002 empty (zero bytes; uncertainties NULL). `band_rows` 0 marks a map
-- stored before this migration, its arrays still in those columns: the service converts such
-- maps to bands when it starts.
ALTER TABLE order_maps ADD COLUMN band_rows BIGINT NOT NULL DEFAULT 0;

CREATE TABLE order_map_bands (
    order_map_id TEXT NOT NULL REFERENCES order_maps (id),
    band BIGINT NOT NULL,
    data BYTEA NOT NULL,
    PRIMARY KEY (order_map_id, band)
);
