-- One row per analysed snapshot. Times are integer microseconds since the Unix epoch
-- (UTC) so that ordering and range filters are exact.
CREATE TABLE snapshots (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    underlying TEXT NOT NULL,
    as_of_us INTEGER NOT NULL,
    stored_at_us INTEGER NOT NULL,
    content_sha256 TEXT NOT NULL,
    input_media_type TEXT NOT NULL,
    input TEXT NOT NULL,
    analysis TEXT NOT NULL,
    UNIQUE (underlying, as_of_us, content_sha256)
);

CREATE INDEX snapshots_by_underlying_as_of ON snapshots (underlying, as_of_us, id);
