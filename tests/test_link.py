"""The link: board discovery by USB id, reads kept in flight, and the relay's throttling and faults.

USB ids are the vendors' published ids (Raspberry Pi 2E8A:0005 for MicroPython on RP2040, Silicon Labs 10C4:EA60,
WCH 1A86:7523 and 1A86:55D4, FTDI 0403:6001, Espressif 303A:1001), as listed in issue 4.
"""

import json
import os
import pty
import time
import tty

import pytest
from click.testing import CliRunner
from serial.tools.list_ports_common import ListPortInfo

from nightcell.wire import link
from nightcell.cli import cli
from nightcell.wire.link import Board, JournalPull, candidate_ports, discover
from nightcell.sim.board import STRAY_TRACEBACK, Fault, Relay, SimulatedBoard
from nightcell.store.database import Store


def _port(device, vid, pid):
    p = ListPortInfo(device)
    p.vid, p.pid = vid, pid
    return p


def test_candidates_are_chosen_by_usb_id(monkeypatch):
    ports = [_port("/dev/ttyACM0", 0x2E8A, 0x0005), _port("/dev/ttyUSB0", 0x10C4, 0xEA60),
             _port("/dev/ttyUSB1", 0x1A86, 0x7523), _port("/dev/ttyUSB2", 0x1A86, 0x55D4),
             _port("/dev/ttyUSB3", 0x0403, 0x6001), _port("/dev/ttyACM1", 0x303A, 0x1001),
             _port("/dev/ttyACM2", 0x046D, 0xC52B), _port("/dev/ttyS0", None, None)]
    monkeypatch.setattr(link.list_ports, "comports", lambda: ports)
    found = [p["port"] for p in candidate_ports()]
    assert found == ["/dev/ttyACM0", "/dev/ttyUSB0", "/dev/ttyUSB1", "/dev/ttyUSB2", "/dev/ttyUSB3", "/dev/ttyACM1"]


@pytest.fixture
def sim(tmp_path):
    s = SimulatedBoard(tmp_path / "sim", device="5e1f0000000000c1", speed=200.0, seed=2,
                       settings={"interval_ms": 1000, "durability_ms": 1000})
    s.start()
    yield s
    s.stop()


def test_discovery_asks_each_candidate_and_says_who_did_not_answer(sim):
    with Board.open(sim.url) as board:
        board.hello(timeout=5.0)  # booted (a loaded machine may take a while to start the interpreter)
    found = discover(timeout=1.0, ports=[{"port": sim.url, "vid": 0x2E8A, "pid": 0x0005},
                                         {"port": "loop://", "vid": 0x10C4, "pid": 0xEA60}])
    assert found[0]["hello"]["device"] == "5e1f0000000000c1" and found[0]["hello"]["protocol"] == 1
    assert "error" in found[1] and "running nightcell firmware" in found[1]["error"]


def test_reads_in_flight_give_the_same_bytes_with_fewer_pauses(sim):
    with Board.open(sim.url) as board:
        board.hello(timeout=5.0)
        board.start("ahead")
        time.sleep(3.0)
        board.stop()
        board.flush()
        head = board.hello()["head"]
        chunks = {}
        for depth in (1, 2):
            pull = JournalPull(board, 0, head, depth=depth, max_bytes=1024)
            chunks[depth] = list(pull)
            assert pull.resends == 0
    data = {d: b"".join(c for _, c in chunks[d]) for d in chunks}
    assert data[1] == data[2] and len(data[1]) >= head
    assert [p for p, _ in chunks[1]] == [p for p, _ in chunks[2]]  # same record-aligned chunks, in order


def test_a_read_ahead_on_a_damaged_header_is_recovered(sim):
    """Flip a bit in the length of a DATA frame's header: the early request goes to a wrong position, the frame
    fails its CRC, and the pull still delivers every byte once, in order."""
    with Board.open(sim.url, timeout=0.4) as board:
        board.hello(timeout=5.0)
        board.start("flip")
        time.sleep(3.0)
        board.stop()
        board.flush()
        head = board.hello()["head"]
        clean = b"".join(c for _, c in JournalPull(board, 0, head, max_bytes=1024))
        sim.schedule([Fault("to_host", 5, "flip", bit=2), Fault("to_host", 1100, "flip", bit=0)])
        pull = JournalPull(board, 0, head, max_bytes=1024)
        got = list(pull)
    assert b"".join(c for _, c in got) == clean
    assert pull.resends >= 1 or pull.requests > len(got)


def _pair():
    """A relay between two ptys, with the far ends open: (relay, board end, host end)."""
    bm, bs = pty.openpty()
    hm, hs = pty.openpty()
    for fd in (bs, hs):
        tty.setraw(fd)
    return bm, bs, hm, hs


def _read(fd, n, timeout=2.0):
    end = time.monotonic() + timeout
    out = b""
    os.set_blocking(fd, False)
    while len(out) < n and time.monotonic() < end:
        try:
            out += os.read(fd, 4096)
        except BlockingIOError:
            time.sleep(0.005)
    return out


@pytest.fixture
def relay():
    bm, bs, hm, hs = _pair()
    r = Relay(bm, hm)
    r.start()
    yield r, bs, hs
    r.stop()
    r.join(30)
    assert not r.alive(), "the relay's pumps did not stop: closing their ptys now could hit a reused descriptor"
    for fd in (bm, bs, hm, hs):
        os.close(fd)


