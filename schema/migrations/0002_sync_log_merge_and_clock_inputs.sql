-- nightcell store, migration 2: a log of syncs and merges, the conflicts a merge found, the inputs of each boot clock,
-- and more readable views. Nothing here touches raw rows.

-- Which anchors a boot clock rests on (JSON list of their seq), so the derived row names its inputs.
ALTER TABLE boot_clocks ADD COLUMN anchor_seqs_json TEXT;

-- One row per sync of one board (provenance and the history a teacher looks at after class).
CREATE TABLE sync_sessions (
    id INTEGER PRIMARY KEY,
    device TEXT NOT NULL,
    journal INTEGER NOT NULL,
    host TEXT NOT NULL,                   -- the computer that ran the sync
    port TEXT NOT NULL,                   -- the serial port or URL it used
    started_unix REAL NOT NULL,
    seconds REAL NOT NULL,
    from_position INTEGER NOT NULL,
    to_position INTEGER NOT NULL,
    bytes INTEGER NOT NULL,               -- journal bytes pulled
    records INTEGER NOT NULL,
    new_rows INTEGER NOT NULL,
    acked_to INTEGER NOT NULL
);

-- One row per merge of another database into this one.
CREATE TABLE merges (
    id INTEGER PRIMARY KEY,
    source TEXT NOT NULL,                 -- path of the database merged in
    merged_unix REAL NOT NULL,
    new_rows_json TEXT NOT NULL,          -- new rows per table
    conflicts INTEGER NOT NULL
);

-- Rows of a merged database that disagree with rows already here: kept out, never overwritten, listed for a person.
CREATE TABLE merge_conflicts (
    merge_id INTEGER NOT NULL REFERENCES merges(id),
    table_name TEXT NOT NULL,
    identity_json TEXT NOT NULL,          -- the row's key, e.g. {"device": .., "boot": .., "seq": ..}
    here_json TEXT NOT NULL,              -- the row as it is in this database (kept)
    there_json TEXT NOT NULL              -- the row as it is in the merged database (not taken)
);

CREATE VIEW sync_history AS
SELECT id, device, journal, host, port,
       datetime(started_unix, 'unixepoch') AS started_utc,
       seconds AS duration_s,
       from_position, to_position, bytes AS journal_bytes, records, new_rows,
       CASE WHEN seconds > 0 THEN bytes / seconds END AS rate_bytes_per_s,
       acked_to
FROM sync_sessions;

CREATE VIEW anchor_readings AS
SELECT a.device, a.boot, a.seq,
       a.uptime_ms / 1000.0 AS uptime_s,
       a.host_unix_ms / 1000.0 AS host_unix_s,
       datetime(a.host_unix_ms / 1000, 'unixepoch') AS host_utc,
       CASE WHEN c.device IS NULL THEN NULL
            ELSE (a.host_unix_ms / 1000.0 - (c.unix_at_zero + c.rate * a.uptime_ms / 1000.0)) * 1000.0
       END AS fit_residual_ms,
       c.quality AS clock_quality
FROM anchors a LEFT JOIN boot_clocks c ON c.device = a.device AND c.boot = a.boot;

CREATE VIEW boot_overview AS
SELECT b.device, b.boot, b.reset_cause, b.firmware, b.board,
       c.quality AS clock_quality, c.anchors AS clock_anchors,
       (c.rate - 1.0) * 1e6 AS clock_drift_ppm,
       c.residual_ms AS clock_residual_ms,
       CASE WHEN c.device IS NULL THEN NULL ELSE datetime(c.unix_at_zero, 'unixepoch') END AS boot_started_utc,
       (SELECT count(*) FROM samples s WHERE s.device = b.device AND s.boot = b.boot AND s.channel = 0) AS samples
FROM boots b LEFT JOIN boot_clocks c ON c.device = b.device AND c.boot = b.boot;
