"""Talk to a board: a byte transport over any pyserial URL, and a device client with one method per command.

Layers: ``Transport`` (open a URL, send a request line, read reply frames with a deadline) under ``Board`` (named
commands, retries, the board's errors as ``DeviceError``). Everything goes through ``serial.serial_for_url``, so a
real port, a pseudo-terminal path and ``loop://`` are one code path. This module never touches the database.

Example::

    with Board.open("/dev/ttyACM0") as board:
        info = board.hello()
        print(info["device"], info["head"])
"""

from __future__ import annotations

import json
import struct
import time
from typing import Any, Callable, Iterator

import serial
from serial.tools import list_ports

try:  # POSIX: when a tty vanishes, pyserial's flush (tcdrain) lets termios.error through, and it is no OSError
    import termios

    _PORT_ERRORS: tuple[type[BaseException], ...] = (serial.SerialException, OSError, termios.error)
except ImportError:  # pragma: no cover — Windows
    _PORT_ERRORS = (serial.SerialException, OSError)

from ..errors import DeviceError, DeviceNotFound, DeviceTimeout, NightcellError, ProtocolError
from .frames import REPLY_DATA, REPLY_ERR, REPLY_OK, Reply, ReplyReader, check_field, encode_request, quote_text

__all__ = ["Deadline", "Transport", "Board", "JournalPull", "BOARD_USB_IDS", "candidate_ports", "discover"]

# (vendor id, product id): what a nightcell board can appear as on USB.
BOARD_USB_IDS = {
    (0x2E8A, 0x0005): "MicroPython on RP2040/RP2350 (Pico)",
    (0x10C4, 0xEA60): "CP210x USB-UART bridge",
    (0x1A86, 0x7523): "CH340 USB-UART bridge",
    (0x1A86, 0x55D4): "CH9102 USB-UART bridge",
    (0x0403, 0x6001): "FTDI USB-UART bridge",
    (0x303A, 0x1001): "Espressif native USB",
}

READ_CHUNK = 4096


class Deadline:
    """A point in monotonic time; every wait in the link is bounded by one."""

    def __init__(self, seconds: float):
        self.end = time.monotonic() + seconds

    def remaining(self) -> float:
        return max(0.0, self.end - time.monotonic())

    def expired(self) -> bool:
        return time.monotonic() >= self.end


def candidate_ports() -> list[dict[str, Any]]:
    """Serial ports whose USB id is one a nightcell board can have."""
    out = []
    for p in list_ports.comports():
        if p.vid is not None and (p.vid, p.pid) in BOARD_USB_IDS:
            out.append({"port": p.device, "vid": p.vid, "pid": p.pid, "kind": BOARD_USB_IDS[(p.vid, p.pid)],
                        "serial_number": p.serial_number, "description": p.description})
    return out


def discover(*, timeout: float = 1.0, ports: list[dict[str, Any]] | None = None) -> list[dict[str, Any]]:
    """Ask every candidate port (``candidate_ports()``) to identify; one entry per port, with ``hello`` or ``error``.

    A port that holds no nightcell board (another program, a board running something else) is listed with the
    reason, so a class set-up can see at once which boards answered.
    """
    found = []
    for p in candidate_ports() if ports is None else ports:
        entry = dict(p)
        try:
            with Board.open(p["port"], timeout=timeout) as board:
                board.retries = 2
                entry["hello"] = board.hello(timeout=timeout)
        except NightcellError as exc:
            entry["error"] = str(exc)
        found.append(entry)
    return found


