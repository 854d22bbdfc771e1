-- The reported value of a result (x̂0 with its factors, the reported unit,
-- the rounding and the qualifiers, lab.ReportedValue) and its
-- internal-standard check (lab.ISOutcome); NULL for results written before
-- them or without reporting rules; its place in its run's sequence
-- (lab.SequenceRecord), NULL for a run posted without one.
ALTER TABLE sample_results ADD COLUMN reported jsonb CHECK (reported IS NULL OR jsonb_typeof(reported) = 'object');
ALTER TABLE sample_results ADD COLUMN is_check jsonb CHECK (is_check IS NULL OR jsonb_typeof(is_check) = 'object');
ALTER TABLE sample_results ADD COLUMN sequence jsonb CHECK (sequence IS NULL OR jsonb_typeof(sequence) = 'object');
