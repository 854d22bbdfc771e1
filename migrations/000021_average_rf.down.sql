ALTER TABLE curves DROP COLUMN is_response;

-- Restores the constraints of 000015. Fails while a method or curve uses
-- average_rf: such rows are evidence and are not deleted here.
ALTER TABLE curves DROP CONSTRAINT curves_model_check;
ALTER TABLE curves ADD CONSTRAINT curves_model_check
    CHECK (model IN ('linear', 'linear_origin', 'quadratic', '4pl', '5pl', 'power', 'exp_saturation', 'exp_saturation_offset'));

ALTER TABLE methods DROP CONSTRAINT methods_model_check;
ALTER TABLE methods ADD CONSTRAINT methods_model_check
    CHECK (model IN ('linear', 'linear_origin', 'quadratic', '4pl', '5pl', 'power', 'exp_saturation', 'exp_saturation_offset'));
