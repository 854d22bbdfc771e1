-- Result ids and feed positions are JSON numbers; a JavaScript client reads a
-- number exactly only up to 2^53 - 1. Their identity sequences stop there, so
-- the service never sends an integer a client cannot hold.
ALTER TABLE sample_results ALTER COLUMN id SET MAXVALUE 9007199254740991;
ALTER TABLE result_events ALTER COLUMN seq SET MAXVALUE 9007199254740991;
