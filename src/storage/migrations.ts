/**
 * Versioned schema migrations for both engines. Each version is applied once, in order, inside a
 * transaction, and recorded in `schema_migrations`; a version already recorded is skipped, so
 * running the list again is harmless. Add new versions at the end; never edit an applied one.
 *
 * Design notes
 * - Observations carry an insertion sequence (`seq`) that orders listings and run input.
 * - `observed_at` is epoch milliseconds (an integer), so windows compare numbers, not text.
 * - The feature is TEXT in both engines so it comes back byte for byte (PostgreSQL's JSONB would
 *   reorder keys and drop duplicates and whitespace).
 * - Run ids come from one global sequence (SQLite AUTOINCREMENT, PostgreSQL identity), never reused.
 */

export interface Migration {
  version: number;
  name: string;
  sqlite: string;
  postgres: string;
}

export const MIGRATIONS: readonly Migration[] = [
  {
    version: 1,
    name: 'datasets, observations, runs, run results, schedule slots',
    sqlite: `
      CREATE TABLE datasets (
        id TEXT PRIMARY KEY,
        name TEXT NOT NULL,
        settings TEXT NOT NULL,
        id_property TEXT,
        time_window TEXT,
        schedule TEXT,
        webhook TEXT,
        created_at TEXT NOT NULL,
        updated_at TEXT NOT NULL
      );
      CREATE TABLE observations (
        seq INTEGER PRIMARY KEY,
        dataset_id TEXT NOT NULL REFERENCES datasets(id) ON DELETE CASCADE,
        obs_id TEXT NOT NULL,
        lon REAL NOT NULL,
        lat REAL NOT NULL,
        observed_at INTEGER,
        weight REAL,
        content_hash TEXT NOT NULL,
        feature TEXT NOT NULL,
        UNIQUE (dataset_id, obs_id)
      );
      CREATE INDEX observations_by_seq ON observations (dataset_id, seq);
      CREATE INDEX observations_by_time ON observations (dataset_id, observed_at);
      CREATE TABLE runs (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        dataset_id TEXT NOT NULL REFERENCES datasets(id) ON DELETE CASCADE,
        status TEXT NOT NULL CHECK (status IN ('queued', 'running', 'succeeded', 'failed', 'cancelled')),
        trigger TEXT NOT NULL CHECK (trigger IN ('request', 'schedule', 'command')),
        settings TEXT NOT NULL,
        progress REAL NOT NULL DEFAULT 0,
        error TEXT,
        worker_id TEXT,
        created_at TEXT NOT NULL,
        started_at TEXT,
        finished_at TEXT,
        updated_at TEXT NOT NULL,
        updated_ms INTEGER NOT NULL,
        summary TEXT,
        timings TEXT
      );
      CREATE INDEX runs_by_dataset ON runs (dataset_id, seq);
      CREATE INDEX runs_queued ON runs (status, seq);
      CREATE TABLE run_layers (
        run_seq INTEGER NOT NULL REFERENCES runs(seq) ON DELETE CASCADE,
        layer TEXT NOT NULL,
        body TEXT NOT NULL,
        PRIMARY KEY (run_seq, layer)
      );
      CREATE TABLE run_hotspots (
        run_seq INTEGER NOT NULL REFERENCES runs(seq) ON DELETE CASCADE,
        hotspot_id INTEGER NOT NULL,
        track_id TEXT,
        members TEXT NOT NULL,
        core_members TEXT NOT NULL,
        member_count INTEGER NOT NULL,
        hull TEXT NOT NULL,
        figures TEXT,
        PRIMARY KEY (run_seq, hotspot_id)
      );
      CREATE INDEX run_hotspots_by_track ON run_hotspots (track_id, run_seq);
      CREATE TABLE schedule_slots (
        dataset_id TEXT NOT NULL REFERENCES datasets(id) ON DELETE CASCADE,
        slot TEXT NOT NULL,
        claimed_at TEXT NOT NULL,
        PRIMARY KEY (dataset_id, slot)
      );
    `,
    postgres: `
      CREATE TABLE datasets (
        id TEXT PRIMARY KEY,
        name TEXT NOT NULL,
        settings JSONB NOT NULL,
        id_property TEXT,
        time_window TEXT,
        schedule JSONB,
        webhook JSONB,
        created_at TIMESTAMPTZ NOT NULL,
        updated_at TIMESTAMPTZ NOT NULL
      );
      CREATE TABLE observations (
        seq BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
        dataset_id TEXT NOT NULL REFERENCES datasets(id) ON DELETE CASCADE,
        obs_id TEXT NOT NULL,
        lon DOUBLE PRECISION NOT NULL,
        lat DOUBLE PRECISION NOT NULL,
        observed_at BIGINT,
        weight DOUBLE PRECISION,
        content_hash TEXT NOT NULL,
        feature TEXT NOT NULL,
        UNIQUE (dataset_id, obs_id)
      );
      CREATE INDEX observations_by_seq ON observations (dataset_id, seq);
      CREATE INDEX observations_by_time ON observations (dataset_id, observed_at);
      CREATE TABLE runs (
        seq BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
        dataset_id TEXT NOT NULL REFERENCES datasets(id) ON DELETE CASCADE,
        status TEXT NOT NULL CHECK (status IN ('queued', 'running', 'succeeded', 'failed', 'cancelled')),
        trigger TEXT NOT NULL CHECK (trigger IN ('request', 'schedule', 'command')),
        settings JSONB NOT NULL,
        progress DOUBLE PRECISION NOT NULL DEFAULT 0,
        error TEXT,
        worker_id TEXT,
        created_at TIMESTAMPTZ NOT NULL,
        started_at TIMESTAMPTZ,
        finished_at TIMESTAMPTZ,
        updated_at TIMESTAMPTZ NOT NULL,
        summary JSONB,
        timings JSONB
      );
      CREATE INDEX runs_by_dataset ON runs (dataset_id, seq);
      CREATE INDEX runs_queued ON runs (seq) WHERE status = 'queued';
      CREATE TABLE run_layers (
        run_seq BIGINT NOT NULL REFERENCES runs(seq) ON DELETE CASCADE,
        layer TEXT NOT NULL,
        body TEXT NOT NULL,
        PRIMARY KEY (run_seq, layer)
      );
      CREATE TABLE run_hotspots (
        run_seq BIGINT NOT NULL REFERENCES runs(seq) ON DELETE CASCADE,
        hotspot_id INTEGER NOT NULL,
        track_id TEXT,
        members TEXT NOT NULL,
        core_members TEXT NOT NULL,
        member_count INTEGER NOT NULL,
        hull TEXT NOT NULL,
        figures JSONB,
        PRIMARY KEY (run_seq, hotspot_id)
      );
      CREATE INDEX run_hotspots_by_track ON run_hotspots (track_id, run_seq);
      CREATE TABLE schedule_slots (
        dataset_id TEXT NOT NULL REFERENCES datasets(id) ON DELETE CASCADE,
        slot TIMESTAMPTZ NOT NULL,
        claimed_at TIMESTAMPTZ NOT NULL,
        PRIMARY KEY (dataset_id, slot)
      );
    `,
  },
  {
    version: 2,
    name: 'track id counters',
    // One row per dataset: the last track number handed out, so that ids are never reused, not even
    // those of tracks that ended long ago. Seeded from the track ids already stored.
    sqlite: `
      CREATE TABLE track_counters (
        dataset_id TEXT PRIMARY KEY REFERENCES datasets(id) ON DELETE CASCADE,
        last_seq INTEGER NOT NULL
      );
      INSERT INTO track_counters (dataset_id, last_seq)
        SELECT r.dataset_id, MAX(CAST(substr(h.track_id, 2) AS INTEGER)) FROM run_hotspots h JOIN runs r ON r.seq = h.run_seq
        WHERE h.track_id GLOB 't[0-9]*' AND NOT substr(h.track_id, 2) GLOB '*[^0-9]*' GROUP BY r.dataset_id;
    `,
    postgres: `
      CREATE TABLE track_counters (
        dataset_id TEXT PRIMARY KEY REFERENCES datasets(id) ON DELETE CASCADE,
        last_seq BIGINT NOT NULL
      );
      INSERT INTO track_counters (dataset_id, last_seq)
        SELECT r.dataset_id, MAX(CAST(substr(h.track_id, 2) AS BIGINT)) FROM run_hotspots h JOIN runs r ON r.seq = h.run_seq
        WHERE h.track_id ~ '^t[0-9]{1,15}$' GROUP BY r.dataset_id;
    `,
  },
  {
    version: 3,
    name: 'observations without a foreign key to datasets (PostgreSQL)',
    // SQLite's per-row key check is cheap; it keeps the constraint.
    sqlite: '-- unchanged',
    // The per-row check of the constraint cost a quarter of PostgreSQL's ingest time (31 000
    // against 41 000 observations per second in batches of 1 000, measured). Ingest locks the
    // dataset row and deleteDataset deletes the row and then its observations in one
    // transaction, so no observation can outlive its dataset.
    postgres: `
      DO $$
      DECLARE c text;
      BEGIN
        FOR c IN SELECT conname FROM pg_constraint WHERE conrelid = 'observations'::regclass AND contype = 'f' LOOP
          EXECUTE format('ALTER TABLE observations DROP CONSTRAINT %I', c);
        END LOOP;
      END $$;
    `,
  },
  {
    version: 4,
    name: 'run result layers stored in pieces',
    // A layer is kept as pieces of about a MiB (part 0, 1, …): a points layer of a million
    // features is 234 MB, which as one value had to be built, sent and read back as one string,
    // and a layer of some four million points would pass PostgreSQL's 1 GB limit for a value.
    sqlite: `
      CREATE TABLE run_layer_parts (
        run_seq INTEGER NOT NULL REFERENCES runs(seq) ON DELETE CASCADE,
        layer TEXT NOT NULL,
        part INTEGER NOT NULL,
        body TEXT NOT NULL,
        PRIMARY KEY (run_seq, layer, part)
      );
      INSERT INTO run_layer_parts (run_seq, layer, part, body) SELECT run_seq, layer, 0, body FROM run_layers;
      DROP TABLE run_layers;
    `,
    // lz4 compresses a 234 MB points layer to 36 MB in less time than the default pglz takes for
    // 65 MB (measured); servers built without lz4 keep the default.
    postgres: `
      CREATE TABLE run_layer_parts (
        run_seq BIGINT NOT NULL REFERENCES runs(seq) ON DELETE CASCADE,
        layer TEXT NOT NULL,
        part INTEGER NOT NULL,
        body TEXT NOT NULL,
        PRIMARY KEY (run_seq, layer, part)
      );
      DO $$
      BEGIN
        ALTER TABLE run_layer_parts ALTER COLUMN body SET COMPRESSION lz4;
      EXCEPTION WHEN feature_not_supported OR invalid_parameter_value THEN
        NULL;
      END $$;
      INSERT INTO run_layer_parts (run_seq, layer, part, body) SELECT run_seq, layer, 0, body FROM run_layers;
      DROP TABLE run_layers;
    `,
  },
  {
    version: 5,
    name: 'API keys and audit records',
    // Keys are stored as the SHA-256 of their token only (see src/auth/tokens.ts). A key limited
    // to a dataset is deleted with it, so a dataset created again under the same id does not
    // inherit the old keys. Audit records outlive what they describe.
    sqlite: `
      CREATE TABLE api_keys (
        seq INTEGER PRIMARY KEY,
        id TEXT NOT NULL UNIQUE,
        token_hash TEXT NOT NULL UNIQUE,
        role TEXT NOT NULL CHECK (role IN ('reader', 'contributor', 'manager', 'admin')),
        dataset_id TEXT REFERENCES datasets(id) ON DELETE CASCADE,
        label TEXT,
        created_at TEXT NOT NULL,
        revoked_at TEXT
      );
      CREATE TABLE audit_records (
        seq INTEGER PRIMARY KEY,
        at TEXT NOT NULL,
        key_id TEXT,
        actor TEXT NOT NULL,
        action TEXT NOT NULL,
        dataset_id TEXT,
        target TEXT,
        status INTEGER NOT NULL
      );
    `,
    postgres: `
      CREATE TABLE api_keys (
        seq BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
        id TEXT NOT NULL UNIQUE,
        token_hash TEXT NOT NULL UNIQUE,
        role TEXT NOT NULL CHECK (role IN ('reader', 'contributor', 'manager', 'admin')),
        dataset_id TEXT REFERENCES datasets(id) ON DELETE CASCADE,
        label TEXT,
        created_at TIMESTAMPTZ NOT NULL,
        revoked_at TIMESTAMPTZ
      );
      CREATE TABLE audit_records (
        seq BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
        at TIMESTAMPTZ NOT NULL,
        key_id TEXT,
        actor TEXT NOT NULL,
        action TEXT NOT NULL,
        dataset_id TEXT,
        target TEXT,
        status INTEGER NOT NULL
      );
    `,
  },
  {
    version: 6,
    name: 'dataset publishing settings',
    sqlite: 'ALTER TABLE datasets ADD COLUMN publish TEXT;',
    postgres: 'ALTER TABLE datasets ADD COLUMN publish JSONB;',
  },
  {
    version: 7,
    name: 'run leases and interruption counts',
    // A running run holds a lease its process renews (src/jobs/lease.ts); any instance takes over
    // a run whose lease ran out. Runs running when this is applied get the old staleness bound
    // (two minutes after their last update) as their lease.
    sqlite: `
      ALTER TABLE runs ADD COLUMN lease_until_ms INTEGER;
      ALTER TABLE runs ADD COLUMN interruptions INTEGER NOT NULL DEFAULT 0;
      UPDATE runs SET lease_until_ms = updated_ms + 120000 WHERE status = 'running';
      CREATE INDEX runs_running ON runs (status, lease_until_ms);
    `,
    postgres: `
      ALTER TABLE runs ADD COLUMN lease_until TIMESTAMPTZ;
      ALTER TABLE runs ADD COLUMN interruptions INTEGER NOT NULL DEFAULT 0;
      UPDATE runs SET lease_until = updated_at + interval '120 seconds' WHERE status = 'running';
      CREATE INDEX runs_running ON runs (lease_until) WHERE status = 'running';
    `,
  },
];
