-- nightcell store, migration 4: every raw table refuses change, deletion and replacement.
-- Migration 1 guarded six raw tables against UPDATE and DELETE, but `INSERT OR REPLACE` deletes the stored row
-- without firing a delete trigger (SQLite's recursive_triggers is off by default), and settings_records and health
-- had no guard at all. A BEFORE INSERT trigger that skips any row whose identity is already stored (RAISE(IGNORE))
-- makes REPLACE keep the stored row, from any connection, while INSERT OR IGNORE (a re-sync, a merge) behaves as
-- before. Derived tables are untouched.

CREATE TRIGGER settings_records_immutable BEFORE UPDATE ON settings_records BEGIN SELECT RAISE(ABORT, 'raw rows are never changed'); END;
CREATE TRIGGER settings_records_kept BEFORE DELETE ON settings_records BEGIN SELECT RAISE(ABORT, 'raw rows are never deleted'); END;
CREATE TRIGGER health_immutable BEFORE UPDATE ON health BEGIN SELECT RAISE(ABORT, 'raw rows are never changed'); END;
CREATE TRIGGER health_kept BEFORE DELETE ON health BEGIN SELECT RAISE(ABORT, 'raw rows are never deleted'); END;

CREATE TRIGGER boots_not_replaced BEFORE INSERT ON boots
WHEN EXISTS (SELECT 1 FROM boots WHERE device = NEW.device AND boot = NEW.boot)
BEGIN SELECT RAISE(IGNORE); END;
CREATE TRIGGER samples_not_replaced BEFORE INSERT ON samples
WHEN EXISTS (SELECT 1 FROM samples WHERE device = NEW.device AND boot = NEW.boot AND seq = NEW.seq AND channel = NEW.channel)
BEGIN SELECT RAISE(IGNORE); END;
CREATE TRIGGER marks_not_replaced BEFORE INSERT ON marks
WHEN EXISTS (SELECT 1 FROM marks WHERE device = NEW.device AND boot = NEW.boot AND seq = NEW.seq)
BEGIN SELECT RAISE(IGNORE); END;
CREATE TRIGGER mark_counts_not_replaced BEFORE INSERT ON mark_counts
WHEN EXISTS (SELECT 1 FROM mark_counts WHERE device = NEW.device AND boot = NEW.boot AND seq = NEW.seq AND channel = NEW.channel)
BEGIN SELECT RAISE(IGNORE); END;
CREATE TRIGGER anchors_not_replaced BEFORE INSERT ON anchors
WHEN EXISTS (SELECT 1 FROM anchors WHERE device = NEW.device AND boot = NEW.boot AND seq = NEW.seq)
BEGIN SELECT RAISE(IGNORE); END;
CREATE TRIGGER events_not_replaced BEFORE INSERT ON events
WHEN EXISTS (SELECT 1 FROM events WHERE device = NEW.device AND boot = NEW.boot AND seq = NEW.seq)
BEGIN SELECT RAISE(IGNORE); END;
CREATE TRIGGER settings_records_not_replaced BEFORE INSERT ON settings_records
WHEN EXISTS (SELECT 1 FROM settings_records WHERE device = NEW.device AND boot = NEW.boot AND seq = NEW.seq)
BEGIN SELECT RAISE(IGNORE); END;
CREATE TRIGGER health_not_replaced BEFORE INSERT ON health
WHEN EXISTS (SELECT 1 FROM health WHERE device = NEW.device AND boot = NEW.boot AND seq = NEW.seq)
BEGIN SELECT RAISE(IGNORE); END;
