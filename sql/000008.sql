-- The stock-out rule's state per series at a snapshot's cutoff (src/features/stockout-state.ts),
-- so the incremental refresh of a set with a stock-out mask reads only the newest days instead
-- of every series' whole history. Keyed by the snapshot table (a refresh advances the table in
-- place and moves its new states onto it in the same transaction).
CREATE TABLE stockout_states (
  table_name text NOT NULL,
  series_id  int4 NOT NULL,
  cutoff     date NOT NULL,
  first_sale date,
  open_start date,
  -- k* of the run open at the cutoff ('Infinity': pre-launch or too little history to judge).
  open_kstar float8 NOT NULL,
  -- Stock-out runs a later refresh may read: start, end and detectable day as epoch days, flat.
  runs       int4[] NOT NULL,
  PRIMARY KEY (table_name, series_id)
);
