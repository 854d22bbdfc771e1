-- Standard materials: certified reference materials, stock solutions and
-- calibration levels prepared from them, as records; and the materials a
-- run says it used. A material with a parent (prepared_from) carries its
-- preparation steps (aliquot and final volumes with their tolerances, in
-- mL) and a value computed from the parent's by the lab's rules; one
-- without a parent carries its certificate: an expanded uncertainty with
-- its coverage factor, or a tolerance (± a, rectangular).
--
-- Both tables are append-only (records are evidence): UPDATE, DELETE and
-- TRUNCATE raise CK001 from reject_change() of 000001_core, and the app
-- role is refused them too (see 000005_app_role).

-- A method's standards policy (lab.StandardsPolicy): '{}' keeps the default,
-- an out-of-date material fails the curve. Adding a column fires no row
-- trigger, so methods stay immutable.
ALTER TABLE methods ADD COLUMN standards jsonb NOT NULL DEFAULT '{}'::jsonb
    CHECK (jsonb_typeof(standards) = 'object');

CREATE TABLE standard_materials (
    code                 text             PRIMARY KEY CHECK (length(code) BETWEEN 1 AND 64),
    kind                 text             NOT NULL CHECK (kind IN ('reference_material', 'stock_solution', 'calibration_level')),
    analyte              text             NOT NULL CHECK (length(analyte) BETWEEN 1 AND 64),
    -- the analyte's UCUM unit code
    unit                 text             NOT NULL,
    value                double precision NOT NULL CHECK (value > 0 AND value < 'Infinity'),
    expanded_uncertainty double precision CHECK (expanded_uncertainty >= 0 AND expanded_uncertainty < 'Infinity'),
    coverage_factor      double precision CHECK (coverage_factor > 0 AND coverage_factor < 'Infinity'),
    tolerance            double precision CHECK (tolerance >= 0 AND tolerance < 'Infinity'),
    -- relative standard uncertainty of value: certificate and preparation
    relative_uncertainty double precision NOT NULL CHECK (relative_uncertainty >= 0 AND relative_uncertainty < 'Infinity'),
    lot                  text             NOT NULL DEFAULT '' CHECK (length(lot) <= 200),
    supplier             text             NOT NULL DEFAULT '' CHECK (length(supplier) <= 200),
    level                text             CHECK (length(level) BETWEEN 1 AND 64),
    expires_at           timestamptz      NOT NULL,
    prepared_from        text             REFERENCES standard_materials (code),
    prepared_at          timestamptz,
    -- [{"aliquot_ml": .., "aliquot_tol_ml": .., "final_ml": .., "final_tol_ml": ..}, ...]
    preparation          jsonb            NOT NULL DEFAULT '[]'::jsonb CHECK (jsonb_typeof(preparation) = 'array'),
    created_at           timestamptz      NOT NULL DEFAULT now(),
    created_by           text             NOT NULL,
    CHECK ((expanded_uncertainty IS NULL) = (coverage_factor IS NULL)),
    CHECK (prepared_from IS NOT NULL OR expanded_uncertainty IS NOT NULL OR tolerance IS NOT NULL),
    CHECK ((prepared_from IS NULL) = (jsonb_array_length(preparation) = 0)),
    CHECK ((kind = 'calibration_level') = (level IS NOT NULL))
);

CREATE INDEX standard_materials_parent ON standard_materials (prepared_from);

CREATE TRIGGER standard_materials_immutable BEFORE UPDATE OR DELETE ON standard_materials
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER standard_materials_no_truncate BEFORE TRUNCATE ON standard_materials
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

CREATE TABLE run_standard_materials (
    run_id   uuid NOT NULL REFERENCES runs (id),
    material text NOT NULL REFERENCES standard_materials (code),
    position integer NOT NULL CHECK (position >= 0),
    PRIMARY KEY (run_id, material)
);

CREATE INDEX run_standard_materials_material ON run_standard_materials (material);

CREATE TRIGGER run_standard_materials_immutable BEFORE UPDATE OR DELETE ON run_standard_materials
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER run_standard_materials_no_truncate BEFORE TRUNCATE ON run_standard_materials
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

DO $$
BEGIN
    IF EXISTS (SELECT 1 FROM pg_roles WHERE rolname = 'curvekeeper_app') THEN
        REVOKE UPDATE, DELETE, TRUNCATE ON standard_materials, run_standard_materials FROM curvekeeper_app;
    END IF;
END;
$$;
