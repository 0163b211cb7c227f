-- What an incremental refresh kept of the previous snapshot's prediction rows: the days
-- kept_from .. kept_until of every series except those in `recomputed` are the rows of snapshot
-- from_snapshot_id. A publish of the refreshed snapshot carries those days over from the version
-- published of that snapshot and reads only the other prediction rows. One row per refreshed
-- snapshot id; a full build gets a new id and so no row.
CREATE TABLE snapshot_carries (
  snapshot_id      int8 PRIMARY KEY,
  from_snapshot_id int8 NOT NULL,
  kept_from        date NOT NULL,
  kept_until       date NOT NULL CHECK (kept_until >= kept_from),
  recomputed       int4[] NOT NULL
);
