-- nightcell store, migration 3: the conditions of a run that the people running it know (its temperature, the
-- starting concentrations), keyed by the run's identity (the device and the boot and seq of its start mark).
-- Not raw data: an entry typed again for the same run and quantity replaces the earlier one, and every row names
-- where it came from. Nothing here touches raw rows.

CREATE TABLE run_conditions (
    device TEXT NOT NULL,
    start_boot INTEGER NOT NULL,
    start_seq INTEGER NOT NULL,           -- the run's start mark; its key is device:start_boot:start_seq
    quantity TEXT NOT NULL,               -- temperature_K, or conc_<reactant>_M (mol/L at the start of the run)
    value REAL NOT NULL,
    source TEXT NOT NULL,                 -- who said so (a bench sheet typed in, a scenario, a probe's mean ...)
    recorded_unix REAL NOT NULL,
    PRIMARY KEY (device, start_boot, start_seq, quantity)
) WITHOUT ROWID;

CREATE VIEW run_condition_readings AS
SELECT device || ':' || start_boot || ':' || start_seq AS run_key, device, start_boot, start_seq, quantity,
       value,
       CASE WHEN quantity = 'temperature_K' THEN value - 273.15 END AS temperature_C,
       source,
       datetime(recorded_unix, 'unixepoch') AS recorded_utc
FROM run_conditions;
