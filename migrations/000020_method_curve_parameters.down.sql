ALTER TABLE methods DROP COLUMN IF EXISTS curve_parameters;