class Transport:
    """A serial connection that sends request lines and yields reply frames."""

    def __init__(self, port: serial.SerialBase, url: str):
        self.port = port
        self.url = url
        self.reader = ReplyReader()
        self.bytes_in = 0
        self.bytes_out = 0

    @classmethod
    def open(cls, url: str, *, baudrate: int = 115200) -> "Transport":
        """Open ``url`` (a device path or any pyserial URL). ``DeviceNotFound`` when it cannot be opened.

        DTR and RTS are left as the operating system raises them at open (both asserted). The auto-reset circuit of
        ESP32 boards behind a USB-UART bridge resets the chip whenever RTS is asserted while DTR is not; setting
        the lines one after the other after opening passes through exactly that state, so we never set them. A
        Pico's USB serial needs DTR asserted to send, which this also keeps. Device paths are opened exclusively,
        so a second program cannot interleave its requests with ours.
        """
        exclusive = "://" not in url
        try:
            port = serial.serial_for_url(url, baudrate=baudrate, timeout=0.02, write_timeout=2.0,
                                         do_not_open=True)
            if exclusive and hasattr(port, "exclusive"):
                port.exclusive = True
            port.open()
        except (serial.SerialException, ValueError, OSError) as exc:
            raise DeviceNotFound(
                f"no board at {url}: cannot open it ({exc}) — is it plugged in, is the path right, is no other "
                "program using it, and may you use it (Linux: the dialout group, see hardware_notes/linux.md)?"
            ) from exc
        return cls(port, url)

    def close(self) -> None:
        try:
            self.port.close()
        except _PORT_ERRORS:
            pass

    def send(self, line: bytes) -> None:
        try:
            self.port.write(line)
            self.port.flush()
        except _PORT_ERRORS as exc:
            raise DeviceTimeout(f"lost the board on {self.url} while sending ({exc}): check the cable") from exc
        self.bytes_out += len(line)

    def discard_input(self) -> None:
        """Drop anything already received (stale replies, a REPL banner)."""
        try:
            self.port.reset_input_buffer()
        except _PORT_ERRORS:
            pass
        self.reader = ReplyReader()

    def receive(self) -> int:
        """Read what has arrived (waiting at most the port's short timeout for the first byte); bytes read."""
        try:
            waiting = self.port.in_waiting
            data = self.port.read(max(1, min(waiting, 65536)))
        except _PORT_ERRORS as exc:
            raise DeviceTimeout(f"lost the board on {self.url} while reading ({exc}): check the cable") from exc
        if data:
            self.bytes_in += len(data)
            self.reader.feed(data)
        return len(data)

    def frames_until(self, deadline: Deadline) -> Reply | None:
        """The next whole reply frame, or None when the deadline passes first."""
        while True:
            for frame in self.reader.frames():
                return frame
            if deadline.expired():
                return None
            self.receive()


