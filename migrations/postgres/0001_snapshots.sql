-- One row per analysed snapshot.
CREATE TABLE snapshots (
    id BIGSERIAL PRIMARY KEY,
    underlying TEXT NOT NULL,
    as_of TIMESTAMPTZ NOT NULL,
    stored_at TIMESTAMPTZ NOT NULL DEFAULT now(),
    content_sha256 TEXT NOT NULL,
    input_media_type TEXT NOT NULL,
    input TEXT NOT NULL,
    analysis TEXT NOT NULL,
    UNIQUE (underlying, as_of, content_sha256)
);

CREATE INDEX snapshots_by_underlying_as_of ON snapshots (underlying, as_of, id);
