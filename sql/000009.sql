-- The checks' sales pass keeps a compact copy of what it read, so a nightly check run reads only
-- the days loaded since the last one from `sales` and the rest from here: blocks of 256 days per
-- series, each day a little-endian int4 (-2147483648: no row that day). Valid while the change
-- log shows no sales change on or before covered_to since the mark; a change inside it makes the
-- next pass reread from the first changed block (or everything, for a change of unknown range).
-- Both tables are unlogged: a cache costs no WAL, and after a crash PostgreSQL empties both
-- together, so the next pass simply reads everything again.
CREATE UNLOGGED TABLE sales_blocks (
  series_id int4 NOT NULL,
  block     int4 NOT NULL, -- epoch day / 256
  units     bytea NOT NULL,
  PRIMARY KEY (series_id, block)
);
-- 1 KiB values stay inline and uncompressed: the pass reads them at COPY speed.
ALTER TABLE sales_blocks ALTER COLUMN units SET STORAGE EXTERNAL;

CREATE UNLOGGED TABLE sales_blocks_state (
  only_row     bool PRIMARY KEY DEFAULT true CHECK (only_row),
  covered_to   date NOT NULL,
  change_last  int8 NOT NULL,
  change_count int8 NOT NULL,
  written_at   timestamptz NOT NULL DEFAULT now()
);

-- The new days of a nightly pass are appended at the end of the heap: a block-range index finds
-- them without a scan of the table (and costs the loader almost nothing).
CREATE INDEX sales_day_brin ON sales USING brin (day);
