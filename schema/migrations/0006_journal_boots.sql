-- nightcell store, migration 6: boots of different journals of one device never share a key.
-- A board whose flash is wiped or reflashed starts a new journal, and counts boots (and seqs) from 1 again. The raw
-- tables keep their key (device, boot, seq[, channel]), but `boot` there is this host's number for the boot: this
-- table names, for each, the journal it came from and the boot number the board gave it in that journal. The first
-- journal seen keeps the board's numbers; a boot of another journal whose number is taken here gets the next free
-- one. Numbers may differ between hosts: a merge translates them through this table, by (device, journal,
-- journal_boot), so merging stays idempotent. Every existing row is kept as it is: each (device, boot) stored so far
-- is recorded with its own number, from the journal its boots row names, else the device's only synced journal,
-- else 0 (unknown: taken to be the journal of a later record with the same boot number, as the old key did).

CREATE TABLE journal_boots (
    device TEXT NOT NULL,
    journal INTEGER NOT NULL,             -- journal id, 0 when unknown
    journal_boot INTEGER NOT NULL,        -- the boot number as the board counts it in that journal
    boot INTEGER NOT NULL,                -- the boot number the raw tables use on this host
    PRIMARY KEY (device, journal, journal_boot),
    UNIQUE (device, boot)
) WITHOUT ROWID;

INSERT INTO journal_boots(device, journal, journal_boot, boot)
SELECT k.device,
       coalesce(b.journal,
                (SELECT CASE WHEN count(*) = 1 THEN max(j.journal) END FROM journals j WHERE j.device = k.device),
                0),
       k.boot, k.boot
FROM (SELECT device, boot FROM boots UNION SELECT device, boot FROM samples UNION SELECT device, boot FROM marks
      UNION SELECT device, boot FROM mark_counts UNION SELECT device, boot FROM anchors
      UNION SELECT device, boot FROM events UNION SELECT device, boot FROM settings_records
      UNION SELECT device, boot FROM health) k
LEFT JOIN boots b ON b.device = k.device AND b.boot = k.boot;

CREATE TRIGGER journal_boots_immutable BEFORE UPDATE ON journal_boots BEGIN SELECT RAISE(ABORT, 'raw rows are never changed'); END;
CREATE TRIGGER journal_boots_kept BEFORE DELETE ON journal_boots BEGIN SELECT RAISE(ABORT, 'raw rows are never deleted'); END;
CREATE TRIGGER journal_boots_not_replaced BEFORE INSERT ON journal_boots
WHEN EXISTS (SELECT 1 FROM journal_boots WHERE device = NEW.device AND journal = NEW.journal AND journal_boot = NEW.journal_boot)
BEGIN SELECT RAISE(IGNORE); END;
