-- Standard uncertainty (1 σ) of each pixel's fringe order, fringes: row-major little-endian
-- float32 like the other arrays, NaN where there is no value. NULL for maps stored before this
-- column existed; they read back as all NaN.
ALTER TABLE order_maps ADD COLUMN uncertainties BYTEA;
