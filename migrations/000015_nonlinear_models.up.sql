-- Non-linear calibration models (calib: 4pl, 5pl, power, exp_saturation,
-- exp_saturation_offset) and the power-of-the-mean weighting for methods
-- and curves. The new CHECK constraints only widen the old ones, so they are
-- added NOT VALID and validated afterwards (see 000007).

ALTER TABLE methods DROP CONSTRAINT methods_model_check;
ALTER TABLE methods ADD CONSTRAINT methods_model_check
    CHECK (model IN ('linear', 'linear_origin', 'quadratic', '4pl', '5pl', 'power', 'exp_saturation', 'exp_saturation_offset')) NOT VALID;
ALTER TABLE methods VALIDATE CONSTRAINT methods_model_check;

ALTER TABLE curves DROP CONSTRAINT curves_model_check;
ALTER TABLE curves ADD CONSTRAINT curves_model_check
    CHECK (model IN ('linear', 'linear_origin', 'quadratic', '4pl', '5pl', 'power', 'exp_saturation', 'exp_saturation_offset')) NOT VALID;
ALTER TABLE curves VALIDATE CONSTRAINT curves_model_check;

ALTER TABLE methods DROP CONSTRAINT methods_weighting_check;
ALTER TABLE methods ADD CONSTRAINT methods_weighting_check
    CHECK (weighting IN ('none', '1/x^0.5', '1/x', '1/x^2', '1/y^0.5', '1/y', '1/y^2', '1/s^2', 'auto', 'power_of_mean')) NOT VALID;
ALTER TABLE methods VALIDATE CONSTRAINT methods_weighting_check;

ALTER TABLE curves DROP CONSTRAINT curves_weighting_check;
ALTER TABLE curves ADD CONSTRAINT curves_weighting_check
    CHECK (weighting IN ('none', '1/x^0.5', '1/x', '1/x^2', '1/y^0.5', '1/y', '1/y^2', '1/s^2', 'auto', 'power_of_mean')) NOT VALID;
ALTER TABLE curves VALIDATE CONSTRAINT curves_weighting_check;
