-- Restores the constraints of 000007. Fails while a method or curve uses a
-- non-linear model or power_of_mean: such rows are evidence and are not
-- deleted here.
ALTER TABLE curves DROP CONSTRAINT curves_weighting_check;
ALTER TABLE curves ADD CONSTRAINT curves_weighting_check
    CHECK (weighting IN ('none', '1/x^0.5', '1/x', '1/x^2', '1/y^0.5', '1/y', '1/y^2', '1/s^2', 'auto'));

ALTER TABLE methods DROP CONSTRAINT methods_weighting_check;
ALTER TABLE methods ADD CONSTRAINT methods_weighting_check
    CHECK (weighting IN ('none', '1/x^0.5', '1/x', '1/x^2', '1/y^0.5', '1/y', '1/y^2', '1/s^2', 'auto'));

ALTER TABLE curves DROP CONSTRAINT curves_model_check;
ALTER TABLE curves ADD CONSTRAINT curves_model_check
    CHECK (model IN ('linear', 'linear_origin', 'quadratic'));

ALTER TABLE methods DROP CONSTRAINT methods_model_check;
ALTER TABLE methods ADD CONSTRAINT methods_model_check
    CHECK (model IN ('linear', 'linear_origin', 'quadratic'));
