-- The checks' prices pass keeps each item and store's weekly prices as one value: 12-byte records
-- (int4 week start as epoch day, float8 price, both big-endian as int4send/float8send give them)
-- in week order. A later pass reads these and only the weeks after covered_to from `prices`.
-- Valid while the change log shows no price change on or before covered_to since the mark.
-- Unlogged, like sales_blocks: after a crash both tables are empty and the pass reads everything.
CREATE UNLOGGED TABLE price_history (
  item_id  text NOT NULL,
  store_id text NOT NULL,
  recs     bytea NOT NULL,
  PRIMARY KEY (item_id, store_id)
);
ALTER TABLE price_history ALTER COLUMN recs SET STORAGE EXTERNAL;

CREATE UNLOGGED TABLE price_history_state (
  only_row     bool PRIMARY KEY DEFAULT true CHECK (only_row),
  covered_to   date NOT NULL,
  change_last  int8 NOT NULL,
  change_count int8 NOT NULL,
  written_at   timestamptz NOT NULL DEFAULT now()
);
