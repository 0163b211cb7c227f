-- Change tracking for incremental runs: what changed in the raw tables since a snapshot was
-- built, so "did data inside the previous snapshot's boundaries change?" is answered from this
-- log instead of by rescanning the tables.
--
-- The loader writes one row per stored batch with the table and the day range its rows (and, in
-- replace mode, its deletes, which match the file's own keys) cover. Any other write to a raw
-- table (an UPDATE or DELETE by hand, a TRUNCATE) is caught by a statement trigger and logged
-- with an unknown range, which makes the next run build in full.
CREATE TABLE data_changes (
  change_id  int8 GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  table_name text NOT NULL,
  -- Days (weeks starting, for prices) the change covers; NULL when not known.
  first_day  date,
  last_day   date,
  -- The load batch (no foreign key: load_batches may be truncated with the raw tables).
  batch_id   int8,
  changed_at timestamptz NOT NULL DEFAULT now()
);

-- Statement level, no transition tables: free for the loader's bulk COPY (which sets
-- larder.loader for its transaction and logs its own exact range instead).
CREATE FUNCTION note_data_change() RETURNS trigger LANGUAGE plpgsql SET search_path FROM CURRENT AS $$
BEGIN
  IF coalesce(current_setting('larder.loader', true), '') = 'on' THEN
    RETURN NULL;
  END IF;
  INSERT INTO data_changes (table_name) VALUES (TG_TABLE_NAME);
  RETURN NULL;
END
$$;

CREATE TRIGGER sales_changes AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON sales
  FOR EACH STATEMENT EXECUTE FUNCTION note_data_change();
CREATE TRIGGER prices_changes AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON prices
  FOR EACH STATEMENT EXECUTE FUNCTION note_data_change();
CREATE TRIGGER series_changes AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON series
  FOR EACH STATEMENT EXECUTE FUNCTION note_data_change();
CREATE TRIGGER items_changes AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON items
  FOR EACH STATEMENT EXECUTE FUNCTION note_data_change();
CREATE TRIGGER stores_changes AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON stores
  FOR EACH STATEMENT EXECUTE FUNCTION note_data_change();
CREATE TRIGGER calendar_days_changes AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON calendar_days
  FOR EACH STATEMENT EXECUTE FUNCTION note_data_change();
CREATE TRIGGER events_changes AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON events
  FOR EACH STATEMENT EXECUTE FUNCTION note_data_change();
CREATE TRIGGER benefit_days_changes AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON benefit_days
  FOR EACH STATEMENT EXECUTE FUNCTION note_data_change();

-- Where the change log stood when a snapshot's data fingerprint was taken: every change with
-- change_id <= change_last is in it. change_count guards against a change that took its id
-- before the mark was read but committed after. Written by the job runner after a build or a
-- refresh; a snapshot without a row here (built by `larder build`) is judged by recomputing its
-- fingerprint instead.
CREATE TABLE snapshot_marks (
  snapshot_id    int8 PRIMARY KEY,
  change_last    int8 NOT NULL,
  change_count   int8 NOT NULL,
  cutoff         date NOT NULL,
  price_boundary date NOT NULL,
  recorded_at    timestamptz NOT NULL DEFAULT now()
);

-- The incremental fingerprint adds the price rows of the weeks a new cutoff uncovers.
CREATE INDEX prices_week_idx ON prices (week_start);
