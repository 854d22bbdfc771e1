-- Drops what 000007_weighting_options.up.sql added. Restoring the narrower
-- CHECK constraints fails while a method or curve uses 1/x^0.5 or 1/y^0.5:
-- such rows are evidence and are not deleted here.
ALTER TABLE methods DROP COLUMN IF EXISTS weighting_options;

ALTER TABLE curves DROP CONSTRAINT curves_weighting_check;
ALTER TABLE curves ADD CONSTRAINT curves_weighting_check
    CHECK (weighting IN ('none', '1/x', '1/x^2', '1/y', '1/y^2', '1/s^2', 'auto'));

ALTER TABLE methods DROP CONSTRAINT methods_weighting_check;
ALTER TABLE methods ADD CONSTRAINT methods_weighting_check
    CHECK (weighting IN ('none', '1/x', '1/x^2', '1/y', '1/y^2', '1/s^2', 'auto'));
