-- Corrections are revisions: every row gets its revision within (underlying, as_of),
-- 1 for the first stored. Rows stored before this migration are numbered in id order,
-- so the last one posted for a valuation time becomes its current revision.
ALTER TABLE snapshots ADD COLUMN revision INTEGER NOT NULL DEFAULT 1;

UPDATE snapshots
SET revision = (
    SELECT COUNT(*) FROM snapshots AS earlier
    WHERE earlier.underlying = snapshots.underlying
      AND earlier.as_of_us = snapshots.as_of_us
      AND earlier.id <= snapshots.id
);

-- One row per revision number: two corrections can never share one.
CREATE UNIQUE INDEX snapshots_by_revision ON snapshots (underlying, as_of_us, revision);
