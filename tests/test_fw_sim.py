"""The simulated board behind a pseudo-terminal speaks the link protocol (schema/protocol.md), in MicroPython and
in CPython. Replies are decoded with the host's reference codec (host/nightcell/wire/frames.py), which is independent
of the firmware's encoders. The optics check uses the simulation formula of schema/simulation.md with the
Beer–Lambert transmittance T = 10^−A (common practice, no source needed).
"""

from __future__ import annotations

import json
import os
import pty
import select
import signal
import subprocess
import sys
import termios
import time
import tty
from pathlib import Path

import pytest

from support.fwharness import FIRMWARE, micropython
from nightcell.wire import frames as F


class SimProcess:
    def __init__(self, interp: str, cfg: Path):
        self.master, slave = pty.openpty()
        tty.setraw(slave)
        attrs = termios.tcgetattr(slave)
        attrs[3] &= ~termios.ECHO
        termios.tcsetattr(slave, termios.TCSANOW, attrs)
        self.proc = subprocess.Popen([interp, str(FIRMWARE / "sim_main.py"), str(cfg)], stdin=slave, stdout=slave,
                                     stderr=subprocess.PIPE, cwd=str(FIRMWARE))
        os.close(slave)
        self.reader = F.ReplyReader()
        self.tag = 0
        self.pending: list[F.Reply] = []

    def send(self, verb: str, *args, timeout: float = 20.0) -> F.Reply:
        self.tag += 1
        os.write(self.master, F.encode_request(self.tag, verb, *args))
        return self.wait(self.tag, timeout)

    def raw(self, data: bytes) -> None:
        os.write(self.master, data)

    def wait(self, tag: int, timeout: float = 20.0) -> F.Reply:
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            for fr in self.pending:
                if fr.tag == tag:
                    self.pending.remove(fr)
                    return fr
            r, _, _ = select.select([self.master], [], [], 0.1)
            if r:
                try:
                    self.reader.feed(os.read(self.master, 65536))
                except OSError:
                    break
                self.pending.extend(self.reader.frames())
        raise AssertionError(f"no reply to tag {tag}; stderr: {self._stderr()}")

    def ok(self, verb: str, *args):
        r = self.send(verb, *args)
        assert r.kind == F.REPLY_OK, (verb, r.text())
        return r.json()

    def _stderr(self) -> str:
        if self.proc.poll() is None:
            return "(still running)"
        return self.proc.stderr.read().decode(errors="replace")

    def journal(self) -> list[F.Record]:
        self.ok("flush")
        recs: list[F.Record] = []
        pos = self.ok("hello")["tail"]
        while True:
            r = self.send("read", pos, 4096)
            assert r.kind == F.REPLY_DATA, r.text()
            start, data = r.data()
            if not data:
                return recs
            recs.extend(F.iter_records(data, start))
            pos = start + len(data)

    def kill(self) -> None:
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait(10)
        self._close_master()

    def close(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait(10)
        self._close_master()

    def _close_master(self) -> None:
        # Once only: closed twice, the number may by then be another file's.
        fd, self.master = self.master, -1
        if fd >= 0:
            os.close(fd)


INTERPRETERS = ["micropython", "cpython"]


def _interp(name: str) -> str:
    return micropython() if name == "micropython" else sys.executable


def _config(tmp: Path, interp: str, **over) -> Path:
    cell = tmp / "cell.json"
    cell.write_text(json.dumps({"version": 1, "absorbance": 0.5}))
    cfg = {"device": "e66141040b123456", "flash": str(tmp / ("flash.img" if interp == "micropython" else "flash")),
           "flash_blocks": 96, "speed": 50, "seed": 7, "cell": str(cell),
           "settings": {"board": "sim", "interval_ms": 1000, "warmup_ms": 200, "marker_samples": 4,
                        "durability_ms": 3000},
           "optics": {"led_counts": 3000, "dark_counts": 100, "noise_counts": 0, "stray": 0.0,
                      "ambient_counts": 40}}
    cfg.update(over)
    p = tmp / "cfg.json"
    p.write_text(json.dumps(cfg))
    return p


@pytest.mark.parametrize("interp", INTERPRETERS)
def test_every_verb_answers_per_protocol(tmp_path, interp):
    sim = SimProcess(_interp(interp), _config(tmp_path, interp))
    try:
        hello = sim.ok("hello")
        for key in ("protocol", "device", "board", "firmware", "boot", "uptime_ms", "journal", "head", "tail",
                    "running", "label", "interval_ms", "free_bytes", "settings_crc"):
            assert key in hello, key
        assert hello["protocol"] == 1 and hello["device"] == "e66141040b123456" and hello["board"] == "sim"
        assert hello["boot"] == 1 and hello["running"] is False

        a = sim.ok("anchor", 1796131200123)
        assert a["boot"] == 1 and a["seq"] >= 2
        dark = sim.ok("dark")
        # noise 0: a dark read is dark_counts + ambient_counts = 140 per read, summed over 16 reads
        assert dark["reads"] == 16 and dark["dark"] == [16 * 140] and dark["light"] == [16 * 140]
        blank = sim.ok("blank", F.quote_text("water"))
        # cell A = 0.5, stray 0: light = 140 + 3000·10^−0.5 per read, each read quantised to whole counts
        # (schema/simulation.md)
        assert blank["light"] == [16 * round(140 + 3000 * 10 ** -0.5)]
        std = sim.ok("standard", "0.250", F.quote_text("dye 0.25 µM"))
        assert std["seq"] == blank["seq"] + 1
        opq = sim.ok("opaque")
        assert opq["reads"] == 16
        start = sim.ok("start", "run%201")
        assert sim.send("start").kind == F.REPLY_ERR  # a run is already going
        time.sleep(0.6)  # ~30 board seconds at speed 50
        st = sim.ok("status")
        assert st["running"] is True and st["samples"] >= 5 and st["last"]["reads"] == 16
        note = sim.ok("note", F.quote_text("100% done"))
        assert note["seq"] > start["seq"]
        head = sim.ok("flush")["head"]
        stop = sim.ok("stop")
        assert sim.ok("stop") == stop  # a repeated stop gets the same answer
        s = sim.ok("set", "interval_ms", 2000)
        assert s["settings"]["interval_ms"] == 2000
        assert sim.send("set", "interval_ms", 5).kind == F.REPLY_ERR
        assert sim.send("set", "colour", 1).kind == F.REPLY_ERR
        for bad in (["ack", head + 10 ** 6], ["read", "x", 10], ["read", 0, 5000], ["hop"], ["note"]):
            r = sim.send(*bad)
            assert r.kind == F.REPLY_ERR and r.text(), bad
        sim.raw(b"12 hello " + b"x" * 300 + b"\n")
        assert sim.wait(12).kind == F.REPLY_ERR

        recs = sim.journal()
        kinds = [r.kind_name for r in recs]
        assert kinds[:2] == ["boot", "settings"]
        marks = {r.fields["mark"]: r for r in recs if r.kind == F.KIND_MARK}
        assert marks[3].fields["value"] == "0.250" and marks[3].fields["label"] == "dye 0.25 µM"
        assert marks[2].fields["label"] == "water" and marks[6].fields["label"] == "100% done"
        assert marks[4].fields["label"] == "run 1" and 5 in marks and 7 in marks and 1 in marks
        assert any(r.kind == F.KIND_ANCHOR and r.fields["host_unix_ms"] == 1796131200123 for r in recs)
        samples = [s for r in recs for s in r.samples()]
        assert len(samples) >= 5
        seqs = [r.seq for r in recs]
        assert seqs == sorted(seqs) and len(set(seqs)) == len(seqs)
        for smp in samples:
            assert smp.dark == [16 * 140]
            assert smp.light == [16 * round(140 + 3000 * 10 ** -0.5)]
        # scheduled times are exactly one interval apart: the schedule does not drift
        run = [r for r in recs if r.kind == F.KIND_SAMPLES]
        for r in run:
            for i, smp in enumerate(r.samples()):
                assert smp.uptime_ms - smp.late_ms == r.uptime_ms + i * 1000

        # ack and anchor carry a check (schema/protocol.md): a value damaged on the way is refused, nothing changes
        pos = recs[-1].position
        good = F.check_field("ack", pos)
        damaged = sim.send("ack", pos + 1, good)
        assert damaged.kind == F.REPLY_ERR and "check field" in damaged.text()
        # an ack must carry its check: without one (noise that dropped it) the board trims nothing
        unchecked = sim.send("ack", pos)
        assert unchecked.kind == F.REPLY_ERR and "usage: ack <position> <check>" in unchecked.text()
        assert sim.send("anchor", 1796131200999, F.check_field("anchor", 1796131200123)).kind == F.REPLY_ERR
        assert sim.ok("anchor", 1796131200999, F.check_field("anchor", 1796131200999))["boot"] >= 1
        tail = sim.ok("ack", pos, good)["tail"]
        assert tail == 0  # one segment holds it all: nothing to trim yet
        assert not any(r.kind == F.KIND_ANCHOR and r.fields["host_unix_ms"] == 1796131200123 + 0 and r.seq > recs[-1].seq
                       for r in sim.journal())  # the refused anchor left no record

        assert sim.ok("reset") == {}
        assert sim.proc.wait(10) == 0
    finally:
        sim.close()

    sim = SimProcess(_interp(interp), _config(tmp_path, interp))
    try:
        recs = sim.journal()
        boots = [r for r in recs if r.kind == F.KIND_BOOT]
        assert [b.boot for b in boots] == [1, 2]
        assert boots[1].fields["reset_cause"] == 3  # deliberate: journaled before the reset
        assert any(r.kind == F.KIND_EVENT and r.fields["code"] == 5 for r in recs)
    finally:
        sim.close()


@pytest.mark.parametrize("interp", INTERPRETERS)
def test_sigkill_power_cut_keeps_samples_older_than_the_window(tmp_path, interp):
    cfg = _config(tmp_path, interp)
    sim = SimProcess(_interp(interp), cfg)
    try:
        sim.ok("start")
        time.sleep(1.0)  # ~50 board seconds, 1-s interval, 3-s durability window
        st = sim.ok("status")
        taken = st["last"]["seq"]
        sim.kill()
    finally:
        sim.close()
    sim = SimProcess(_interp(interp), cfg)
    try:
        hello = sim.ok("hello")
        assert hello["boot"] == 2 and hello["running"] is True  # the run carries on after the power cut
        time.sleep(0.3)
        recs = sim.journal()
        resumed = [r for r in recs if r.boot == 2 and r.kind == F.KIND_MARK and r.fields["mark"] == 4]
        assert resumed and resumed[0].fields["source"] == 2  # marked as resumed by the board itself
        seqs = {s.seq for r in recs if r.boot == 1 for s in r.samples()}
        # at most the durability window (3 samples at 1 s) plus the one in flight may be lost
        assert taken - max(seqs) <= 4, (taken, max(seqs))
        # no gap: every seq between the first and last sample is a sample or another record (on a busy machine a
        # late sample is journaled as an EVENT, which takes a seq of its own)
        others = {r.seq for r in recs if r.boot == 1 and r.kind != F.KIND_SAMPLES}
        assert set(range(min(seqs), max(seqs) + 1)) <= seqs | others
        assert any(r.kind == F.KIND_EVENT and r.fields["code"] == 3 for r in recs if r.boot == 2)
    finally:
        sim.close()


def test_bad_config_is_a_clear_error(tmp_path):
    bad = tmp_path / "cfg.json"
    bad.write_text("{not json")
    proc = subprocess.run([micropython(), str(FIRMWARE / "sim_main.py"), str(bad)], capture_output=True, text=True,
                          timeout=30)
    assert proc.returncode == 2 and "not valid JSON" in proc.stderr


def test_unmountable_image_is_refused_not_reformatted(tmp_path):
    img = tmp_path / "flash.img"
    junk = bytes(range(256)) * (16 * 96)
    img.write_bytes(junk)
    cfg = _config(tmp_path, "micropython")
    proc = subprocess.run([micropython(), str(FIRMWARE / "sim_main.py"), str(cfg)], capture_output=True, text=True,
                          timeout=30, stdin=subprocess.DEVNULL)
    assert proc.returncode == 3 and "does not mount" in proc.stderr
    assert img.read_bytes() == junk


@pytest.mark.parametrize("interp", INTERPRETERS)
def test_hold_journals_itself_and_leaves_the_one_shot_hold_file(tmp_path, interp):
    """`hold` (schema/protocol.md): the board journals EVENT 5 saying it was held, writes the hold file that makes
    main.py skip the watchdog and the logger for one boot, and resets."""
    cfg = _config(tmp_path, interp)
    sim = SimProcess(_interp(interp), cfg)
    try:
        assert sim.ok("hold") == {}
        assert sim.proc.wait(10) == 0
    finally:
        sim.close()
    sim = SimProcess(_interp(interp), cfg)
    try:
        recs = sim.journal()
        held = [r for r in recs if r.kind == F.KIND_EVENT and r.fields["code"] == 5]
        assert held and "held for maintenance" in held[-1].fields["text"]
        assert [r.fields["reset_cause"] for r in recs if r.kind == F.KIND_BOOT] == [0, 3]
    finally:
        sim.close()
    if interp == "cpython":  # the flash is a plain folder here: the hold file is visible
        assert (tmp_path / "flash" / "nc_hold").read_text().startswith("held by the host")
