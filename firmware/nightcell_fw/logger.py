"""The main loop and run state: samples on a deadline schedule, keeps the journal, answers the host in between.

Owns the order of records within a boot (BOOT first, then SETTINGS; every record takes the next ``seq``; a SAMPLES
block holds a run of seqs). Never writes to the port except in reply to a request; every exception inside the loop
is caught and journaled (a traceback on stdout would corrupt the link), except KeyboardInterrupt, so that a
development tool can still stop the program.

Usage (``main.py`` for a real board, ``sim_main.py`` for the simulated one)::

    lg = Logger(board, settings, problem, root)
    lg.boot()
    lg.run()            # never returns on a board
"""

from micropython import const
from nightcell_fw import VERSION, records as R
from nightcell_fw.block import SampleBlock
from nightcell_fw.clock import Uptime, Schedule
from nightcell_fw.journal import Journal, JournalFull
from nightcell_fw.sampler import Sampler
from nightcell_fw.link import LineReader, Frames
from nightcell_fw.signals import Signals, Button, CODE_SETTINGS, CODE_FULL, CODE_ERROR
from nightcell_fw import settings as S
from nightcell_fw import commands
from nightcell_fw.faults import Faults

HEALTH_MIN_MS = const(600000)  # a HEALTH record rides on a block close at most every 10 min ...
HEALTH_MAX_MS = const(3600000)  # ... and is forced after an hour
_MAX_WAIT = const(1000)  # longest sleep between loop turns: the watchdog is fed every turn
# an interval must leave this much beyond one measurement for the loop itself (schema/settings.json)
from nightcell_fw.ranges import INTERVAL_MARGIN_MS as MARGIN_MS
SERVE_MS = const(2000)  # longest time one loop turn answers requests before it feeds, samples and signals again
HOLD_FILE = "/nc_hold"  # present at boot: stay in the REPL with the watchdog off, once (see main.py)