class Board:
    """Named commands of protocol v1 (schema/protocol.md) over a ``Transport``."""

    def __init__(self, transport: Transport, *, timeout: float = 5.0, retries: int = 3):
        self.transport = transport
        self.timeout = timeout
        self.retries = retries
        self._tag = 0

    @classmethod
    def open(cls, url: str, *, timeout: float = 5.0, baudrate: int = 115200) -> "Board":
        return cls(Transport.open(url, baudrate=baudrate), timeout=timeout)

    def transfer_seconds(self, nbytes: int) -> float:
        """How long ``nbytes`` take on the wire at the link's baud rate (8N1: 10 bits a byte); 0 where the URL has
        no baud rate (a pty, a socket)."""
        baud = getattr(getattr(self.transport, "port", None), "baudrate", None)
        # at 115 200 baud and above a chunk crosses in a fraction of any timeout (and a pty or a board's own USB
        # ignores the rate): only a slower bridge, given with --baud, lengthens the waits
        return 0.0 if not baud or baud >= 115200 else nbytes * 10.0 / float(baud)

    def close(self) -> None:
        self.transport.close()

    def __enter__(self) -> "Board":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _next_tag(self) -> int:
        self._tag = (self._tag + 1) % 65535
        return self._tag

    def request(self, verb: str, *args: Any, timeout: float | None = None, retry: bool = True) -> Reply:
        """Send one request and wait for its reply; idempotent requests are retried a bounded number of times."""
        attempts = self.retries if retry else 1
        last_tag = None
        for attempt in range(attempts):
            tag = self._next_tag()
            last_tag = tag
            self.transport.send(encode_request(tag, verb, *args))
            deadline = Deadline(self.timeout if timeout is None else timeout)
            while True:
                frame = self.transport.frames_until(deadline)
                if frame is None:
                    break  # timed out: retry with a new tag
                if frame.tag != tag:
                    continue  # a late reply to an earlier attempt
                if frame.kind == REPLY_ERR:
                    # A line damaged on the way is refused too: an idempotent request is worth asking again.
                    if attempt + 1 < attempts:
                        break
                    raise DeviceError(f"the board refused '{verb}': {frame.text()}")
                return frame
        raise DeviceTimeout(
            f"no reply to '{verb}' from {self.transport.url} after {attempts} tries (last tag {last_tag}): "
            "is the board running nightcell firmware, and is no other program using the port?"
        )

    def _json(self, verb: str, *args: Any, retry: bool = True, timeout: float | None = None) -> Any:
        frame = self.request(verb, *args, retry=retry, timeout=timeout)
        if frame.kind != REPLY_OK:
            raise ProtocolError(f"'{verb}' expected an OK reply, got kind {frame.kind}")
        try:
            obj = frame.json()
        except (ValueError, UnicodeDecodeError, RecursionError) as exc:
            # RecursionError: JSON nested too deep to read (a 4 KB payload can nest 2000 levels)
            raise ProtocolError(f"the board's reply to '{verb}' is not JSON this host can read: is it running "
                                "nightcell firmware? Nothing was stored") from exc
        if not isinstance(obj, dict):
            raise ProtocolError(f"the board's reply to '{verb}' is not a JSON object (got {str(obj)[:40]!r}): is it "
                                "running nightcell firmware? Nothing was stored")
        return obj

    # -- commands -----------------------------------------------------------------------------------------------

    def hello(self, timeout: float | None = None) -> dict[str, Any]:
        """Identify the board; ``DeviceNotFound`` if nothing answers (``retries`` tries of ``timeout`` s each, by
        default the board's own ``timeout``, so ``--timeout`` reaches it)."""
        wait = self.timeout if timeout is None else timeout
        heard = self.transport.bytes_in
        try:
            info = self._json("hello", timeout=wait)
        except DeviceTimeout as exc:
            got = self.transport.bytes_in - heard
            seen = ("nothing came back" if got == 0 else
                    f"{got} bytes came back, none of them a nightcell reply (another device, or the wrong baud rate?)")
            raise DeviceNotFound(
                f"no board answered on {self.transport.url} within {self.retries} tries of {wait:g} s ({seen}) — is "
                "it plugged in and running nightcell firmware? A slow link may need a longer --timeout"
            ) from exc
        if not isinstance(info, dict) or info.get("protocol") != 1:
            raise ProtocolError(f"the device on {self.transport.url} speaks an unknown protocol: {info!r:.200}")
        _check_hello(info, self.transport.url)
        return info

    def anchor(self, host_unix_ms: int) -> dict[str, Any]:
        value = int(host_unix_ms)
        return self._json("anchor", value, check_field("anchor", value), retry=False)

    def mark(self, kind: str, label: str = "", value: str | None = None, timeout: float = 60.0) -> dict[str, Any]:
        """Take and journal a dark/blank/opaque/standard mark (standard needs ``value``)."""
        if kind == "standard":
            if value is None:
                raise ValueError("a standard needs a value")
            return self._json("standard", value, quote_text(label), retry=False, timeout=timeout)
        if kind not in ("dark", "blank", "opaque"):
            raise ValueError(f"unknown mark {kind!r}")
        return self._json(kind, quote_text(label), retry=False, timeout=timeout)

    def start(self, label: str = "", timeout: float = 60.0) -> dict[str, Any]:
        return self._json("start", quote_text(label), retry=False, timeout=timeout)

    def stop(self) -> dict[str, Any]:
        return self._json("stop", retry=False)

    def note(self, text: str) -> dict[str, Any]:
        return self._json("note", quote_text(text), retry=False)

    def flush(self) -> dict[str, Any]:
        return self._json("flush")

    def status(self) -> dict[str, Any]:
        return self._json("status")

    def set(self, key: str, value: Any) -> dict[str, Any]:
        text = value if isinstance(value, str) else json.dumps(value, separators=(",", ":"))
        return self._json("set", key, quote_text(text), retry=False)

    def ack(self, position: int) -> dict[str, Any]:
        value = int(position)
        reply = self._json("ack", value, check_field("ack", value))
        tail = reply.get("tail", 0)
        if not isinstance(tail, int) or isinstance(tail, bool) or tail < 0:
            raise ProtocolError(f"the board answered 'ack {value}' with a tail that is not a position ({tail!r:.40})")
        return reply

    def read(self, position: int, max_bytes: int = READ_CHUNK) -> tuple[int, bytes]:
        """Journal bytes from ``position`` (whole records)."""
        frame = self.request("read", int(position), int(max_bytes))
        if frame.kind != REPLY_DATA:
            raise ProtocolError(f"'read' expected DATA, got kind {frame.kind}")
        pos, data = frame.data()
        if pos != position:
            raise ProtocolError(f"asked for position {position}, the board sent {pos}")
        return pos, data

    def hold(self) -> dict[str, Any]:
        """Restart the board held: its next boot stays in the REPL with the watchdog off (for a firmware update)."""
        return self._json("hold", retry=False)

    def reset(self) -> dict[str, Any]:
        return self._json("reset", retry=False)


_DEVICE_ID_CHARS = frozenset("0123456789abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ-_.:")
_U32 = (1 << 32) - 1
# hello fields (schema/protocol.md) the host acts on, with the range each must be in; None: any size
_HELLO_INTEGERS = {"journal": _U32, "head": _U32, "tail": _U32, "boot": _U32, "interval_ms": None,
                   "uptime_ms": None, "free_bytes": None, "settings_crc": None}
