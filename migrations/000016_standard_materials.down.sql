-- Drops what 000016_standard_materials.up.sql added, with the records in it.
DROP TABLE IF EXISTS run_standard_materials;
DROP TABLE IF EXISTS standard_materials;
ALTER TABLE methods DROP COLUMN IF EXISTS standards;
