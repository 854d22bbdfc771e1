-- The average response factor model (calib: average_rf) for methods and
-- curves, and the mean internal-standard response of a curve's calibrators
-- (a trend parameter; NULL without an internal standard). The new CHECK constraints only widen the old ones, so they are
-- added NOT VALID and validated afterwards (see 000007).

ALTER TABLE methods DROP CONSTRAINT methods_model_check;
ALTER TABLE methods ADD CONSTRAINT methods_model_check
    CHECK (model IN ('linear', 'linear_origin', 'quadratic', '4pl', '5pl', 'power', 'exp_saturation', 'exp_saturation_offset', 'average_rf')) NOT VALID;
ALTER TABLE methods VALIDATE CONSTRAINT methods_model_check;

ALTER TABLE curves DROP CONSTRAINT curves_model_check;
ALTER TABLE curves ADD CONSTRAINT curves_model_check
    CHECK (model IN ('linear', 'linear_origin', 'quadratic', '4pl', '5pl', 'power', 'exp_saturation', 'exp_saturation_offset', 'average_rf')) NOT VALID;
ALTER TABLE curves VALIDATE CONSTRAINT curves_model_check;

ALTER TABLE curves ADD COLUMN is_response double precision;