class Logger:
    def __init__(self, board, settings, problem, root):
        self.board = board
        self.settings = settings
        self.problem = problem
        self.root = root
        self.up = Uptime(board.ticks_ms)
        self.sch = Schedule()
        self.block = SampleBlock()
        self.enc = R.Encoder()
        self.sampler = Sampler(board)
        self.journal = Journal(root + "/nc", board.fs_free, board.rand32, settings["segment_bytes"])
        self.lines = LineReader(board.port)
        self.out = Frames(board.port)
        self.signals = Signals(board)
        self.button = Button(board)
        self.boot_id = 0
        self.seq = 0
        self.running = False
        self.samples = 0
        self.last_seq = -1
        self.unsynced_from = -1
        self.last_health = 0
        self.missed_full = 0
        self.stop_mark = None
        self.resume_label = None  # a run that was going when the power went: its start mark is written first
        self.faults = Faults()
        self.unsampled = 0  # slots not measured (late loop or a fault) and not yet journaled as an EVENT 6
        self.unsampled_at = 0  # uptime of the first of them
        self.measured = False  # this loop turn took a sample without a fault
        self.rate_head = -1  # journal bytes (head + open block) at the first sample of this run, for bytes/sample
        self.rate_samples = 0
        self.settings_crc = 0
        self._apply()
        try:
            self._fits(settings)
        except ValueError as e:  # a file written for a faster board: journaled (EVENT 2), and the interval made to fit
            need = self.measure_ms() + MARGIN_MS
            self.problem = "%s%s; interval_ms %d used" % (problem + "; " if problem else "", e, need)
            self.settings = dict(settings, interval_ms=need)
            self._apply()

    # -- settings ---------------------------------------------------------------------------------------------------

    def _apply(self):
        s = self.settings
        self.text = S.canonical(s)
        self.settings_crc = R.crc32(self.text.encode("utf-8"))
        self.sampler.configure(s["reads"], s["settle_ms"], self.board.channels, s["dark_limit"], s["window_ms"])
        self.journal.segment_bytes = s["segment_bytes"]

    def change(self, key, value):
        """Validate and save one setting; sampling keys apply from the next sample, hardware keys after a reset."""
        S.check(key, value)
        new = S.validate(dict(self.settings, **{key: value}))
        self._fits(new)
        self.close_block()
        S.save(self.root + "/settings.json", new)
        self.settings = new
        self._apply()
        if key == "interval_ms" and self.sch.active:
            self.sch.rebase(value)
        later = key in S.HARDWARE_KEYS
        self.event(R.EVENT_SETTINGS_CHANGED, "%s=%s%s" % (key, S.canonical(value), " (applies after reset)" if later else ""))
        self.write(R.settings(self.enc, self.boot_id, self.seq, self.now(), self.text))
        self.problem = None
        self.signals.clear(CODE_SETTINGS)
        return later

    def measure_ms(self, s=None):
        """Board ms one measurement takes with settings ``s`` (default: those in force) on this board."""
        sm = self.sampler
        if s is None:
            return sm.duration_ms()
        keep = (sm.reads, sm.settle_ms, sm.channels, sm.dark_limit, sm.window_ms)
        sm.configure(s["reads"], s["settle_ms"], self.board.channels, s["dark_limit"], s["window_ms"])
        ms = sm.duration_ms()
        sm.configure(*keep)
        return ms

    def _fits(self, s):
        ms = self.measure_ms(s)
        if s["interval_ms"] < ms + MARGIN_MS:
            raise ValueError("interval_ms %d is shorter than one measurement on this board (%d ms with reads=%d, "
                             "settle_ms=%d, window_ms=%d) plus %d ms: choose at least %d, or fewer reads"
                             % (s["interval_ms"], ms, s["reads"], s["settle_ms"], s["window_ms"], MARGIN_MS,
                                ms + MARGIN_MS))

    # -- records ----------------------------------------------------------------------------------------------------

    def now(self):
        return self.up.tick()

    def write(self, rec, force=False):
        """Append a non-sample record (the open block is closed first by the caller's ``close_block``)."""
        self.journal.append(rec, force)
        self.seq += 1

    def event(self, code, text, force=False):
        self.close_block()
        try:
            self.write(R.event(self.enc, self.boot_id, self.seq, self.now(), code, text), force)
            return True
        except JournalFull:
            self._full()
            return False

    def close_block(self):
        """Write the open SAMPLES block into the journal (its samples become readable)."""
        b = self.block
        if not b.is_open():
            return
        if b.count:
            try:
                self.journal.append(b.record())
            except JournalFull:
                # keep the block durable beside the journal; it is appended when an ack frees room
                self.journal.save_open(b.record())
                self.journal.pending_left = True
                self._full()
            self.seq = b.end_seq()
        b.close()
        self.unsynced_from = -1
        if self.running and self.now() - self.last_health >= HEALTH_MIN_MS:
            self.health()

    def health(self):
        self.last_health = self.now()
        b = self.board
        try:
            self.write(R.health(self.enc, self.boot_id, self.seq, self.last_health, b.chip_temp_centi(),
                                self.journal.free_bytes() // 1024, b.vsys_mv()))
        except JournalFull:
            self._full()

    def _full(self):
        if not self.signals.active(CODE_FULL):
            self.signals.set(CODE_FULL)
            try:
                self.write(R.event(self.enc, self.boot_id, self.seq, self.now(), R.EVENT_FLASH_FULL,
                                   "journal full: logging stopped until the host acknowledges data"), True)
            except JournalFull:
                pass

    def mark(self, kind, source, label="", value="", measure=True, lit=True):
        """Measure (averaged over ``marker_samples``) and journal a MARK; returns its seq."""
        s = self.sampler
        n = self.board.channels if measure else 0
        reads = self.settings["reads"] if measure else 0
        if measure:
            self.board.before_measure(self.now())
            s.average(self.settings["marker_samples"], lit)
        self.close_block()
        seq = self.seq
        self.write(R.mark(self.enc, self.boot_id, seq, self.now(), kind, source, reads,
                          s.avg_dark[:n], s.avg_light[:n], label, value))
        return seq, reads, n

    # -- boot -------------------------------------------------------------------------------------------------------

    def boot(self):
        j = self.journal
        torn, restored = j.open()
        self.boot_id = j.next_boot()
        cause = self.board.reset_cause()
        if j.last_kind == R.KIND_EVENT and j.last_code == R.EVENT_RESET:
            cause = 3  # we journaled the reset ourselves: not a crash
        b = self.board
        try:
            self.write(R.boot(self.enc, self.boot_id, 0, self.now(), cause, self.settings_crc, VERSION,
                              b.device_id(), b.name), True)
            self.write(R.settings(self.enc, self.boot_id, self.seq, self.now(), self.text), True)
        except JournalFull:
            self._full()
        if self.problem:
            self.signals.set(CODE_SETTINGS)
            self.event(R.EVENT_SETTINGS_INVALID, self.problem, True)
        if torn or restored:
            self.event(R.EVENT_RECOVERED, "cut %d torn bytes; restored %d samples of the open block"
                       % (torn, restored), True)
        if j.full:
            self._full()
        if b.fault:
            self.on_error(OSError(b.fault))  # e.g. a sensor that did not answer: journaled, retried with back-off
        self.last_health = self.now()
        label = j._get_small("run")
        if label is not None:
            # the power went during a run: carry on logging (marked as resumed by the board itself)
            self.resume_label = label.decode("utf-8", "replace") if label else ""
            self._begin()

    # -- the run ----------------------------------------------------------------------------------------------------

    def start_run(self, source, label):
        if self.running:
            raise ValueError("a run is already going: stop it first")
        self.close_block()
        seq = self.seq
        self.write(R.mark(self.enc, self.boot_id, seq, self.now(), R.MARK_RUN_START, source, 0, (), (), label, ""))
        self.journal._put_small("run", label.encode("utf-8"))  # so that a power cut does not end the run
        self._begin()
        return seq

    def growth(self):
        """(journal bytes per sample measured in this run, or None before 20 samples; seconds until the journal is
        full at that rate and the interval in force, or None). Everything the run writes counts: blocks, events,
        health records."""
        n = self.samples - self.rate_samples
        if self.rate_head < 0 or n < 20:
            return None, None
        bps = (self.journal.head + self.block.size - self.rate_head) / n
        if bps <= 0:
            return None, None
        full_in = None
        if self.running:
            full_in = int(self.journal.free_bytes() / bps * self.settings["interval_ms"] / 1000)
        return round(bps, 3), full_in

    def _begin(self):
        self.rate_head = -1
        self.running = True
        self.signals.running = True
        self.sampler.restart()
        self.board.leds_off()  # the LED is lit only in a measurement's pulses (sampler.py): the same for marks
        self.sch.start(self.now() + self.settings["warmup_ms"], self.settings["interval_ms"])

    def stop_run(self, source):
        if not self.running:
            if self.stop_mark is not None:
                return self.stop_mark  # a repeated stop: the same answer
            raise ValueError("no run is going")
        self.running = False
        self.signals.running = False
        self.sch.stop()
        self.board.leds_on(False)
        self.close_block()
        seq = self.seq
        self.write(R.mark(self.enc, self.boot_id, seq, self.now(), R.MARK_RUN_STOP, source, 0, (), (), "", ""))
        self.journal.forget("run")
        self.resume_label = None
        self.stop_mark = seq
        return seq

    def _missed(self, n, t):
        if n and not self.unsampled:
            self.unsampled_at = t
        self.unsampled += n

    def skip(self, now):
        """A slot is due inside a fault's back-off: count it as skipped (journaled when sampling works again)."""
        sch = self.sch
        t = sch.take(now)
        self._missed(sch.skipped + 1, t - sch.skipped * sch.interval)

    def sample(self, now):
        sch = self.sch
        t = sch.take(now)
        self._missed(sch.skipped, t - sch.skipped * sch.interval)
        b = self.board
        try:
            b.before_measure(now)
            flags = self.sampler.measure()
            temp = b.temperature()
        except Exception:  # noqa: BLE001 — counted here, journaled by on_error
            self._missed(1, t)
            raise
        self.measured = True
        late = now - t
        if self.unsampled:
            n = self.unsampled
            self.unsampled = 0
            self.event(R.EVENT_LATE, "%d samples skipped: the loop was %d ms late" % (n, now - self.unsampled_at))
            self.sampler.restart()
        if self.journal.full:
            self.missed_full += 1
            return
        if self.resume_label is not None:
            self.write(R.mark(self.enc, self.boot_id, self.seq, t, R.MARK_RUN_START, 2, 0, (), (),
                              self.resume_label, "resumed"))
            self.resume_label = None
        blk = self.block
        s = self.settings
        if self.rate_head < 0:
            self.rate_head = self.journal.head + blk.size
            self.rate_samples = self.samples
        if not blk.is_open():
            blk.open(self.boot_id, self.seq, t, sch.interval, s["reads"], b.channels, b.has_probe)
        blk.add(late, flags, self.sampler.dark, self.sampler.light, temp)
        self.samples += 1
        self.last_seq = blk.seq + blk.count - 1
        if blk.full():
            self.close_block()
            return
        if self.unsynced_from < 0:
            self.unsynced_from = t
        if sch.next_time() - self.unsynced_from >= s["durability_ms"]:
            self.journal.save_open(blk.record())
            self.unsynced_from = -1

    # -- the loop ---------------------------------------------------------------------------------------------------

    def serve(self):
        """Answer what arrived, feeding the watchdog per request (a reply to a port nobody reads can block ~0.5 s),
        until nothing waits, a sample is due, or ``SERVE_MS`` has passed."""
        b = self.board
        start = self.now()
        while True:
            line = self.lines.poll()
            if line is None:
                return
            b.feed()
            commands.handle(self, line)
            b.feed()
            now = self.now()
            if self.running and self.sch.until(now) <= 0 or now - start >= SERVE_MS:
                return

    def step(self):
        """One turn: feed the watchdog, sample if due, answer what arrived, then wait for input or the deadline."""
        b = self.board
        b.feed()
        self.measured = False
        now = self.now()
        if self.running and self.sch.until(now) <= 0:
            if self.faults.waiting(now):
                self.skip(now)
            else:
                self.sample(now)
        self.serve()
        now = self.now()
        self.button.poll(self, now)
        self.signals.show(now)
        if self.running and now - self.last_health >= HEALTH_MAX_MS:
            self.close_block()
            self.health()
        wait = _MAX_WAIT
        if self.running:
            wait = min(wait, self.sch.until(now))
        if b.fast_poll or self.signals.busy():
            wait = min(wait, 50)
        if wait > 0:
            b.wait_input(wait)

    def run(self, turns=-1):
        """Loop forever (or ``turns`` times in tests); every exception is journaled, never printed."""
        f = self.faults
        while turns != 0:
            turns -= 1
            try:
                self.step()
                if f.backoff and not f.waiting(self.now()) and (self.measured or not self.running):
                    n = f.clear()  # a sample (or, idle, a turn) past the back-off without failing: the fault is gone
                    if n:
                        self.event(R.EVENT_EXCEPTION, "cleared after %d more failures since the last record" % n)
            except KeyboardInterrupt:
                raise
            except Exception as e:  # noqa: BLE001 — the link must never see a traceback
                self.on_error(e)

    def on_error(self, e):
        """Show the fault (blink code 4), start or lengthen its back-off, and journal it once per back-off interval
        with the count of repeats it stands for; never raises."""
        self.signals.set(CODE_ERROR)
        try:
            self.board.leds_off()
        except Exception:  # noqa: BLE001
            pass
        f = self.faults
        now = self.now()
        if not f.failed(now):
            return
        n = f.journaled()
        try:
            self.event(R.EVENT_EXCEPTION, "%s: %s (%d more since the last record; retry in %d s)"
                       % (type(e).__name__, e, n, f.backoff // 1000))
        except Exception:  # noqa: BLE001 — a journal that cannot be written: still retried, still shown
            pass

    def reset(self, hold=False):
        """Journal the reset (so it is not mistaken for a crash), then reset. With ``hold`` the next boot stays in the
        REPL with the watchdog off, once, so a firmware update can be copied (``main.py`` reads the hold file)."""
        self.close_block()
        if hold:
            with open(self.root + HOLD_FILE, "w") as f:
                f.write("held by the host for maintenance\n")
        self.event(R.EVENT_RESET, "held for maintenance by the host" if hold else "reset requested by the host", True)
        self.journal.close()
        self.board.reset()

