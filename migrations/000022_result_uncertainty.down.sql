ALTER TABLE sample_results DROP COLUMN uncertainty;
