-- Weighting: the 1/x^0.5 and 1/y^0.5 schemes (Almeida et al., J. Chromatogr.
-- B 774 (2002) 215) for methods and curves, and a method's weighting options
-- (calib.WeightOptions: the fewest readings per level for 1/s², the σ basis
-- of LOD/LOQ). A new column, so existing revisions read '{}' and take the
-- defaults (calib.DefaultWeightOptions); adding a column fires no row
-- trigger, so methods stay immutable.
--
-- The new CHECK constraints only widen the old ones, so they are added NOT
-- VALID (no scan under the exclusive lock) and validated afterwards, which
-- reads the table under a lock that lets writes go on.

ALTER TABLE methods DROP CONSTRAINT methods_weighting_check;
ALTER TABLE methods ADD CONSTRAINT methods_weighting_check
    CHECK (weighting IN ('none', '1/x^0.5', '1/x', '1/x^2', '1/y^0.5', '1/y', '1/y^2', '1/s^2', 'auto')) NOT VALID;
ALTER TABLE methods VALIDATE CONSTRAINT methods_weighting_check;

ALTER TABLE curves DROP CONSTRAINT curves_weighting_check;
ALTER TABLE curves ADD CONSTRAINT curves_weighting_check
    CHECK (weighting IN ('none', '1/x^0.5', '1/x', '1/x^2', '1/y^0.5', '1/y', '1/y^2', '1/s^2', 'auto')) NOT VALID;
ALTER TABLE curves VALIDATE CONSTRAINT curves_weighting_check;

ALTER TABLE methods ADD COLUMN weighting_options jsonb NOT NULL DEFAULT '{}'::jsonb
    CHECK (jsonb_typeof(weighting_options) = 'object');