_HELLO_REQUIRED = ("device", "journal", "head", "tail", "boot")


def _check_hello(info: dict[str, Any], url: str) -> None:
    """Refuse a ``hello`` whose fields the host would misuse (text where a number goes, a dict as a device id)."""

    def bad(name: str, why: str) -> ProtocolError:
        value = repr(info[name]) if name in info else ""
        if len(value) > 60:
            value = value[:57] + "..."
        got = f" (got {value})" if value else ""
        return ProtocolError(f"the board on {url} sent a hello this host cannot use: '{name}' {why}{got} "
                             "— is it running nightcell firmware? Nothing was stored or acknowledged")

    for name in _HELLO_REQUIRED:
        if name not in info:
            raise bad(name, "is missing")
    device = info["device"]
    if not isinstance(device, str) or not 1 <= len(device) <= 64 or not set(device) <= _DEVICE_ID_CHARS:
        raise bad("device", "must be a device id (1 to 64 letters, digits or - _ . :)")
    for name, top in _HELLO_INTEGERS.items():
        if name not in info:
            continue
        value = info[name]
        if not isinstance(value, int) or isinstance(value, bool) or value < 0 or (top is not None and value > top):
            raise bad(name, "must be a whole number" + (f" from 0 to {top}" if top is not None else " ≥ 0"))
    if info["tail"] > info["head"]:
        raise bad("tail", f"lies past the head {info['head']}")
    for name in ("board", "firmware", "label"):
        if info.get(name) is not None and not isinstance(info[name], str):
            raise bad(name, "must be text")
    if "running" in info and not isinstance(info["running"], bool):
        raise bad("running", "must be true or false")


