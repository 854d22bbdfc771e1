-- The reference material a verification standard measured (a
-- reference_material of the curve's analyte, its certificate value the
-- verification's concentration): such results are the bias data of a
-- method's top-down uncertainty (lab.TopDownEstimate), the other
-- verifications its within-lab reproducibility. NULL for a verification of
-- a standard that is no reference material, and for every verification
-- written before. Adding a column fires no row trigger: verifications stay
-- append-only.
ALTER TABLE verifications ADD COLUMN material text REFERENCES standard_materials (code);

-- The top-down history reads a method's and analyte's verifications by time.
CREATE INDEX verifications_at ON verifications (at, id);
