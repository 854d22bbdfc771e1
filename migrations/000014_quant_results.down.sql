ALTER TABLE sample_results DROP COLUMN sequence;
ALTER TABLE sample_results DROP COLUMN is_check;
ALTER TABLE sample_results DROP COLUMN reported;