def test_relay_faults_do_what_they_say(relay):
    r, board, host = relay
    payload = bytes(range(200))
    cases = [
        (Fault("to_host", 10, "drop", size=5), payload[:10] + payload[15:]),
        (Fault("to_host", 10, "flip", bit=7), payload[:10] + bytes([payload[10] ^ 0x80]) + payload[11:]),
        (Fault("to_host", 10, "duplicate", size=4), payload[:14] + payload[10:]),
        (Fault("to_host", 10, "truncate", size=150), payload[:10] + payload[160:]),
        (Fault("to_host", 10, "garbage"), payload[:10] + STRAY_TRACEBACK + payload[10:]),
    ]
    for fault, want in cases:
        r.schedule([fault])
        os.write(board, payload)
        assert _read(host, len(want)) == want, fault
        assert _read(host, 1, timeout=0.05) == b""  # nothing more
        assert r.injected == [fault]


def test_relay_truncate_spans_chunks_and_requests_flow_too(relay):
    r, board, host = relay
    r.schedule([Fault("to_host", 100, "truncate", size=300), Fault("to_board", 2, "drop", size=2)])
    os.write(board, bytes(200))
    time.sleep(0.1)
    os.write(board, bytes(range(250)))
    assert _read(host, 150) == bytes(100) + bytes(range(200, 250))
    os.write(host, b"1 hello\n")
    assert _read(board, 6) == b"1 llo\n"


def test_relay_delay_and_disconnect(relay):
    r, board, host = relay
    r.schedule([Fault("to_host", 0, "delay", seconds=0.3)])
    t = time.monotonic()
    os.write(board, b"late")
    assert _read(host, 4) == b"late" and time.monotonic() - t >= 0.29
    r.schedule([Fault("to_host", 3, "disconnect", seconds=0.3)])
    os.write(board, b"abcdef")
    assert _read(host, 3) == b"abc" and _read(host, 1, 0.1) == b""
    os.write(host, b"lost while unplugged\n")
    assert _read(board, 1, 0.1) == b""
    time.sleep(0.3)
    os.write(board, b"back")
    assert _read(host, 4) == b"back"


def test_relay_paces_to_the_baud_rate(relay):
    """At 9600 baud, 10 bits a byte (8N1 framing, the UART's own arithmetic), 480 bytes need at least 0.5 s."""
    r, board, host = relay
    r.baud = 9600
    t = time.monotonic()
    os.write(board, bytes(480))
    assert len(_read(host, 480, timeout=5)) == 480
    assert time.monotonic() - t >= 0.48


def test_sync_all_and_merge_commands(sim, tmp_path):
    runner = CliRunner()
    db = tmp_path / "class.db"
    res = runner.invoke(cli, ["sync-all", "--port", sim.url, "--db", str(db), "--json"])
    assert res.exit_code == 0, res.output
    (entry,) = json.loads(res.output)
    assert entry["device"] == "5e1f0000000000c1" and entry["records"] > 0
    res = runner.invoke(cli, ["sync-all", "--port", "loop://", "--db", str(db), "--timeout", "0.2"])
    assert res.exit_code == 3 and "FAILED" in res.output
    other = tmp_path / "other.db"
    with Store.open(other) as s, s.write():
        s.touch_device("5e1f0000000000c1", label="bench 9")
    res = runner.invoke(cli, ["merge", str(other), "--db", str(db)])
    assert res.exit_code == 0 and "0 new rows" in res.output
    with Store.open(db) as s, s.write():
        s.touch_device("5e1f0000000000c1", label="bench 1")
    res = runner.invoke(cli, ["merge", str(other), "--db", str(db), "--strict"])
    assert res.exit_code == 2 and "nothing merged" in res.output and "bench 9" in res.output
    res = runner.invoke(cli, ["merge", str(tmp_path / "missing.db"), "--db", str(db)])
    assert res.exit_code == 2 and "no database at" in res.output
    for command in ("sync-all", "merge", "deploy", "roll-call"):
        assert "Example:" in runner.invoke(cli, [command, "--help"]).output


class _FakeTransport:
    """Replies fed by the test; requests recorded (no port)."""

    def __init__(self):
        from nightcell.wire.frames import ReplyReader

        self.reader = ReplyReader()
        self.sent = []
        self.url = "fake://"
        self.bytes_in = 0

    def send(self, line):
        self.sent.append(line)

    def receive(self):
        time.sleep(0.001)
        return 0


def test_a_duplicated_reply_after_the_last_chunk_is_ignored():
    """The last chunk arrives and a duplicate of a reply is already arriving behind it (a duplicated stretch on the
    cable): the pull ends cleanly with nothing in flight. (Found by the fault campaign.)"""
    from nightcell.wire import frames as F

    t = _FakeTransport()
    board = Board(t, timeout=0.2, retries=2)
    record = F.encode_record(F.KIND_ANCHOR, 1, 0, 0, {"host_unix_ms": 5})
    reply = F.encode_reply(F.REPLY_DATA, 1, (0).to_bytes(4, "little") + record)
    t.reader.feed(reply + reply[:15])  # the whole reply to tag 1, then the start of a copy of it
    got = list(JournalPull(board, 0, len(record)))
    assert got == [(0, record)] and len(t.sent) == 1


def test_spy_url_logs_the_exchange(sim, tmp_path):
    """pyserial's spy:// wrapper (its documented URL handler) sits in front of the real port for debugging."""
    log = tmp_path / "spy.txt"
    with Board.open(f"spy://{sim.url}?file={log}") as board:
        assert board.hello(timeout=5.0)["device"] == "5e1f0000000000c1"
    text = log.read_text()
    assert "1 hello" in text and "RX" in text and "A7" in text  # our request line, the reply with its sync byte
