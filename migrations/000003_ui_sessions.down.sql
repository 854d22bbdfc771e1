DROP INDEX IF EXISTS curves_approved_history;
DROP TABLE IF EXISTS ui_sessions;
