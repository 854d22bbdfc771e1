-- Start values and fixed coefficients of a non-linear method's model, by
-- coefficient name: {"start": {"c": 20}, "fixed": {"a": 0.05}}. Revisions
-- stored before read '{}' (self-started, nothing fixed).
ALTER TABLE methods ADD COLUMN curve_parameters jsonb NOT NULL DEFAULT '{}';
