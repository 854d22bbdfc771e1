-- Sessions of the QA pages under /ui/, kept in PostgreSQL so that every
-- replica of the service honours them. A session is opened by signing in with
-- an API token and carries that token's scopes, read afresh on every request
-- (revoking the token ends its sessions). Only the SHA-256 of the session
-- secret is stored; the secret lives in the browser's cookie alone. Sessions
-- are not evidence: signing out deletes the row, and expired rows are pruned.
CREATE TABLE ui_sessions (
    id_hash    bytea       PRIMARY KEY CHECK (octet_length(id_hash) = 32),
    token_id   uuid        NOT NULL REFERENCES tokens (id),
    created_at timestamptz NOT NULL DEFAULT now(),
    expires_at timestamptz NOT NULL,
    CHECK (expires_at > created_at)
);

CREATE INDEX ui_sessions_expires ON ui_sessions (expires_at);
CREATE INDEX ui_sessions_token ON ui_sessions (token_id);

-- Drift: the recent approved values of one instrument and analyte, read at
-- every ingest (the drift check) and by the trend baseline. Approved curves
-- are most of the table, but a partial index keeps the lookup to the rows it
-- needs without filtering pending or rejected ones.
CREATE INDEX curves_approved_history ON curves (instrument, analyte, acquired_at DESC, id DESC)
    WHERE status = 'approved';
