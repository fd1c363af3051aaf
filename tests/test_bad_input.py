"""Bad input, table-driven: every row names the input, the command or function it goes to, the documented exit code
(or exception) and a fragment of the message, and checks that the database is unchanged afterwards (row counts and a
hash of every row of every table, taken before and after).

Inputs cover the CLI, CSV import, settings files (the board's ``settings.json``, read by the firmware's own loader),
database files (truncated, wrong schema, newer version, read-only, locked, a folder), the serial side (nothing on
the port, another device talking, garbage, a board that vanishes in the middle of a command, a foreign protocol) and
hostile labels. Exit codes are the README's table (2 bad input, 3 board, 4 database, 5 analysis, 1 usage).

The database every row runs against is built here from encoded journal records (the layout of schema/records.md):
a boot with two clock anchors, a dark, a blank, five standards and a 40-sample first-order run — numbers invented
for the test, as the demo's are (they are not checked against anything; the rows check refusals).
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import pty
import shutil
import sqlite3
import struct
import sys
import threading
import time
import tty
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import pytest
from click.testing import CliRunner

from nightcell.wire import frames as F
from nightcell.wire import link as link_module
from nightcell.store import database as store_module
from nightcell.cli import cli
from nightcell.errors import StoreError
from nightcell.store.database import Store
from nightcell.store.clocks import rebuild_clocks
from nightcell.render.numbers import local_time

ROOT = Path(__file__).resolve().parent.parent
DEVICE = "5eba000000000007"
RUN_LABEL = "fading 25 C"
TAKEN = local_time(1_796_000_003, seconds=False)
"""The minute, in this computer's zone, when the journal's blank and standards were taken (1_796_000_002 to 008 s,
all in one minute): errors name a mark by its label and this time, not by its key."""


# -- a database built from journal records ---------------------------------------------------------------------------

def journal_records(device: str = DEVICE, run_label: str = RUN_LABEL, blank_label: str = "water",
                    n_samples: int = 40, *, blanks: tuple[float | None, ...] = (0.0,),
                    standards: tuple[tuple[str, float], ...] | None = None, curve: Callable[[int], float] | None = None,
                    opaque: float | None = None, blank_light: float | None = None,
                    standard_set: str | None = None) -> list[bytes]:
    """Encoded records of one boot: anchors, dark, blank, five standards, a run of ``n_samples`` and its stop.

    Variants for the guards' rows: ``blanks`` (absorbance of each blank against the LED, in order; the last is the
    run's), ``blank_light`` (the last blank's light in counts per read, e.g. a blocked path), ``standards``
    ((value as typed, absorbance) each), ``curve`` (absorbance of sample i) and ``opaque`` (an opaque mark's
    absorbance, read before the run) and ``standard_set`` (a set=NAME token in every standard's label)."""
    recs: list[bytes] = []
    seq = 0
    up = 0

    def add(kind: int, fields: dict[str, Any], step: int = 1000, count: int = 1) -> None:
        nonlocal seq, up
        recs.append(F.encode_record(kind, 1, seq, up, fields))
        seq += count
        up += step

    add(F.KIND_BOOT, {"reset_cause": 0, "settings_crc": 1, "firmware": "0.1.0", "device": device, "board": "sim"})
    add(F.KIND_ANCHOR, {"host_unix_ms": 1_796_000_000_000 + up})
    led, dark, reads = 3000, 100, 16

    def mark(kind_mark: int, absorbance: float | None, label: str, value: str = "") -> None:
        light = dark if absorbance is None else dark + led * 10 ** (-absorbance)
        add(F.KIND_MARK, {"mark": kind_mark, "source": 0, "reads": reads, "dark": [dark * reads],
                          "light": [int(round(light * reads))], "label": label, "value": value})

    mark(1, None, "lid on")
    for i, blank_a in enumerate(blanks):
        if i == len(blanks) - 1 and blank_light is not None:
            add(F.KIND_MARK, {"mark": 2, "source": 0, "reads": reads, "dark": [dark * reads],
                              "light": [int(round(blank_light * reads))], "label": blank_label, "value": ""})
        else:
            mark(2, blank_a, blank_label)
    for value, absorbance in (standards if standards is not None
                              else tuple((str(c), 0.075 * c) for c in (2, 4, 6, 8, 10))):
        mark(3, absorbance, f"dye {value}" + (f" set={standard_set}" if standard_set else ""), value)
    if opaque is not None:
        mark(7, opaque, "black card")
    add(F.KIND_MARK, {"mark": 4, "source": 0, "reads": 0, "dark": [], "light": [], "label": run_label,
                      "value": ""})
    samples = []
    for i in range(n_samples):
        a = 0.05 + 0.6 * math.exp(-0.02 * 2.0 * i) if curve is None else curve(i)
        samples.append({"late_ms": 0, "flags": 0, "dark": [dark * reads],
                        "light": [int(round((dark + led * 10 ** (-a)) * reads))]})
    add(F.KIND_SAMPLES, {"interval_ms": 2000, "reads": reads, "channels": 1, "options": 0, "samples": samples},
        step=2000 * n_samples, count=n_samples)
    add(F.KIND_MARK, {"mark": 5, "source": 0, "reads": 0, "dark": [], "light": [], "label": "", "value": ""})
    add(F.KIND_ANCHOR, {"host_unix_ms": 1_796_000_000_000 + up})
    return recs


SCRIPTED_JOURNAL = 0x5C0FF1ED
"""The journal id a ``ScriptedBoard`` reports: the stored databases hold that journal, so a scripted board whose
records differ from them replays its keys with other content (a forged board), not a new journal."""


def store_as_synced(path: Path, device: str, records: list[F.Record], label: str = "bench") -> Path:
    """A nightcell database holding decoded journal ``records`` of ``device`` (labelled ``label``), as a sync of the
    scripted board's journal (``SCRIPTED_JOURNAL``) would have stored them."""
    with Store.open(path) as store:
        with store.write():
            store.touch_device(device, board="sim", firmware="0.1.0", label=label)
            store.ingest(device, records, journal=SCRIPTED_JOURNAL)
            rebuild_clocks(store, device)
    return path


def make_db(path: Path, **kwargs: Any) -> Path:
    """A nightcell database holding ``journal_records(**kwargs)``."""
    records = [F.decode_record(r)[0] for r in journal_records(**kwargs)]
    return store_as_synced(path, records[0].fields["device"], records)


def snapshot(path: Path) -> dict[str, tuple[int, str]]:
    """What must not change: for a SQLite file, (row count, sha256 of every row) per table, its schema, the result of
    an integrity check and the header's first 24 bytes (format, page size, and the journal-mode bytes a WAL switch
    would rewrite); for any other file, every byte.

    The page layout of a SQLite file is not compared: SQLite may rewrite it with no change of content (a checkpoint
    folding in a write-ahead log, which truncates the file to its last page). A file SQLite cannot read is compared
    byte for byte — a damaged or foreign file must be left exactly as it was.
    """
    if not path.is_file():
        return {"<no file>": (0, "")}
    raw = path.read_bytes()
    whole = {"<file bytes>": (len(raw), hashlib.sha256(raw).hexdigest())}
    if not raw.startswith(b"SQLite format 3\x00"):
        return whole
    out: dict[str, tuple[int, str]] = {"<header 0-23>": (24, raw[:24].hex())}
    try:
        con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
        try:
            schema = sorted(con.execute("SELECT type, name, tbl_name, sql FROM sqlite_master").fetchall(), key=repr)
            out["<schema>"] = (len(schema), hashlib.sha256(repr(schema).encode()).hexdigest())
            out["<integrity>"] = (0, con.execute("PRAGMA integrity_check").fetchone()[0])
            for name in sorted(r[1] for r in schema if r[0] == "table"):
                rows = sorted(con.execute(f'SELECT * FROM "{name}"').fetchall(), key=repr)
                out[name] = (len(rows), hashlib.sha256(repr(rows).encode()).hexdigest())
        finally:
            con.close()
    except sqlite3.DatabaseError:
        return whole  # truncated or damaged: every byte must stay
    return out


@pytest.fixture(scope="module")
def template(tmp_path_factory) -> Path:
    return make_db(tmp_path_factory.mktemp("template") / "good.db")


# -- files a row may need -----------------------------------------------------------------------------------------

def _csv(text: str | bytes) -> Callable[[Path], Path]:
    def make(d: Path) -> Path:
        p = d / "input.csv"
        p.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8"))
        return p
    return make


GOOD_CAL = "concentration,absorbance\n0,0.01\n2,0.16\n4,0.31\n6,0.46\n8,0.61\n"


def _fifo(d: Path) -> Path:
    p = d / "pipe.csv"
    os.mkfifo(p)
    return p


def _truncated(template: Path, d: Path) -> Path:
    p = d / "truncated.db"
    raw = template.read_bytes()
    p.write_bytes(raw[: len(raw) // 3])
    return p


def _foreign(template: Path, d: Path) -> Path:
    p = d / "foreign.db"
    con = sqlite3.connect(p)
    con.execute("CREATE TABLE inventory (item TEXT, qty INTEGER)")
    con.execute("INSERT INTO inventory VALUES ('cuvettes', 100)")
    con.commit()
    con.close()
    return p


def _newer(template: Path, d: Path) -> Path:
    p = d / "newer.db"
    shutil.copy(template, p)
    con = sqlite3.connect(p)
    con.execute("INSERT INTO _sqlite_migrations (migration_set, name, applied_at) VALUES "
                "('nightcell', '0099_from_the_future', '2031-01-01')")
    con.commit()
    con.close()
    return p


def _text_file(template: Path, d: Path) -> Path:
    p = d / "notes.db"
    p.write_text("these are my notes, not a database\n" * 50)
    return p


def _damaged(template: Path, d: Path) -> Path:
    """The template with the root page of its samples table overwritten: every other table still reads."""
    p = d / "damaged.db"
    shutil.copy(template, p)
    con = sqlite3.connect(f"file:{template}?mode=ro", uri=True)
    root, size = con.execute("SELECT rootpage FROM sqlite_master WHERE name = 'samples'").fetchone()[0], \
        con.execute("PRAGMA page_size").fetchone()[0]
    con.close()
    raw = bytearray(p.read_bytes())
    raw[(root - 1) * size: root * size] = b"\x5a" * size
    p.write_bytes(bytes(raw))
    return p


def _empty_file(template: Path, d: Path) -> Path:
    p = d / "empty.db"
    p.write_bytes(b"")
    return p


def _user_version_99(template: Path, d: Path) -> Path:
    p = d / "marked.db"
    shutil.copy(template, p)
    con = sqlite3.connect(p)
    con.execute("PRAGMA user_version = 99")
    con.close()
    return p


def _copy(template: Path, d: Path) -> Path:
    p = d / "class.db"
    shutil.copy(template, p)
    return p


# -- a fake device on a pseudo-terminal ------------------------------------------------------------------------------

class FakePort:
    """A pty whose far end is played by ``behaviour(line) -> bytes | None`` (None: vanish — close the pty)."""

    def __init__(self, behaviour: Callable[[bytes], bytes | None] | None, chatter: bytes = b""):
        self.master, slave = pty.openpty()
        tty.setraw(slave)
        self.path = os.ttyname(slave)
        self._slave = slave
        self.behaviour = behaviour
        self.chatter = chatter
        self.lines: list[bytes] = []
        self._stop = threading.Event()
        self._lock = threading.Lock()
        self._thread = threading.Thread(target=self._serve, daemon=True)
        self._thread.start()

    def _serve(self) -> None:
        import select

        buf = b""
        while not self._stop.is_set():
            if self.chatter:
                try:
                    os.write(self.master, self.chatter)
                except OSError:
                    return
            r, _, _ = select.select([self.master], [], [], 0.05)
            if not r:
                continue
            try:
                data = os.read(self.master, 4096)
            except OSError:
                return
            buf += data
            while b"\n" in buf:
                line, buf = buf.split(b"\n", 1)
                self.lines.append(line)
                if self.behaviour is None:
                    continue
                reply = self.behaviour(line)
                if reply is None:
                    self.close()
                    return
                try:
                    os.write(self.master, reply)
                except OSError:
                    return

    def close(self) -> None:
        """Close both ends once. The serving thread is stopped first (it may call this itself, to vanish): a file
        descriptor closed twice, or used after its close, may by then belong to another file — the database."""
        self._stop.set()
        if threading.current_thread() is not self._thread:
            self._thread.join(timeout=10)
            assert not self._thread.is_alive(), "the fake port's thread did not stop"
        with self._lock:
            fds, self.master, self._slave = (self.master, self._slave), -1, -1
        for fd in fds:
            if fd >= 0:
                os.close(fd)


HELLO = {"protocol": 1, "device": DEVICE, "board": "sim", "firmware": "0.1.0", "boot": 1, "uptime_ms": 5,
         "journal": 1, "head": 0, "tail": 0, "running": True, "label": "", "interval_ms": 2000,
         "free_bytes": 10 ** 6, "settings_crc": 1}


def board_then_vanish(vanish_on: str, hello: dict[str, Any] | None = None) -> Callable[[bytes], bytes | None]:
    """Answers ``hello`` (with ``hello``), then vanishes when the verb ``vanish_on`` arrives."""
    info = HELLO if hello is None else hello

    def behaviour(line: bytes) -> bytes | None:
        tag, verb = line.decode("ascii", "replace").split(" ")[:2]
        if verb == vanish_on:
            return None
        if verb == "hello":
            return F.encode_reply(F.REPLY_OK, int(tag), json.dumps(info).encode())
        return F.encode_reply(F.REPLY_OK, int(tag), b"{}")
    return behaviour


def echo_other_device(line: bytes) -> bytes:
    """Another device: a serial console that echoes and answers in its own words."""
    return line + b"\r\n>>> unknown command\r\n"


def garbage(line: bytes) -> bytes:
    rnd = hashlib.sha256(line).digest() * 8
    return rnd.replace(b"\xa7\x5c", b"\x00\x00")


def frame_with_bad_crc(line: bytes) -> bytes:
    tag = int(line.split(b" ")[0])
    good = F.encode_reply(F.REPLY_OK, tag, json.dumps(HELLO).encode())
    return good[:-1] + bytes([good[-1] ^ 0xFF])


def _variant(**kwargs: Any) -> Callable[[Path, Path], Path]:
    """A database of ``journal_records(**kwargs)`` instead of the template (a guard's row)."""
    def make(template: Path, d: Path) -> Path:
        return make_db(d / "variant.db", **kwargs)
    return make


def blocked_blank_board(line: bytes) -> bytes:
    """A board whose blank comes back with the light path blocked: light 105.9 vs dark 100.3 counts per read."""
    tag, verb = line.decode("ascii", "replace").split(" ")[:2]
    if verb == "hello":
        return F.encode_reply(F.REPLY_OK, int(tag), json.dumps(dict(HELLO, running=False)).encode())
    reply = {"boot": 1, "seq": 9, "reads": 16, "dark": [int(100.3 * 16)], "light": [int(105.9 * 16)]}
    return F.encode_reply(F.REPLY_OK, int(tag), json.dumps(reply).encode())


def _rising(i: int) -> float:
    return 0.05 + 0.6 * (1.0 - math.exp(-0.04 * i))


FLAT_CAL = "concentration,absorbance\n0,0.301\n2,0.298\n4,0.303\n6,0.299\n8,0.302\n10,0.300\n"
RISING_RUN = "time_s,absorbance\n" + "".join(f"{2 * i},{_rising(i):.5f}\n" for i in range(40))
PERCENT_T_RUN = "time_s,absorbance\n" + "".join(f"{10 * i},{95 - 1.2 * i:.1f}\n" for i in range(30))


class ScriptedBoard:
    """A board that speaks protocol v1 (schema/protocol.md) from a script: its journal is ``records`` (encoded
    records laid end to end from position 0), and it may misbehave on purpose.

    ``hello`` replaces fields of the board's hello (a value of ``MISSING`` removes one), ``raw_hello`` replaces the
    whole reply payload, ``read_offset`` makes every DATA reply claim a position that many bytes past where its
    records really start (a board that skips part of its journal), for reads at or after ``gap_from``. It answers ``anchor``, ``flush``, ``read``,
    ``ack`` (verifying the check) and ``start`` as the firmware does (a read with at most ``max_reply`` bytes), and keeps the requests it got
    (``requests``) and the positions acknowledged (``acks``).
    """

    MISSING = object()

    def __init__(self, records: list[bytes] | None = None, *, device: str = "5eba0000000000ab",
                 hello: dict[str, Any] | None = None, raw_hello: bytes | None = None, read_offset: int = 0,
                 gap_from: int = 0, max_reply: int = 4096):
        self.journal = b"".join(journal_records(device=device) if records is None else records)
        self.starts = []
        at = 0
        for r in (journal_records(device=device) if records is None else records):
            self.starts.append(at)
            at += len(r)
        self.device = device
        self.tail = 0
        self.read_offset = read_offset
        self.gap_from = gap_from
        self.max_reply = max_reply
        info = dict(HELLO, device=device, journal=SCRIPTED_JOURNAL, head=len(self.journal) + read_offset, tail=0)
        for k, v in (hello or {}).items():
            if v is self.MISSING:
                info.pop(k, None)
            else:
                info[k] = v
        self.hello_payload = raw_hello if raw_hello is not None else json.dumps(info).encode()
        self.requests: list[str] = []
        self.acks: list[int] = []

    def verbs(self) -> list[str]:
        return [r.split(" ")[1] for r in self.requests if " " in r]

    def __call__(self, line: bytes) -> bytes:
        text = line.decode("ascii", "replace").strip()
        self.requests.append(text)
        parts = text.split(" ")
        tag, verb, args = int(parts[0]), parts[1], parts[2:]
        ok = lambda d: F.encode_reply(F.REPLY_OK, tag, json.dumps(d).encode())  # noqa: E731
        if verb == "hello":
            return F.encode_reply(F.REPLY_OK, tag, self.hello_payload)
        if verb == "anchor":
            return ok({"boot": 1, "seq": 99, "uptime_ms": 1000})
        if verb == "flush":
            return ok({"head": len(self.journal)})
        if verb == "read":
            pos, n = int(args[0]), min(int(args[1]), self.max_reply)
            pos = next((p for p in self.starts if p >= max(pos, self.tail)), len(self.journal))
            end = pos
            for p in self.starts:
                if p >= pos:
                    nxt = next((q for q in self.starts if q > p), len(self.journal))
                    if nxt - pos > n:
                        break
                    end = nxt
            shift = self.read_offset if pos >= self.gap_from else 0
            payload = struct.pack("<I", pos + shift) + self.journal[pos:end]
            return F.encode_reply(F.REPLY_DATA, tag, payload)
        if verb == "ack":
            if len(args) != 2 or args[1] != F.check_field("ack", int(args[0])):
                return F.encode_reply(F.REPLY_ERR, tag, b"check field does not match")
            self.acks.append(int(args[0]))
            return ok({"tail": self.tail})
        if verb == "start":
            return ok({"boot": 1, "seq": 100})
        return F.encode_reply(F.REPLY_ERR, tag, b"unknown verb")


def _deep_json(depth: int) -> bytes:
    """A hello holding lists nested ``depth`` deep (2000 fit in one 4200-byte reply)."""
    payload = b'{"protocol": 1, "x": ' + b"[" * depth + b"]" * depth + b"}"
    assert len(payload) <= 4200
    return payload


class _QuickDeadline(link_module.Deadline):
    """Every wait of the link shortened (a test of refusals, not of patience): at most 0.3 s."""

    def __init__(self, seconds: float):
        super().__init__(min(seconds, 0.3))


# -- the table -------------------------------------------------------------------------------------------------------

@dataclass
class Case:
    """One bad input: what it is, where it goes, and what must come back."""

    name: str
    args: list[Any]                     # CLI arguments; "{db}", "{csv}", "{port}", "{dir}" are filled in
    code: int                           # the documented exit code
    message: str                        # a fragment of the one-line message
    db: Callable[[Path, Path], Path] = _copy   # the database the row runs against (made from the template)
    csv: Callable[[Path], Path] | None = None
    port: Any = None                    # FakePort behaviour, "missing", or a URL string
    chatter: bytes = b""
    setup: Callable[[Path, Path], Any] | None = None   # (db, dir) -> something to undo (a lock)
    env: dict[str, str] = field(default_factory=dict)
    never_sent: tuple[str, ...] = ()    # verbs that must not have reached the (scripted) board
    disk_pages: int | None = None       # the disk holds only this many more database pages (SQLite's own limit)
    absent: tuple[str, ...] = ("{dir}/r", "{dir}/x", "{dir}/target.db")  # outputs a refusal must not create


CASES = [
    # -- the command line ------------------------------------------------------------------------------------------
    Case("unknown command", ["calibrat"], 2, "No such command 'calibrat'"),
    Case("unknown option", ["list", "runs", "--db", "{db}", "--colour"], 2, "No such option '--colour'"),
    Case("calibrate with neither CSV nor --db", ["calibrate"], 2, "give a CSV file"),
    Case("calibrate with both CSV and --db", ["calibrate", "{csv}", "--db", "{db}"], 2, "not both", csv=_csv(GOOD_CAL)),
    Case("report --run and --all together", ["report", "--db", "{db}", "--run", RUN_LABEL, "--all", "--out", "{dir}/r"],
         2, "give one of --run, --all or --study"),
    Case("rate --a-end with --db", ["rate", "--db", "{db}", "--a-end", "0.1"], 2,
         "--a-end applies to CSV files"),
    Case("rate --window without initial_rate", ["rate", "--db", "{db}", "--window", "0", "10"], 2,
         "--window applies to --model initial_rate"),
    Case("unknown rate model", ["rate", "--db", "{db}", "--model", "third_order"], 2, "Invalid value for '--model'"),
    Case("run that does not exist", ["rate", "--db", "{db}", "--run", "no such run"], 2, "no such run"),
    Case("run label with a typo", ["rate", "--db", "{db}", "--run", "fading 52 C"], 2,
         f"; did you mean {RUN_LABEL!r}? Give a run's key or label"),
    Case("orders --db on runs with no recorded conditions", ["orders", "--db", "{db}"], 2,
         "has a recorded starting concentration: record each run's with `nightcell condition"),
    Case("arrhenius --db on runs with no recorded conditions", ["arrhenius", "--db", "{db}"], 2,
         "has a recorded temperature: record each run's with `nightcell condition"),
    Case("orders with neither CSV nor database (NIGHTCELL_DB empty)", ["orders"], 2, "give a CSV file",
         env={"NIGHTCELL_DB": ""}),
    Case("calibrate an unknown device", ["calibrate", "--db", "{db}", "--device", "ffff000000000000"], 2,
         "no device 'ffff000000000000' in {db}: give one of its devices by label or id (bench)"),
    # -- a label typed with a typo: the closest labels are offered ------------------------------------------------
    Case("device label with a typo", ["calibrate", "--db", "{db}", "--device", "bnech"], 2,
         "no device 'bnech' in {db}; did you mean 'bench'? Give one of its devices by label or id (bench)"),
    Case("blank label with a typo (rate)", ["rate", "--db", "{db}", "--blank", "watr"], 2,
         "no blank labelled 'watr' on device 'bench'; did you mean 'water'? List blanks with `nightcell list "
         "blanks` and give its label or key (boot:seq)"),
    Case("blank label with a typo (report)",
         ["report", "--db", "{db}", "--run", RUN_LABEL, "--blank", "WATER", "--out", "{dir}/r"], 2,
         "no blank labelled 'WATER' on device 'bench'; did you mean 'water'?"),
    Case("blank label close to none", ["rate", "--db", "{db}", "--blank", "tap"], 2,
         "no blank labelled 'tap' on device 'bench': list blanks with `nightcell list blanks` and give its label or "
         "key (boot:seq)"),
    Case("blank key that is not a blank", ["rate", "--db", "{db}", "--blank", "1:4"], 2,
         "no blank 1:4 on device 'bench': list blanks with `nightcell list blanks` and give its label"),
    Case("blank label two blanks share", ["rate", "--db", "{db}", "--blank", "water"], 2,
         f"2 blanks are labelled 'water' on device 'bench': give the key of the one you mean (taken {TAKEN}: "
         f"--blank 1:3; taken {TAKEN}: --blank 1:4)", db=_variant(blanks=(0.0, 0.0))),
    Case("calibration set with a typo", ["calibrate", "--db", "{db}", "--set", "wek2"], 2,
         "no calibration set 'wek2' on device 'bench'; did you mean 'week2'? Its sets are 'set week2'",
         db=_variant(standard_set="week2")),
    Case("calibration set close to none", ["calibrate", "--db", "{db}", "--set", "spring"], 2,
         "no calibration set 'spring' on device 'bench': its sets are 'after blank 1:3'"),
    Case("negative channel", ["export", "--db", "{db}", "--out", "{dir}/x", "--channel", "-1"], 2,
         "Invalid value for '--channel'"),
    Case("export into a file, not a folder", ["export", "--db", "{db}", "--out", "{csv}"], 2, "",
         csv=_csv("not a folder\n")),
    Case("setup with nothing to set", ["setup"], 2, "nothing to set", port="missing"),
    Case("setup interval below 0.2 s", ["setup", "--interval", "0.05"], 2, "interval must be from 0.2", port="missing"),
    Case("setup path length beyond 10 cm", ["setup", "--path-cm", "11"], 2, "--path-cm must be from 0.01 to 10",
         port="missing"),
    Case("setup channel not NAME:LED:ADC", ["setup", "--channel", "red"], 2, "must be NAME:LED:ADC", port="missing"),
    Case("empty note", ["note", "   "], 2, "the note is empty", port="missing"),
    Case("setup interval NaN", ["setup", "--interval", "nan"], 2, "'nan' is not a finite number", port="missing"),
    Case("setup warm-up infinite", ["setup", "--warmup", "inf"], 2, "'inf' is not a finite number", port="missing"),
    Case("setup path length NaN", ["setup", "--path-cm", "nan"], 2, "'nan' is not a finite number", port="missing"),
    Case("standard value beyond a double", ["standard", "1e999"], 2, "'1e999' is not a usable concentration",
         port="missing"),
    Case("watch every NaN seconds", ["watch", "--every", "nan"], 2, "'nan' is not a finite number", port="missing"),
    Case("condition temperature NaN", ["condition", "--db", "{db}", "--temperature-c", "nan"], 2,
         "'nan' is not a finite number"),
    Case("condition temperature below absolute zero", ["condition", "--db", "{db}", "--temperature-k", "-5"], 2,
         "-5 K is out of range: give a number from 0 to 1300 K"),
    Case("condition concentration infinite", ["condition", "--db", "{db}", "--conc", "naoh=inf"], 2,
         "give a finite concentration"),
    Case("calibrate --level 1.5", ["calibrate", "{csv}", "--level", "1.5"], 2,
         "1.5 is out of range: give a number between 0 and 1, not either end", csv=_csv(GOOD_CAL)),
    Case("calibrate --level 0", ["calibrate", "--db", "{db}", "--level", "0"], 2,
         "0 is out of range: give a number between 0 and 1", csv=None),
    Case("calibrate --reading NaN", ["calibrate", "{csv}", "--reading", "nan"], 2, "'nan' is not a finite number",
         csv=_csv(GOOD_CAL)),
    Case("rate --window with infinity", ["rate", "--db", "{db}", "--model", "initial_rate", "--window", "0", "inf"],
         2, "'inf' is not a finite number"),
    Case("roll-call --timeout NaN", ["roll-call", "--timeout", "nan"], 2, "'nan' is not a finite number"),
    Case("arrhenius on °C written as K", ["arrhenius", "{csv}"], 2, "look like °C — add 273.15",
         csv=_csv("temperature_K,k\n15,0.010\n25,0.021\n35,0.043\n")),
    Case("arrhenius --eyring with k of 1e300", ["arrhenius", "{csv}", "--eyring"], 2,
         "line 2, column k: 1e+300 is beyond any plausible value",
         csv=_csv("temperature_K,k\n288,1e300\n298,2e300\n308,4e300\n")),
    Case("rate with absorbances of 1e300", ["rate", "{csv}"], 2, "column absorbance: 1e+300 is beyond any plausible",
         csv=_csv("time_s,absorbance\n0,1e300\n2,0.9e300\n4,0.8e300\n6,0.7e300\n8,0.6e300\n")),
    Case("sync with no port given", ["sync", "--db", "{db}"], 2, "Missing option '--port'", env={"NIGHTCELL_PORT": ""}),
    Case("benches with a planned end that is no time", ["benches", "--db", "{db}", "--no-browser", "--planned-end",
                                                          "tea time"], 2, "give a time today as HH:MM"),
    Case("benches asking boards faster than 0.2 s", ["benches", "--db", "{db}", "--every", "0.05"], 2,
         "Invalid value for '--every'"),
    Case("benches on a TCP port beyond 65535", ["benches", "--db", "{db}", "--http-port", "70000"], 2,
         "Invalid value for '--http-port'"),
    # -- CSV import ------------------------------------------------------------------------------------------------
    Case("CSV empty file", ["calibrate", "{csv}"], 2, "is empty; it needs a header row", csv=_csv("")),
    Case("CSV header only", ["calibrate", "{csv}"], 2, "has 0 data rows", csv=_csv("concentration,absorbance\n")),
    Case("CSV missing column", ["calibrate", "{csv}"], 2, "has no column 'absorbance'",
         csv=_csv("concentration,abs\n0,0\n1,1\n2,2\n")),
    Case("CSV text where a number goes", ["calibrate", "{csv}"], 2, "'zero' is not a number",
         csv=_csv("concentration,absorbance\nzero,0.0\n2,0.16\n4,0.31\n6,0.46\n")),
    Case("CSV NaN", ["calibrate", "{csv}"], 2, "is not a finite number",
         csv=_csv("concentration,absorbance\n0,nan\n2,0.16\n4,0.31\n6,0.46\n")),
    Case("CSV infinity", ["rate", "{csv}"], 2, "is not a finite number",
         csv=_csv("time_s,absorbance\n0,0.65\n2,0.61\n4,inf\n6,0.55\n8,0.52\n")),
    Case("CSV not UTF-8", ["calibrate", "{csv}"], 2, "cannot read",
         csv=_csv(b"concentration,absorbance\n\xff\xfe0,0\n2,0.16\n4,0.31\n")),
    Case("CSV binary junk", ["rate", "{csv}"], 2, "", csv=_csv(bytes(range(256)) * 4)),
    Case("CSV too few rows for a rate", ["rate", "{csv}"], 2, "this analysis needs at least 4",
         csv=_csv("time_s,absorbance\n0,0.5\n2,0.4\n")),
    Case("CSV times not increasing", ["rate", "{csv}"], 2, "goes back at point 2",
         csv=_csv("time_s,absorbance\n0,0.5\n4,0.4\n2,0.45\n6,0.35\n8,0.3\n10,0.27\n")),
    Case("CSV all concentrations equal", ["calibrate", "{csv}"], 5, "",
         csv=_csv("concentration,absorbance\n1,0.1\n1,0.11\n1,0.09\n1,0.1\n")),
    Case("CSV is a FIFO", ["calibrate", "{csv}"], 2, "is not a regular file (a pipe or a device)", csv=_fifo),
    Case("CSV is /dev/zero", ["rate", "/dev/zero"], 2, "/dev/zero is not a regular file"),
    Case("CSV with a duplicated absorbance header", ["calibrate", "{csv}"], 2,
         "has two columns that mean 'absorbance' ('absorbance' in column 2 and 'Absorbance (AU)' in column 3)",
         csv=_csv("concentration,absorbance,Absorbance (AU)\n0,0.01,0.01\n2,0.16,0.2\n4,0.31,0.3\n")),
    Case("orders CSV with an empty conc_ header", ["orders", "{csv}"], 2,
         "column 3 is named 'conc_' with nothing after 'conc_'",
         csv=_csv("initial_rate,conc_a,conc_\n1,1,1\n2,2,1\n3,3,2\n")),
    Case("orders CSV with a duplicated conc_ header", ["orders", "{csv}"], 2,
         "has two columns that mean 'conc_a' ('conc_a' in column 2 and 'conc_a ' in column 3)",
         csv=_csv("initial_rate,conc_a,conc_a \n1,1,1\n2,2,1\n3,3,2\n")),
    Case("CSV with a 30 kB field", ["calibrate", "{csv}"], 2, "line 3, column 2: a cell of 30000 characters",
         csv=_csv("concentration,absorbance\n0,0.01\n2," + "1" * 30000 + "\n4,0.31\n6,0.46\n")),
    Case("CSV with an unclosed quote", ["calibrate", "{csv}"], 2, "line 3, column 2: a cell of",
         csv=_csv("concentration,absorbance\n0,0.01\n2,\"0.16\n" + "4,0.31\n" * 3000)),
    Case("CSV semicolons with a delimiter override that does not fit", ["calibrate", "{csv}", "--delimiter", ","], 2,
         "has no column 'concentration', 'absorbance' (found: concentration;absorbance)",
         csv=_csv("concentration;absorbance\n0;0,01\n2;0,16\n4;0,31\n")),
    Case("CSV time unit that is not a time", ["rate", "{csv}"], 2, "column 'time (kg)': 'kg' is not a unit of time",
         csv=_csv("time (kg),absorbance\n0,0.65\n2,0.61\n4,0.58\n6,0.55\n8,0.52\n")),
    Case("CSV clock time that is not one", ["rate", "{csv}"], 2, "'1:75' is not a number",
         csv=_csv("time,absorbance\n0:00,0.65\n0:30,0.61\n1:00,0.58\n1:75,0.55\n2:00,0.52\n")),
    Case("CSV percent transmittance of zero", ["rate", "{csv}"], 2, "is not a percent transmittance above 0",
         csv=_csv("time_s,%T\n0,20\n2,25\n4,0\n6,35\n8,40\n")),
    Case("--sheet given for a CSV", ["calibrate", "{csv}", "--sheet", "Sheet2"], 2, "--sheet applies to spreadsheets",
         csv=_csv(GOOD_CAL)),
    Case("spreadsheet that is not one", ["calibrate", "{dir}/book.xlsx"], 2, "as a spreadsheet",
         setup=lambda db, d: (d / "book.xlsx").write_bytes(b"PK\x03\x04 not really a workbook" * 10)),
    Case("CSV file that does not exist", ["calibrate", "{dir}/nowhere.csv"], 2, "does not exist"),
    Case("CSV given as a folder", ["calibrate", "{dir}"], 2, "is a directory"),
    Case("CSV --out into a missing folder", ["calibrate", "{csv}", "--out", "{dir}/no/such/folder/fit.json"], 2,
         "does not exist: create it first", csv=_csv(GOOD_CAL)),
    Case("--db result with --out into a missing folder", ["rate", "--db", "{db}", "--out", "{dir}/none/fit.json"], 2,
         "does not exist: create it first"),
    # -- database files --------------------------------------------------------------------------------------------
    Case("DB that does not exist", ["list", "runs", "--db", "{dir}/missing.db"], 2, "no database at"),
    Case("DB path is a folder", ["list", "runs", "--db", "{dir}"], 2, "is a directory"),
    Case("DB truncated", ["list", "runs", "--db", "{db}"], 4, "", db=_truncated),
    Case("DB is a text file", ["list", "devices", "--db", "{db}"], 4, "", db=_text_file),
    Case("DB of another program", ["list", "runs", "--db", "{db}"], 4, "not a nightcell database", db=_foreign),
    Case("DB from a newer nightcell", ["list", "runs", "--db", "{db}"], 4, "written by a newer nightcell", db=_newer),
    Case("DB locked by another writer (calibrate saves)", ["calibrate", "--db", "{db}"], 4, "another program holds it",
         setup=lambda db, d: _lock(db)),
    Case("DB newer version, merge", ["merge", "{db}", "--db", "{dir}/target.db"], 4, "written by a newer nightcell",
         db=_newer),
    Case("merge a database into itself", ["merge", "{db}", "--db", "{db}"], 2, "is the database being merged into"),
    Case("merge a text file", ["merge", "{dir}/notes.txt", "--db", "{db}"], 4, "",
         setup=lambda db, d: (d / "notes.txt").write_text("not sqlite\n" * 100)),
    Case("DB with a damaged page, rate", ["rate", "--db", "{db}"], 4, "is a damaged database", db=_damaged),
    Case("DB with a damaged page, report", ["report", "--db", "{db}", "--all", "--out", "{dir}/r"], 4,
         "sqlite3 {db} .recover | sqlite3 recovered.db", db=_damaged),
    Case("DB with a damaged page, list runs", ["list", "runs", "--db", "{db}"], 4, "Still readable: ", db=_damaged),
    Case("DB with a damaged page, export", ["export", "--db", "{db}", "--out", "{dir}/x"], 4, "damaged: samples",
         db=_damaged),
    Case("DB with a damaged page, merge from it", ["merge", "{db}", "--db", "{dir}/target.db"], 4,
         "is a damaged database", db=_damaged),
    Case("DB of zero bytes for a reading command", ["list", "runs", "--db", "{db}"], 4,
         "is empty, not a nightcell database", db=_empty_file),
    Case("DB of zero bytes to merge from", ["merge", "{db}", "--db", "{dir}/target.db"], 4,
         "is empty, not a nightcell database", db=_empty_file),
    Case("DB with user_version 99", ["list", "runs", "--db", "{db}"], 4, "(schema version 99;", db=_user_version_99),
    Case("DB with user_version 99, calibrate saves", ["calibrate", "--db", "{db}"], 4, "written by a newer nightcell",
         db=_user_version_99),
    # -- the serial side -------------------------------------------------------------------------------------------
    Case("port that does not exist", ["hello", "--port", "/dev/nightcell-no-such-port"], 3, "no board at", port=None),
    Case("port URL of an unknown kind", ["hello", "--port", "bogus://x"], 3, "no board at", port=None),
    Case("nothing answers on the port", ["hello"], 3, "(nothing came back)", port="silent"),
    Case("--timeout NaN for a board command", ["hello", "--timeout", "nan"], 2, "'nan' is not a finite number",
         port="missing"),
    Case("--baud of 10", ["sync", "--db", "{db}", "--baud", "10"], 2, "Invalid value for '--baud'", port="missing"),
    Case("another device on the port", ["stop"], 3, "none of them a nightcell reply", port=echo_other_device),
    Case("garbage from the port", ["sync", "--db", "{db}"], 3, "", port=garbage),
    Case("frames with a bad CRC", ["hello"], 3, "no board answered", port=frame_with_bad_crc),
    Case("benches with no board anywhere", ["benches", "--db", "{db}", "--no-browser"], 3,
         "no board answered on any port with a board's USB id"),
    Case("chatter with no frame in it", ["hello"], 3, "no board answered", port="silent",
         chatter=b"\x1b[2J MicroPython v1.99 REPL >>> " * 4),
    Case("a board of another protocol", ["hello"], 3, "speaks an unknown protocol",
         port=board_then_vanish("never", dict(HELLO, protocol=7))),
    Case("hello with head before tail", ["sync", "--db", "{db}"], 3, "'tail' lies past the head 10",
         port=board_then_vanish("never", dict(HELLO, head=10, tail=500))),
    Case("hello with a negative head", ["hello"], 3, "'head' must be a whole number",
         port=board_then_vanish("never", dict(HELLO, head=-1))),
    Case("hello with a device id that is a path", ["sync", "--db", "{db}"], 3, "'device' must be a device id",
         port=board_then_vanish("never", dict(HELLO, device="../../x"))),
    Case("board vanishes mid-command (stop)", ["stop"], 3, "", port=board_then_vanish("stop")),
    Case("board vanishes mid-sync (anchor)", ["sync", "--db", "{db}"], 3, "", port=board_then_vanish("anchor")),
    Case("board vanishes mid-mark (blank)", ["blank", "--label", "water"], 3, "", port=board_then_vanish("blank")),
    # -- a board that answers what the host does not expect (a scripted board on a real pty) ---------------------
    Case("board's reply starts 100 kB past the position asked", ["sync", "--db", "{db}"], 3,
         "sent records from 100000, 100000 bytes past it", port=lambda: ScriptedBoard(read_offset=100_000),
         never_sent=("ack",)),
    Case("hello whose journal is text", ["sync", "--db", "{db}"], 3, "'journal' must be a whole number",
         port=lambda: ScriptedBoard(hello={"journal": "one"}), never_sent=("read", "ack")),
    Case("hello with no device", ["sync", "--db", "{db}"], 3, "'device' is missing",
         port=lambda: ScriptedBoard(hello={"device": ScriptedBoard.MISSING}), never_sent=("read", "ack")),
    Case("hello whose device is a dict", ["sync", "--db", "{db}"], 3, "'device' must be a device id",
         port=lambda: ScriptedBoard(hello={"device": {"a": [1, 2]}}), never_sent=("read", "ack")),
    Case("hello JSON nested 2000 deep", ["sync", "--db", "{db}"], 3, "is not JSON this host can read",
         port=lambda: ScriptedBoard(raw_hello=_deep_json(2000)), never_sent=("read", "ack")),
    Case("hello whose interval is text, before start", ["start", "--label", "x"], 3,
         "'interval_ms' must be a whole number", port=lambda: ScriptedBoard(hello={"interval_ms": "2 s"}),
         never_sent=("start",)),
    Case("board replaying a stored journal's keys (same journal id) with other content", ["sync", "--db", "{db}"], 3,
         "would change rows already stored here",
         port=lambda: ScriptedBoard(journal_records(run_label="forged run"), device=DEVICE), never_sent=("ack",)),
    Case("disk full in the middle of a sync", ["sync", "--db", "{db}"], 4, "database or disk is full",
         port=lambda: ScriptedBoard(journal_records(device="5eba0000000000ab", n_samples=250)), never_sent=("ack",),
         disk_pages=0),
    # -- hostile labels --------------------------------------------------------------------------------------------
    Case("label with SQL in --run", ["rate", "--db", "{db}", "--run", "x' OR '1'='1"], 2, "no run"),
    Case("label that is a path in --run", ["report", "--db", "{db}", "--run", "../../etc/passwd", "--out", "{dir}/r"],
         2, "no run"),
    Case("device label beyond 32 bytes (multi-byte)", ["setup", "--label", "µ" * 17], 2, "at most 32",
         port="missing"),
    Case("run label too long for one request", ["start", "--label", "<b> µ" * 30], 2, "too long", port="missing"),
    Case("note too long for one request", ["note", "%" * 120], 2, "too long", port="missing"),
    # -- issue 12 §2: data that look wrong. Where a result would be saved it is refused (exit 5, nothing saved)
    # unless --accept-suspect confirms; the raw marks stay as they were.
    Case("blocked blank, rate --db refuses", ["rate", "--db", "{db}"], 5,
         f"the blank 'water' of {TAKEN} looks wrong: light 105.9 vs dark 100.0 counts per read: within 5 dark-noise SDs (4.2 counts) of "
         "its dark, as if the light path were blocked — clear the light path and take a new blank, name another "
         "with --blank, or pass --accept-suspect to use it anyway", db=_variant(blank_light=105.9)),
    Case("calibrate --db on a light channel the board never read", ["calibrate", "--db", "{db}", "--channel", "3"], 5,
         f"the blank 'water' of {TAKEN} has no counts for light channel 3: choose another --channel"),
    Case("blocked blank, calibrate --db refuses", ["calibrate", "--db", "{db}"], 5,
         f"the blank 'water' of {TAKEN} looks wrong: light 105.9 vs dark 100.0", db=_variant(blank_light=105.9)),
    Case("blank far below the board's earlier blanks", ["rate", "--db", "{db}"], 5,
         f"the blank 'water' of {TAKEN} looks wrong: signal 189.3 counts per read, far below the 3000.0 of this board's 1 earlier "
         "blank(s) (less than 0.1 of them)", db=_variant(blanks=(0.0, 1.2))),
    Case("blocked blank at capture", ["blank", "--label", "water"], 5,
         "5eba000000000007: the blank 'water' just taken looks wrong — channel 0: light 105.9 vs dark 100.2 counts per read: within 5 "
         "dark-noise SDs (4.2 counts) of its dark, as if the light path were blocked. It is journaled as taken (raw "
         "data is kept) but analyses will refuse it", port=blocked_blank_board),
    Case("standards that do not rise (CSV)", ["calibrate", "{csv}"], 5,
         "the standards do not rise with concentration: slope 4.29e-05 ± 0.00025 A per unit (t = 0.172, needs > "
         "2.13 for one-sided 95 %), r = 0.0857 — check the standards' values, their order and the blank, or pass "
         "--accept-suspect", csv=_csv(FLAT_CAL)),
    Case("standards all equal, calibrate --db refuses", ["calibrate", "--db", "{db}"], 5,
         "the standards all read the same absorbance (0.3", db=_variant(standards=tuple((v, 0.3) for v in "12345"))),
    Case("negative standard at capture", ["standard", "--", "-1"], 2,
         "the standard's VALUE -1 is a negative concentration: a standard holds zero or more of the analyte — type "
         "its concentration (nothing was measured or journaled)", port="missing"),
    Case("negative concentration in a calibration CSV", ["calibrate", "{csv}"], 2,
         "standard 1 has a negative concentration (-1); a standard holds zero or more of the analyte",
         csv=_csv("concentration,absorbance\n-1,0.01\n2,0.16\n4,0.31\n6,0.46\n")),
    Case("run condition at 250 °C", ["condition", "--db", "{db}", "--run", RUN_LABEL, "--temperature-c", "250"], 2,
         "a run at 250.0 °C (523.15 K) is outside what a cuvette of solution can be (-30 to 110 °C): check the value "
         "(°C or K?), or pass --accept-suspect to record it anyway"),
    Case("run condition of 30 mol/L", ["condition", "--db", "{db}", "--run", RUN_LABEL, "--temperature-c", "25",
                                       "--conc", "hydroxide=30"], 2,
         "conc_hydroxide_M 30 mol/L is more than any solution holds (20 mol/L)"),
    Case("CSV absorbance column holding %T (rate)", ["rate", "{csv}"], 2,
         "column absorbance holds values up to 95, which look like percent transmittance (0–100), not absorbance "
         "(rarely above 3): if they are %T, name the column %T and nightcell converts them", csv=_csv(PERCENT_T_RUN)),
    Case("CSV absorbance column holding %T (calibrate)", ["calibrate", "{csv}"], 2,
         "look like percent transmittance",
         csv=_csv("concentration,absorbance\n0,100\n2,69.2\n4,47.9\n6,33.1\n")),
    Case("negative rate constant (CSV, first_order_to_zero on a rising curve)",
         ["rate", "{csv}", "--model", "first_order_to_zero"],
         5, "first_order_to_zero: the fitted rate constant k = -0.0", csv=_csv(RISING_RUN)),
    Case("negative rate constant with --db saves nothing", ["rate", "--db", "{db}", "--model", "second_order"], 5,
         "second_order: the fitted rate constant k = -", db=_variant(curve=_rising)),
    # -- a run that cannot be done on this board -------------------------------------------------------------------
    Case("start --for that is not a duration", ["start", "--for", "a week"], 2, "--for 'a week' is not a duration",
         port="missing"),
    # 10^6 B free at 3.26 B a sample every 1 s: 3.6 days; 7 days needs 1.972 s (tasks/room.py)
    Case("start --for a run the journal cannot hold", ["start", "--for", "7d"], 2,
         "a run of 7.0 days does not fit on 5eba000000000007: 1.00 MB free at measured 3.26 B a sample every 1 s holds "
         "3.6 days (the longest run that fits); an interval of 1.972 s or more would fit 7.0 days",
         port=board_then_vanish("start", dict(HELLO, running=False, interval_ms=1000, bytes_per_sample=3.26,
                                               channels=1))),
    Case("start on a labelled board already logging", ["start", "--label", "x"], 2,
         "bench 9 is already logging a run: stop it first with `nightcell stop`, or leave it running",
         port=board_then_vanish("start", dict(HELLO, running=True, label="bench 9"))),
    Case("stop on a labelled board not logging", ["stop"], 2, "bench 9 is not logging a run: nothing to stop",
         port=board_then_vanish("stop", dict(HELLO, running=False, label="bench 9"))),
    Case("setup interval shorter than the board's measurement", ["setup", "--interval", "1"], 2,
         "--interval 1 s is shorter than one measurement on 5eba000000000007 (3858 ms with its reads, settle and "
         "window) plus 50 ms: choose at least 3.908 s",
         port=board_then_vanish("set", dict(HELLO, measure_ms=3858))),
]


def _lock(db: Path) -> Any:
    con = sqlite3.connect(db, isolation_level=None, timeout=0)
    con.execute("BEGIN EXCLUSIVE")
    return con


def _fill(arg: Any, subs: dict[str, str]) -> str:
    text = str(arg)
    for k, v in subs.items():
        text = text.replace("{" + k + "}", v)
    return text


class _Medium:
    """A small tmpfs mounted for one row: ``readonly`` holds a copy of the row's database and is remounted
    read-only; ``full`` holds the copy (and the row's folder) and is then filled to its last byte. Needs root and a
    kernel that lets us mount; otherwise the row is skipped with the reason."""

    def __init__(self, kind: str, root: Path):
        self.kind, self.root = kind, root

    def __enter__(self) -> "_Medium":
        import subprocess

        self.root.mkdir(parents=True, exist_ok=True)
        if os.geteuid() != 0:
            pytest.skip("mounting a small tmpfs needs root; run the suite as root (CI does) to run this row")
        done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=512k", "tmpfs", str(self.root)],
                              capture_output=True, text=True)
        if done.returncode != 0:
            pytest.skip(f"this machine does not let us mount a tmpfs ({done.stderr.strip()})")
        return self

    def place(self, db: Path) -> Path:
        """Copy ``db`` onto the medium, then make it read-only or full; returns the copy's path."""
        import subprocess

        if not db.exists():
            return db
        if db.is_dir():
            return self.root
        copy = self.root / db.name
        if copy != db:
            shutil.copy(db, copy)
        return copy

    def seal(self) -> None:
        """Once the row's inputs are in place: remount read-only, or fill every byte left."""
        import subprocess

        if self.kind == "readonly":
            subprocess.run(["mount", "-o", "remount,ro", str(self.root)], check=True)
        else:
            fd = os.open(self.root / "filler", os.O_WRONLY | os.O_CREAT | os.O_EXCL)
            try:
                for size in (65536, 4096, 512, 1):
                    while True:
                        try:
                            os.write(fd, b"\0" * size)
                        except OSError:
                            break
            finally:
                os.close(fd)

    def __exit__(self, *exc: object) -> None:
        import subprocess

        subprocess.run(["umount", "-l", str(self.root)], capture_output=True)


def _invoke(case: Case, template: Path, work: Path, monkeypatch: pytest.MonkeyPatch,
            medium: _Medium | None = None) -> tuple[Any, Path, dict, dict]:
    monkeypatch.setattr(link_module, "Deadline", _QuickDeadline)
    monkeypatch.setattr(link_module, "candidate_ports", lambda: [])  # no row probes this machine's own serial ports
    monkeypatch.setattr(store_module, "BUSY_TIMEOUT_S", 0.2)
    db = case.db(template, work)
    if medium is not None:
        db = medium.place(db)
    subs = {"db": str(db), "dir": str(work)}
    if case.csv is not None:
        subs["csv"] = str(case.csv(work))
    fake = None
    env = {"COLUMNS": "200", "NO_COLOR": "1"}
    if case.port == "missing":
        env["NIGHTCELL_PORT"] = "/dev/nightcell-never-opened"
    elif case.port == "silent":
        fake = FakePort(None, case.chatter)
    elif isinstance(case.port, type(lambda: 0)) and case.port.__code__.co_argcount == 0:
        scripted = case.port()  # a fresh scripted board for this row
        fake = FakePort(scripted, case.chatter)
    elif callable(case.port):
        fake = FakePort(case.port, case.chatter)
    if fake is not None:
        env["NIGHTCELL_PORT"] = fake.path
    env.update(case.env)
    if medium is not None:
        medium.seal()
    undo = case.setup(db, work) if case.setup else None
    before = snapshot(db)
    if case.disk_pages is not None:
        monkeypatch.setattr(store_module, "sqlite3", _FullDiskSqlite(sqlite3, db, case.disk_pages))
    try:
        result = CliRunner().invoke(cli, [_fill(a, subs) for a in case.args], env=env)
    finally:
        if isinstance(undo, sqlite3.Connection):  # the lock another writer held
            undo.rollback()
            undo.close()
        if fake is not None:
            fake.close()
    if case.never_sent:
        got = fake.behaviour.verbs() if isinstance(fake.behaviour, ScriptedBoard) else []
        assert not set(got) & set(case.never_sent), f"{set(got) & set(case.never_sent)} reached the board: {got}"
    return result, db, before, snapshot(db)


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_bad_input(case: Case, template: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch):
    result, db, before, after = _invoke(case, template, tmp_path, monkeypatch)
    output = result.output
    assert result.exit_code == case.code, f"exit {result.exit_code}, expected {case.code}:\n{output}\n{result.exception!r}"
    assert _fill(case.message, {"db": str(db), "dir": str(tmp_path)}) in output, output
    assert "Traceback" not in output and "Warning" not in output
    # one clear message, not a dump: an error line that says something
    assert output.strip(), "no message at all"
    assert len(output.strip().splitlines()) <= 8, output
    assert not isinstance(result.exception, (AssertionError, TypeError, AttributeError, KeyError, IndexError)), output
    assert after == before, f"the database changed: {before} -> {after}"
    # a refusal writes nothing: no output it was asked for, and no temporary file anywhere
    made = [a for a in (_fill(a, {"dir": str(tmp_path)}) for a in case.absent) if Path(a).exists()]
    assert not made, f"a refused command left {made}"
    assert not list(tmp_path.rglob("*.part")), list(tmp_path.rglob("*.part"))


@pytest.mark.parametrize("kind", ["readonly", "full"])
@pytest.mark.parametrize("case", [c for c in CASES if c.setup is None], ids=[c.name for c in CASES if c.setup is None])
def test_bad_input_on_a_read_only_or_full_medium(case: Case, kind: str, template: Path, tmp_path: Path,
                                                  monkeypatch: pytest.MonkeyPatch):
    """The whole table again, with the row's database on a read-only medium, or on a full one with the row's
    outputs: every row is still refused with one line and a documented code, nothing changes and nothing is left
    behind. A row refused before the database is touched gives the same code; a row whose command writes may
    instead be refused as read-only or full (exit 4) or unwritable (exit 2)."""
    with _Medium(kind, tmp_path / "medium") as medium:
        work = tmp_path / "medium" if kind == "full" else tmp_path / "work"
        work.mkdir(exist_ok=True)
        result, db, before, after = _invoke(case, template, work, monkeypatch, medium)
        output = result.output
        assert result.exit_code != 0, output
        assert result.exit_code == case.code or (result.exit_code in (2, 4) and any(
            w in output for w in ("read-only", "readonly", "No space left", "disk is full", "full"))), \
            f"exit {result.exit_code}, expected {case.code}:\n{output}\n{result.exception!r}"
        assert "Traceback" not in output and "Warning" not in output
        assert output.strip() and len(output.strip().splitlines()) <= 8, output
        assert not isinstance(result.exception, (AssertionError, TypeError, AttributeError, KeyError, IndexError)), \
            output
        assert after == before, f"the database changed: {before} -> {after}"
        assert not list(work.rglob("*.part")), list(work.rglob("*.part"))


def test_flagged_readings_are_counted_by_kind(tmp_path: Path):
    # issue 12 §2: readings beyond the stray-light ceiling (an opaque mark gives 1 % stray light: readings at
    # A ≥ ceiling − log10 2 ≈ 1.70 are flagged, standard spectrophotometry [memory], shared/REFERENCES.md) and
    # readings below the blank beyond noise are flagged per point, counted, and left out of the fit
    def curve(i: int) -> float:
        if i < 3:
            return 1.9           # beyond the stray-light ceiling
        if i >= 37:
            return -0.03         # more light than the blank
        return 0.05 + 0.6 * math.exp(-0.04 * i)

    db = make_db(tmp_path / "flags.db", curve=curve, opaque=2.0)
    result = CliRunner().invoke(cli, ["rate", "--db", str(db), "--model", "first_order_to_final"],
                                env={"COLUMNS": "200"})
    assert result.exit_code == 0, result.output
    assert "40 readings, 6 flagged and left out (beyond_stray: 3, below_blank: 3)" in result.output, result.output
    data = json.loads(CliRunner().invoke(cli, ["rate", "--db", str(db), "--model", "first_order_to_final",
                                               "--json"]).output)
    assert data["readings"]["flags"] == {"beyond_stray": 3, "below_blank": 3}
    assert data["readings"]["left_out_flagged"] == 6


def test_suspect_data_confirmed_with_accept_suspect_is_kept_and_flagged(tmp_path: Path):
    # the one option that confirms: the blocked blank is used, the result is saved, and the flag travels with it
    # a blank of 20 counts of signal (within 5 dark-noise SDs: blocked) and a run dimmer still, so it can be fitted
    db = make_db(tmp_path / "blocked.db", blank_light=120.0, curve=lambda i: 2.3 + 0.5 * math.exp(-0.04 * i))
    refused = CliRunner().invoke(cli, ["rate", "--db", str(db)])
    assert refused.exit_code == 5 and "--accept-suspect" in refused.output, refused.output
    ok = CliRunner().invoke(cli, ["rate", "--db", str(db), "--accept-suspect", "--json"])
    assert ok.exit_code == 0, ok.output
    data = json.loads(ok.output)
    assert any(f"the blank 'water' of {TAKEN} looks wrong but is used as confirmed (--accept-suspect)" in w
               for w in data["warnings"]), data["warnings"]
    saved = sqlite3.connect(db).execute("SELECT inputs_json FROM results WHERE id = ?", (data["result_id"],))
    assert "suspect_blank" in json.loads(saved.fetchone()[0])


def test_the_table_has_at_least_forty_rows_across_every_kind():
    assert len(CASES) >= 40
    assert len({c.name for c in CASES}) == len(CASES)
    assert sum(1 for c in CASES if c.port not in (None, "missing") or "port" in c.name) >= 8
    assert sum(1 for c in CASES if c.csv is not None or "CSV" in c.name) >= 10
    assert sum(1 for c in CASES if c.name.startswith(("DB", "merge"))) >= 8


class _FullDiskSqlite:
    """``sqlite3`` as the store sees it on a disk with room for only ``pages`` more pages of ``db``.

    SQLite's ``max_page_count`` caps the file at its size when opened plus ``pages``: a write past it fails with
    SQLITE_FULL, "database or disk is full", the same error and code as a disk with no space left (ENOSPC).
    """

    def __init__(self, real: Any, db: Path, pages: int):
        self._real, self._db, self._pages = real, str(db), pages

    def __getattr__(self, name: str) -> Any:
        return getattr(self._real, name)

    def connect(self, database: Any, *args: Any, **kwargs: Any) -> Any:
        conn = self._real.connect(database, *args, **kwargs)
        if str(database).endswith(self._db):
            count = conn.execute("PRAGMA page_count").fetchone()[0]
            conn.execute(f"PRAGMA max_page_count = {count + self._pages}")
        return conn


# -- database files the OS will not let us write ---------------------------------------------------------------------

class _ReadOnlySqlite:
    """``sqlite3`` as the store sees it on a read-only medium: every file opens with ``mode=ro``.

    Root may write any file whatever its permission bits, so when the tests run as root this stands in for the
    permission check the OS makes for everyone else (SQLite then refuses writes with the same error).
    """

    def __init__(self, real: Any):
        self._real = real

    def __getattr__(self, name: str) -> Any:
        return getattr(self._real, name)

    def connect(self, database: Any, *args: Any, uri: bool = False, **kwargs: Any) -> Any:
        target = str(database)
        if not uri:
            target, uri = f"file:{target}?mode=ro", True
        elif "mode=" not in target:
            target += ("&" if "?" in target else "?") + "mode=ro"
        return self._real.connect(target, *args, uri=uri, **kwargs)


@pytest.fixture
def readonly_db(tmp_path: Path, template: Path, monkeypatch: pytest.MonkeyPatch):
    other = make_db(tmp_path / "other.db", device="5eba0000000000ff")
    d = tmp_path / "ro"
    d.mkdir()
    db = d / "class.db"
    shutil.copy(template, db)
    db.chmod(0o444)
    d.chmod(0o555)
    if os.geteuid() == 0:
        monkeypatch.setattr(store_module, "sqlite3", _ReadOnlySqlite(sqlite3))
    monkeypatch.setattr(store_module, "BUSY_TIMEOUT_S", 0.2)
    yield db, other
    d.chmod(0o755)
    db.chmod(0o644)


@pytest.mark.parametrize("args, code, message", [
    (["calibrate", "--db", "{db}"], 4, "read-only"),
    (["rate", "--db", "{db}"], 4, "read-only"),
    (["merge", "{other}", "--db", "{db}"], 4, "read-only"),
])
def test_read_only_database_gives_a_clear_error_and_stays_as_it_was(readonly_db, args, code, message):
    readonly_db, other = readonly_db
    before = snapshot(readonly_db)
    result = CliRunner().invoke(cli, [a.replace("{db}", str(readonly_db)).replace("{other}", str(other))
                                      for a in args], env={"COLUMNS": "200"})
    assert result.exit_code == code, (result.output, result.exception)
    assert message in result.output and "Traceback" not in result.output, result.output
    assert snapshot(readonly_db) == before


# -- settings files (the board's settings.json, read by the firmware's own loader) ----------------------------------

SETTINGS_CASES = [
    ("not JSON", b"{interval_ms: 5000", "settings.json ignored, safe defaults used"),
    ("not UTF-8", b'{"label": "\xff\xfe"}', "settings.json ignored"),
    ("a list, not an object", b"[1, 2, 3]", "settings must be a JSON object"),
    ("interval below range", b'{"interval_ms": 10}', "interval_ms must be a whole number from 200"),
    ("interval as text", b'{"interval_ms": "5000"}', "interval_ms must be a whole number"),
    ("interval as true", b'{"interval_ms": true}', "interval_ms must be a whole number"),
    ("unknown key", b'{"intervall_ms": 5000}', "unknown setting"),
    ("unknown board", b'{"board": "uno"}', "board must be one of"),
    ("label beyond 32 bytes", ('{"label": "%s"}' % ("µ" * 20)).encode(), "label must be text of at most 32 bytes"),
    ("five channels", json.dumps({"channels": [{"name": f"c{i}", "led": i, "adc": 26} for i in range(5)]}).encode(),
     "channels must be a list of 1 to 4"),
    ("channel with an extra key", b'{"channels": [{"name": "a", "led": 1, "adc": 26, "cmd": "x"}]}',
     "exactly name, led and adc"),
    ("pin beyond 255", b'{"temp_pin": 400}', "temp_pin must be a pin number"),
    ("path length NaN", b'{"path_cm": NaN}', "path_cm must be a number from 0.01 to 10"),
    ("i2c of another sensor", b'{"i2c": {"sda": 1, "scl": 2, "sensor": "other", "address": 41}}',
     "i2c sensor must be tsl2591"),
]


def _firmware_settings():
    sys.path.insert(0, str(ROOT / "firmware"))
    try:
        import boards.cpy  # noqa: F401 — the const() shim the firmware needs in CPython
        from nightcell_fw import settings
    finally:
        sys.path.remove(str(ROOT / "firmware"))
    return settings


@pytest.mark.parametrize("name, content, message", SETTINGS_CASES, ids=[c[0] for c in SETTINGS_CASES])
def test_bad_settings_file_falls_back_to_defaults_with_a_reason(tmp_path, name, content, message):
    settings = _firmware_settings()
    path = tmp_path / "settings.json"
    path.write_bytes(content)
    got, problem = settings.load(str(path))
    # schema/settings.md: a bad file is reported (EVENT 2) and the board runs on the defaults, never crashes
    assert got == settings.defaults()
    assert problem is not None and message in problem, problem
    assert path.read_bytes() == content  # the file is left for the user to fix, not rewritten


def test_settings_defaults_file_loads_cleanly(tmp_path):
    settings = _firmware_settings()
    path = tmp_path / "settings.json"
    shutil.copy(ROOT / "schema" / "settings_default.json", path)
    got, problem = settings.load(str(path))
    assert problem is None and got == settings.defaults()


# -- values already journaled that cannot be used -------------------------------------------------------------------

def test_a_journaled_standard_of_1e999_is_left_out_and_named(tmp_path):
    records = [F.decode_record(r)[0] for r in journal_records()]
    for r in records:
        if r.kind == F.KIND_MARK and r.fields["label"] == "dye 6":
            r.fields["value"] = "1e999"  # what `standard 1e999` journaled before the CLI checked it
    db = store_as_synced(tmp_path / "bad-standard.db", DEVICE, records)
    out = CliRunner().invoke(cli, ["calibrate", "--db", str(db), "--json"])
    cal = json.loads(out.stdout)["calibration"]
    assert cal["n"] == 4
    left_out = f"the standard 'dye 6' of {TAKEN} has a concentration of 1e999 (not a physical amount): left out"
    assert cal["inputs"]["left_out"] == [left_out]
    text = CliRunner().invoke(cli, ["calibrate", "--db", str(db)]).output
    assert f"note: {left_out}" in text and "1:6" not in text


# -- file names: one page per run, whatever the labels ---------------------------------------------------------------

def test_n_runs_give_n_pages_whatever_their_labels(tmp_path):
    labels = ["NaOH 0.02 M", "NaOH 0.04 M", "x" * 61, "x" * 61 + "y", "CON", "end dot."]
    records = []
    for i, label in enumerate(labels):
        device = f"5eba0000000001{i:02x}"
        records.append((device, [F.decode_record(r)[0] for r in journal_records(device=device, run_label=label)]))
    db = tmp_path / "many.db"
    for device, recs in records:
        store_as_synced(db, device, recs)
    result = CliRunner().invoke(cli, ["report", "--db", str(db), "--all", "--out", str(tmp_path / "r")])
    assert result.exit_code == 0, result.output
    pages = sorted((tmp_path / "r").glob("*.html"))
    assert len(pages) == len(labels), [p.name for p in pages]
    figures = sorted((tmp_path / "r").glob("*-absorbance.png"))
    assert len(figures) == len(labels) and len(list((tmp_path / "r").glob("*-absorbance.svg"))) == len(labels)
    wrote = [ln for ln in result.output.splitlines() if ln.startswith("wrote ")]
    assert len(wrote) == len(set(wrote)) == len(list((tmp_path / "r").iterdir()))
    reserved = {"CON", "PRN", "AUX", "NUL", *(f"COM{i}" for i in range(10)), *(f"LPT{i}" for i in range(10))}
    for p in (tmp_path / "r").iterdir():
        assert p.name.split(".")[0].upper() not in reserved and not p.name.endswith((".", " ")), p.name
    csv_out = CliRunner().invoke(cli, ["export", "--db", str(db), "--out", str(tmp_path / "x")])
    assert csv_out.exit_code == 0, csv_out.output
    assert len(list((tmp_path / "x").glob("*-absorbance.csv"))) == len(labels)


# -- reading commands on a read-only medium work; outputs onto a full one are refused whole ------------------------

@pytest.mark.parametrize("args", [
    ["list", "runs", "--db", "{db}"],
    ["list", "devices", "--db", "{db}"],
    ["report", "--db", "{db}", "--all", "--out", "{dir}/r"],
    ["export", "--db", "{db}", "--out", "{dir}/x"],
    ["merge", "{db}", "--db", "{dir}/target.db"],
], ids=["list runs", "list devices", "report", "export", "merge from it"])
def test_reading_commands_work_on_a_read_only_database(args, template, tmp_path):
    # a WAL database on a read-only filesystem: SQLite cannot make its -shm file there, so it is read immutable
    with _Medium("readonly", tmp_path / "medium") as medium:
        db = medium.place(_copy(template, tmp_path))
        medium.seal()
        before = snapshot(db)
        result = CliRunner().invoke(cli, [_fill(a, {"db": str(db), "dir": str(tmp_path)}) for a in args])
        assert result.exit_code == 0, result.output
        assert "Traceback" not in result.output and "Warning" not in result.output
        assert snapshot(db) == before
    if args[0] == "merge":
        assert Store.open_read(tmp_path / "target.db").count("samples") == 40


def test_a_writing_command_on_a_read_only_database_says_so(template, tmp_path):
    with _Medium("readonly", tmp_path / "medium") as medium:
        db = medium.place(_copy(template, tmp_path))
        medium.seal()
        result = CliRunner().invoke(cli, ["rate", "--db", str(db)])
    assert result.exit_code == 4, result.output
    assert "the file or its folder is read-only; this command saves to the database" in result.output


@pytest.mark.parametrize("args", [["export", "--db", "{db}", "--out", "{out}"],
                                  ["report", "--db", "{db}", "--all", "--out", "{out}"],
                                  ["rate", "--db", "{db}", "--out", "{out}/fit.json"]],
                         ids=["export", "report", "rate --out"])
def test_outputs_onto_a_full_disk_are_refused_whole(args, template, tmp_path):
    db = _copy(template, tmp_path)
    with _Medium("full", tmp_path / "medium") as medium:
        out = tmp_path / "medium" / "out"
        out.mkdir()
        medium.seal()
        before = snapshot(db)
        result = CliRunner().invoke(cli, [_fill(a, {"db": str(db), "out": str(out)}) for a in args])
        assert result.exit_code == 2, result.output
        assert "No space left on device" in result.output and "cannot write" in result.output, result.output
        assert sorted(p.name for p in out.iterdir()) == []  # no part file, no half of the outputs
        assert snapshot(db) == before  # rate --out saves nothing when its file cannot be written


def test_a_read_only_home_gives_no_matplotlib_noise(template, tmp_path):
    import subprocess

    db = _copy(template, tmp_path)
    with _Medium("readonly", tmp_path / "home") as home:
        home.seal()
        env = dict(os.environ, HOME=str(tmp_path / "home"), XDG_CONFIG_HOME="", XDG_CACHE_HOME="")
        env.pop("MPLCONFIGDIR", None)
        done = subprocess.run([sys.executable, "-m", "nightcell.cli", "report", "--db", str(db), "--all", "--out",
                               str(tmp_path / "r")], capture_output=True, text=True, env=env, timeout=300)
    assert done.returncode == 0, done.stderr
    assert "matplotlib" not in done.stderr and "mkdir" not in done.stderr, done.stderr


# -- a sync that fails half-way acknowledges nothing it has not committed ---------------------------------------------

def _many_records(device: str) -> list[bytes]:
    """Three boots of ``journal_records``: enough batches for a sync to fail half-way."""
    out = []
    for boot in (1, 2, 3):
        for r in journal_records(device=device, n_samples=200):
            rec, _ = F.decode_record(r)
            out.append(F.encode_record(rec.kind, boot, rec.seq, rec.uptime_ms, rec.fields))
    return out


def _sync_scripted(board: ScriptedBoard, db: Path, *, max_pages: int | None = None) -> Any:
    from nightcell.wire.link import Board
    from nightcell.store.sync import sync_board

    fake = FakePort(board)
    try:
        with Board.open(fake.path, timeout=2.0) as link, Store.open(db) as store:
            if max_pages is not None:
                count = store.conn.execute("PRAGMA page_count").fetchone()[0]
                store.conn.execute(f"PRAGMA max_page_count = {count + max_pages}")
            return sync_board(link, store, batch_bytes=512)
    finally:
        fake.close()


def test_disk_full_mid_sync_acknowledges_only_what_was_committed_and_a_second_sync_completes(tmp_path):
    """The disk fills after some batches have committed: exit 4 (StoreError), every ``ack`` the board got is at or
    before the committed stored position, and once there is room again a sync completes with every row once."""
    device = "5eba0000000000ac"
    records = _many_records(device)
    db = tmp_path / "full.db"
    Store.open(db).close()
    scratch = tmp_path / "scratch.db"
    shutil.copy(db, scratch)
    with Store.open(scratch) as store:
        before = store.conn.execute("PRAGMA page_count").fetchone()[0]
    _sync_scripted(ScriptedBoard(records, device=device, max_reply=1024), scratch)
    with Store.open(scratch) as store:
        needed = store.conn.execute("PRAGMA page_count").fetchone()[0] - before
    board = ScriptedBoard(records, device=device, max_reply=1024)
    with pytest.raises(StoreError, match="database or disk is full") as err:
        _sync_scripted(board, db, max_pages=needed // 2)  # room for about half of what the whole sync needs
    assert err.value.exit_code == 4
    with Store.open(db) as store:
        state = store.journal_state(device, SCRIPTED_JOURNAL)
        samples_before = store.count("samples")
    assert state is not None and board.acks, "the disk filled before any batch committed: the test proves nothing"
    assert max(board.acks) <= state[0] < len(board.journal), (board.acks, state)
    assert samples_before < 600
    again = ScriptedBoard(records, device=device, max_reply=1024)
    summary = _sync_scripted(again, db)
    with Store.open(db) as store:
        assert store.count("samples") == 600  # three boots of 200 samples, each once
        assert store.journal_state(device, SCRIPTED_JOURNAL) == (len(board.journal), len(board.journal))
    assert summary.start == state[0] and max(again.acks) == len(board.journal)


def test_a_gap_after_some_progress_stops_the_sync_and_nothing_past_it_is_acknowledged(tmp_path):
    """A board that answers honestly, then, from some position on, with records from 5000 bytes further on: the sync
    stops with a board fault (exit 3) naming the gap, and no ``ack`` reaches past where its records stopped
    continuing."""
    from nightcell.errors import ProtocolError

    device = "5eba0000000000ad"
    records = _many_records(device)
    board = ScriptedBoard(records, device=device, read_offset=5000, max_reply=1024)
    board.gap_from = board.starts[len(board.starts) // 2]
    db = tmp_path / "gap.db"
    with pytest.raises(ProtocolError, match=f"asked for its journal at {board.gap_from} and sent records from "
                                            f"{board.gap_from + 5000}, 5000 bytes past it") as err:
        _sync_scripted(board, db)
    assert err.value.exit_code == 3
    with Store.open(db) as store:
        stored_to, acked_to = store.journal_state(device, SCRIPTED_JOURNAL)
    assert board.acks and max(board.acks) <= board.gap_from and stored_to <= board.gap_from


# -- a slow board: timeouts follow --timeout and the link's baud rate -------------------------------------------------

def test_a_board_answering_in_3_s_is_found_with_a_longer_timeout():
    def slow(line: bytes) -> bytes:
        time.sleep(3.0)
        return F.encode_reply(F.REPLY_OK, int(line.split(b" ")[0]), json.dumps(HELLO).encode())

    fake = FakePort(slow)
    try:
        result = CliRunner().invoke(cli, ["hello", "--port", fake.path, "--timeout", "6"])
    finally:
        fake.close()
    assert result.exit_code == 0, result.output
    assert f"device {DEVICE}" in result.output  # hello answered: the board it found


def test_a_journal_read_waits_as_long_as_the_baud_rate_needs():
    from nightcell.wire.link import Board, JournalPull

    with Board.open("loop://", timeout=5.0, baudrate=2400) as slow, Board.open("loop://", timeout=5.0) as fast:
        # 4 KB at 2400 baud (10 bits a byte) take 17 s: a chunk and the one queued behind it get that long each
        assert JournalPull(slow, 0, 1).timeout >= 5.0 + 2 * 17.0
        assert JournalPull(fast, 0, 1).timeout < 5.0 + 3.0


def test_a_forged_board_with_the_stored_journal_id_and_other_content_is_refused_with_nothing_changed(tmp_path, template):
    """A board that gives the very journal id and keys of stored rows but other content (another run label, other
    counts): refused, exit 3, no ack, the database exactly as it was."""
    from nightcell.errors import RecordConflict

    db = tmp_path / "class.db"
    shutil.copy(template, db)
    before = snapshot(db)
    forged = journal_records(run_label="forged run", blank_label="not water")
    board = ScriptedBoard(forged, device=DEVICE, hello={"journal": SCRIPTED_JOURNAL})
    with pytest.raises(RecordConflict, match="its marks row of boot 1, seq 3 differs") as err:
        _sync_scripted(board, db)
    assert err.value.exit_code == 3 and board.acks == []
    assert snapshot(db) == before
