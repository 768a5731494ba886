-- The mask an order map used, as JSON {"source": "given" | "found" | "whole_photo",
-- "specimen_share": 0–1}. NULL for maps stored before this column existed.
ALTER TABLE order_maps ADD COLUMN mask_json TEXT;
