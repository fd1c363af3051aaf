-- nightcell store, migration 1: raw rows from board journals, sync progress, derived results, readable views.
-- Raw tables are keyed by (device, boot, seq[, channel]) so syncing or merging the same rows twice adds nothing,
-- and triggers forbid changing or deleting them.

CREATE TABLE devices (
    device TEXT PRIMARY KEY,              -- stable id from the chip (hex)
    board TEXT,                           -- board profile (pico, esp32, sim ...)
    firmware TEXT,                        -- firmware version last seen
    label TEXT,                           -- the device's own label, from its settings
    first_seen_unix REAL,
    last_seen_unix REAL
);

-- Sync progress per journal: positions are byte offsets of the board's journal stream (schema/records.md).
CREATE TABLE journals (
    device TEXT NOT NULL REFERENCES devices(device),
    journal INTEGER NOT NULL,             -- journal id (random, made when the board's journal was created)
    stored_to INTEGER NOT NULL,           -- every record before this position is stored here
    acked_to INTEGER NOT NULL,            -- the board was told it may trim before this position
    updated_unix REAL,
    PRIMARY KEY (device, journal)
);

CREATE TABLE boots (
    device TEXT NOT NULL,
    boot INTEGER NOT NULL,
    seq INTEGER NOT NULL,
    uptime_ms INTEGER NOT NULL,
    reset_cause INTEGER NOT NULL,
    settings_crc INTEGER NOT NULL,
    firmware TEXT NOT NULL,
    board TEXT NOT NULL,
    journal INTEGER,                      -- where it was read from (provenance only)
    position INTEGER,
    PRIMARY KEY (device, boot)
) WITHOUT ROWID;

CREATE TABLE samples (
    device TEXT NOT NULL,
    boot INTEGER NOT NULL,
    seq INTEGER NOT NULL,
    channel INTEGER NOT NULL,
    uptime_ms INTEGER NOT NULL,           -- when it was taken (scheduled + late), ms since the boot began
    late_ms INTEGER NOT NULL,
    flags INTEGER NOT NULL,               -- bit 0 saturated, bit 1 ambient unstable
    reads INTEGER NOT NULL,               -- ADC reads summed into dark and light
    dark INTEGER NOT NULL,                -- sum of raw 12-bit counts, LED off
    light INTEGER NOT NULL,               -- sum of raw 12-bit counts, LED on
    temp_centi INTEGER,                   -- solution probe, centi-degrees C, NULL when absent
    PRIMARY KEY (device, boot, seq, channel)
) WITHOUT ROWID;

CREATE TABLE marks (
    device TEXT NOT NULL,
    boot INTEGER NOT NULL,
    seq INTEGER NOT NULL,
    uptime_ms INTEGER NOT NULL,
    mark TEXT NOT NULL,                   -- dark, blank, standard, run_start, run_stop, note, opaque
    source INTEGER NOT NULL,              -- 0 host, 1 button, 2 the board itself
    reads INTEGER NOT NULL,
    label TEXT NOT NULL,
    value TEXT NOT NULL,                  -- a standard's value exactly as typed
    PRIMARY KEY (device, boot, seq)
) WITHOUT ROWID;

CREATE TABLE mark_counts (
    device TEXT NOT NULL,
    boot INTEGER NOT NULL,
    seq INTEGER NOT NULL,
    channel INTEGER NOT NULL,
    dark INTEGER NOT NULL,
    light INTEGER NOT NULL,
    PRIMARY KEY (device, boot, seq, channel)
) WITHOUT ROWID;

CREATE TABLE anchors (
    device TEXT NOT NULL,
    boot INTEGER NOT NULL,
    seq INTEGER NOT NULL,
    uptime_ms INTEGER NOT NULL,
    host_unix_ms INTEGER NOT NULL,
    PRIMARY KEY (device, boot, seq)
) WITHOUT ROWID;

CREATE TABLE events (
    device TEXT NOT NULL,
    boot INTEGER NOT NULL,
    seq INTEGER NOT NULL,
    uptime_ms INTEGER NOT NULL,
    code INTEGER NOT NULL,
    text TEXT NOT NULL,
    PRIMARY KEY (device, boot, seq)
) WITHOUT ROWID;

CREATE TABLE settings_records (
    device TEXT NOT NULL,
    boot INTEGER NOT NULL,
    seq INTEGER NOT NULL,
    uptime_ms INTEGER NOT NULL,
    json TEXT NOT NULL,
    PRIMARY KEY (device, boot, seq)
) WITHOUT ROWID;

CREATE TABLE health (
    device TEXT NOT NULL,
    boot INTEGER NOT NULL,
    seq INTEGER NOT NULL,
    uptime_ms INTEGER NOT NULL,
    chip_temp_centi INTEGER NOT NULL,
    free_kb INTEGER NOT NULL,
    vsys_mv INTEGER NOT NULL,
    PRIMARY KEY (device, boot, seq)
) WITHOUT ROWID;

-- Raw rows are sacred.
CREATE TRIGGER boots_immutable BEFORE UPDATE ON boots BEGIN SELECT RAISE(ABORT, 'raw rows are never changed'); END;
CREATE TRIGGER boots_kept BEFORE DELETE ON boots BEGIN SELECT RAISE(ABORT, 'raw rows are never deleted'); END;
CREATE TRIGGER samples_immutable BEFORE UPDATE ON samples BEGIN SELECT RAISE(ABORT, 'raw rows are never changed'); END;
CREATE TRIGGER samples_kept BEFORE DELETE ON samples BEGIN SELECT RAISE(ABORT, 'raw rows are never deleted'); END;
CREATE TRIGGER marks_immutable BEFORE UPDATE ON marks BEGIN SELECT RAISE(ABORT, 'raw rows are never changed'); END;
CREATE TRIGGER marks_kept BEFORE DELETE ON marks BEGIN SELECT RAISE(ABORT, 'raw rows are never deleted'); END;
CREATE TRIGGER mark_counts_immutable BEFORE UPDATE ON mark_counts BEGIN SELECT RAISE(ABORT, 'raw rows are never changed'); END;
CREATE TRIGGER mark_counts_kept BEFORE DELETE ON mark_counts BEGIN SELECT RAISE(ABORT, 'raw rows are never deleted'); END;
CREATE TRIGGER anchors_immutable BEFORE UPDATE ON anchors BEGIN SELECT RAISE(ABORT, 'raw rows are never changed'); END;
CREATE TRIGGER anchors_kept BEFORE DELETE ON anchors BEGIN SELECT RAISE(ABORT, 'raw rows are never deleted'); END;
CREATE TRIGGER events_immutable BEFORE UPDATE ON events BEGIN SELECT RAISE(ABORT, 'raw rows are never changed'); END;
CREATE TRIGGER events_kept BEFORE DELETE ON events BEGIN SELECT RAISE(ABORT, 'raw rows are never deleted'); END;

-- Derived: wall-clock time of each boot (recomputed from anchors after every sync; see timeline.py).
CREATE TABLE boot_clocks (
    device TEXT NOT NULL,
    boot INTEGER NOT NULL,
    unix_at_zero REAL NOT NULL,           -- wall-clock seconds at uptime 0
    rate REAL NOT NULL,                   -- wall seconds per board second (1 + drift)
    anchors INTEGER NOT NULL,             -- how many anchors the clock rests on
    quality TEXT NOT NULL,                -- 'fitted' (>= 2 anchors), 'one-anchor', 'borrowed'
    residual_ms REAL,                     -- RMS of anchor residuals when fitted
    PRIMARY KEY (device, boot)
) WITHOUT ROWID;

-- Derived: results of analyses, each naming its inputs and choices.
CREATE TABLE results (
    id INTEGER PRIMARY KEY,
    kind TEXT NOT NULL,                   -- calibration, rate, orders, arrhenius ...
    label TEXT NOT NULL,
    created_unix REAL NOT NULL,
    nightcell_version TEXT NOT NULL,
    inputs_json TEXT NOT NULL,            -- which device/boot/seq ranges, blank, calibration, window, model
    result_json TEXT NOT NULL             -- FitResult.to_dict()
);

-- Readable views, units in the column names.
CREATE VIEW sample_readings AS
SELECT s.device, s.boot, s.seq, s.channel,
       s.uptime_ms / 1000.0 AS uptime_s,
       CASE WHEN c.device IS NULL THEN NULL
            ELSE c.unix_at_zero + c.rate * s.uptime_ms / 1000.0 END AS wall_clock_unix_s,
       CASE WHEN c.device IS NULL THEN NULL
            ELSE datetime(c.unix_at_zero + c.rate * s.uptime_ms / 1000.0, 'unixepoch') END AS wall_clock_utc,
       c.quality AS clock_quality,
       s.dark * 1.0 / s.reads AS dark_counts_per_read,
       s.light * 1.0 / s.reads AS light_counts_per_read,
       (s.light - s.dark) * 1.0 / s.reads AS signal_counts_per_read,
       s.temp_centi / 100.0 AS solution_temperature_C,
       s.late_ms AS late_ms,
       (s.flags & 1) AS saturated,
       (s.flags & 2) / 2 AS ambient_unstable
FROM samples s LEFT JOIN boot_clocks c ON c.device = s.device AND c.boot = s.boot;

CREATE VIEW mark_readings AS
SELECT m.device, m.boot, m.seq, m.mark, m.label, m.value,
       m.uptime_ms / 1000.0 AS uptime_s,
       CASE WHEN c.device IS NULL THEN NULL
            ELSE datetime(c.unix_at_zero + c.rate * m.uptime_ms / 1000.0, 'unixepoch') END AS wall_clock_utc,
       k.channel,
       CASE WHEN m.reads > 0 THEN k.dark * 1.0 / m.reads END AS dark_counts_per_read,
       CASE WHEN m.reads > 0 THEN k.light * 1.0 / m.reads END AS light_counts_per_read
FROM marks m
LEFT JOIN mark_counts k ON k.device = m.device AND k.boot = m.boot AND k.seq = m.seq
LEFT JOIN boot_clocks c ON c.device = m.device AND c.boot = m.boot;