class JournalPull:
    """Read a stretch of the journal as fast as the link allows, in order, each chunk verified by its frame CRC.

    A ``read`` reply carries at most 4 KB; waiting for each reply before asking for the next leaves the line idle
    for a turnaround every 4 KB. The board answers in order, and a DATA frame's header (position and length) arrives
    before its payload, so as soon as a header shows where a chunk will end we ask for the next one: the board has
    it queued when it finishes sending. The early request rests on an unverified header; only chunks whose verified
    position is the one we need are used, and anything lost or damaged is asked for again from the last good
    position (bounded retries, every wait with a deadline).

    Iterate to get ``(position, bytes)`` chunks of whole records; call ``quiesce()`` before sending another request
    (an ``ack``) in the middle.
    """

    def __init__(self, board: "Board", start: int, until: int | None = None, *, depth: int = 2,
                 max_bytes: int = READ_CHUNK, timeout: float | None = None, retries: int | None = None):
        self.board = board
        self.cursor = start
        self.until = until
        self.depth = max(1, depth)
        self.max_bytes = max_bytes
        # a chunk (and the one queued behind it) must have time to cross a slow link: 4 KB take 17 s at 2400 baud
        base = board.timeout if timeout is None else timeout
        self.timeout = base + 2 * (depth + 1) * board.transfer_seconds(max_bytes + 16)
        self.retries = board.retries if retries is None else retries
        self.requests = 0
        self.resends = 0
        self._inflight: list[tuple[int, int]] = []  # (tag, position) in the order sent
        self._ahead_done: set[int] = set()
        self._parked: dict[int, bytes] = {}  # verified chunks that arrived before the one at the cursor
        self._finished = False
        self._refusals = 0
        self._misplaced = 0  # replies in a row to a read at the cursor that started somewhere else

    def _send(self, position: int) -> None:
        tag = self.board._next_tag()
        self.board.transport.send(encode_request(tag, "read", int(position), int(self.max_bytes)))
        self._inflight.append((tag, position))
        self.requests += 1

    def _wanted(self, position: int) -> bool:
        return self.until is None or position < self.until

    def _top_up(self, allow_ahead: bool = True) -> None:
        if not self._inflight and not self._finished and self._wanted(self.cursor):
            self._send(self.cursor)
        if not allow_ahead or not self._inflight or len(self._inflight) >= self.depth:
            return
        header = self.board.transport.reader.peek_header()
        if header is None:
            return
        kind, tag, length, first = header
        last_tag, last_pos = self._inflight[-1]
        if kind != REPLY_DATA or tag != last_tag or tag in self._ahead_done or length < 4:
            return
        (pos,) = struct.unpack("<I", first)
        self._ahead_done.add(tag)
        end = pos + length - 4
        if length > 4 and end > last_pos and self._wanted(end):
            self._send(end)

    def quiesce(self) -> None:
        """Collect the replies still in flight (keeping good chunks for later) so another request can go out."""
        deadline = Deadline(self.timeout)
        while self._inflight and not deadline.expired():
            for frame in self.board.transport.reader.frames():
                got = self._take(frame)
                if got is not None:
                    self._parked[got[0]] = got[1]
            if self._inflight:
                self.board.transport.receive()
        self._inflight.clear()

    def _take(self, frame: Reply) -> tuple[int, bytes] | None:
        """Account for one verified frame; returns a chunk when it starts at the cursor."""
        tags = [t for t, _ in self._inflight]
        if frame.tag not in tags:
            return None  # a late or duplicated reply to a request we gave up on
        k = tags.index(frame.tag)
        _, asked = self._inflight[k]
        del self._inflight[: k + 1]  # replies come in order: anything sent before this one was lost
        self._ahead_done.discard(frame.tag)
        if frame.kind == REPLY_ERR:
            # Most likely the request line was damaged on the way; a real refusal repeats and ends the pull.
            self._refusals += 1
            if self._refusals >= self.retries:
                raise DeviceError(f"the board refused to read its journal at {asked}: {frame.text()}")
            self.resends += 1
            return None
        if frame.kind != REPLY_DATA:
            raise ProtocolError(f"'read' expected a DATA reply, got kind {frame.kind}")
        pos, data = frame.data()
        if pos != asked:
            # Never taken as it came: a read whose position was damaged on the way is answered from wherever the
            # damaged digits point (the board walks to the next record boundary), and a chunk past the cursor
            # taken as a trim would let the host store, and acknowledge, across a stretch it never stored.
            # Asked again; a board that keeps answering a read at the cursor from elsewhere is at fault.
            if asked == self.cursor:
                self._misplaced += 1
                self.resends += 1
                if self._misplaced >= self.retries:
                    raise ProtocolError(_misplaced_message(self.board.transport.url, asked, pos))
            return None
        if not data:
            if asked == self.cursor and self.until is not None and asked < self.until:
                # the board said (hello) that its journal is durable up to ``until``: nothing here contradicts it
                self._misplaced += 1
                self.resends += 1
                if self._misplaced >= self.retries:
                    raise ProtocolError(
                        f"the board on {self.board.transport.url} sent nothing at {asked} although it gave its "
                        f"journal's end as {self.until} — a board fault; nothing was acknowledged past {asked}; keep "
                        "the database and report this")
            elif asked == self.cursor:
                self._finished = True  # nothing durable at or after the cursor
            return None
        if pos == self.cursor:
            self._misplaced = 0
            return pos, data
        if pos > self.cursor and len(self._parked) < 8:
            self._parked[pos] = data
        return None

    def __iter__(self) -> Iterator[tuple[int, bytes]]:
        failures = 0
        deadline = Deadline(self.timeout)
        while not self._finished and self._wanted(self.cursor):
            if self.cursor in self._parked:
                data = self._parked.pop(self.cursor)
                self.cursor += len(data)
                self._misplaced = 0
                yield self.cursor - len(data), data
                continue
            self._top_up()
            got = None
            for frame in self.board.transport.reader.frames():
                got = self._take(frame)
                if got is not None:
                    break
            if got is not None:
                pos, data = got
                self.cursor = pos + len(data)
                self._parked = {p: d for p, d in self._parked.items() if p >= self.cursor}
                failures = 0
                self._refusals = 0
                deadline = Deadline(self.timeout)
                self._top_up()
                yield pos, data
                continue
            if deadline.expired():
                failures += 1
                if failures >= self.retries:
                    raise DeviceTimeout(
                        f"the board on {self.board.transport.url} stopped sending its journal at position "
                        f"{self.cursor} ({failures} tries of {self.timeout:g} s): check the cable, then sync again "
                        "— everything stored so far is kept"
                    )
                self._inflight.clear()  # whatever was in flight is lost; ask again from the cursor
                self._ahead_done.clear()
                self.resends += 1
                deadline = Deadline(self.timeout)
                continue
            if not self._inflight or self.board.transport.reader.peek_header() is None:
                self.board.transport.receive()
            else:
                self._top_up()
                self.board.transport.receive()


def _misplaced_message(url: str, asked: int, pos: int) -> str:
    if pos > asked:
        what = (f"records from {pos}, {pos - asked} bytes past it: a gap in its journal that this host cannot "
                "account for")
    else:
        what = f"records from {pos}, before it"
    return (f"the board on {url} was asked for its journal at {asked} and sent {what} — a board fault; nothing "
            f"was acknowledged past {asked}; keep the database and report this")


def progress_none(**_: Any) -> None:
    """A progress callback that does nothing."""


ProgressCallback = Callable[..., None]
