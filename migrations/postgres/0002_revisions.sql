-- Corrections are revisions: every row gets its revision within (underlying, as_of),
-- 1 for the first stored. Rows stored before this migration are numbered in id order,
-- so the last one posted for a valuation time becomes its current revision.
ALTER TABLE snapshots ADD COLUMN revision INTEGER NOT NULL DEFAULT 1;

UPDATE snapshots
SET revision = numbered.revision
FROM (
    SELECT id, ROW_NUMBER() OVER (PARTITION BY underlying, as_of ORDER BY id) AS revision
    FROM snapshots
) AS numbered
WHERE snapshots.id = numbered.id AND numbered.revision > 1;

-- Every insert names its revision; no default hides a forgotten one.
ALTER TABLE snapshots ALTER COLUMN revision DROP DEFAULT;

-- One row per revision number: two corrections can never share one.
CREATE UNIQUE INDEX snapshots_by_revision ON snapshots (underlying, as_of, revision);
