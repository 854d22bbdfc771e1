-- The uncertainty budget and conformity statement of a result (lab.BudgetRecord
-- as JSON), computed at write time from the method's uncertainty spec; NULL
-- where the method asks for none, and for results written before.
ALTER TABLE sample_results ADD COLUMN uncertainty jsonb CHECK (uncertainty IS NULL OR jsonb_typeof(uncertainty) = 'object');
