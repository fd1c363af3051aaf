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
import time
from typing import Any, Callable

import serial
from serial.tools import list_ports

from .errors import DeviceError, DeviceNotFound, DeviceTimeout, ProtocolError
from .frames import REPLY_DATA, REPLY_ERR, REPLY_OK, Reply, ReplyReader, encode_request, quote_text

__all__ = ["Deadline", "Transport", "Board", "BOARD_USB_IDS", "candidate_ports"]

# (vendor id, product id): what a nightcell board can appear as on USB.
BOARD_USB_IDS = {
    (0x2E8A, 0x0005): "MicroPython on RP2040/RP2350 (Pico)",
    (0x10C4, 0xEA60): "CP210x USB-UART bridge",
    (0x1A86, 0x7523): "CH340 USB-UART bridge",
    (0x1A86, 0x55D4): "CH9102 USB-UART bridge",
    (0x0403, 0x6001): "FTDI USB-UART bridge",
    (0x303A, 0x1001): "Espressif native USB",
}
# Bridges whose DTR/RTS lines reset an ESP32: never toggle them.
_RESETTING_BRIDGES = {(0x10C4, 0xEA60), (0x1A86, 0x7523), (0x1A86, 0x55D4), (0x0403, 0x6001)}

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
        """Open ``url`` (a device path or any pyserial URL). ``DeviceNotFound`` when it cannot be opened."""
        vidpid = None
        for p in list_ports.comports():
            if p.device == url and p.vid is not None:
                vidpid = (p.vid, p.pid)
        try:
            port = serial.serial_for_url(url, baudrate=baudrate, timeout=0.02, write_timeout=2.0,
                                         do_not_open=True)
            if vidpid in _RESETTING_BRIDGES:
                port.dtr = False
                port.rts = False
            port.open()
        except (serial.SerialException, ValueError, OSError) as exc:
            raise DeviceNotFound(
                f"no board at {url}: cannot open it ({exc}) — is it plugged in, is the path right, "
                "and may you use it (Linux: the dialout group, see hardware_notes/linux.md)?"
            ) from exc
        return cls(port, url)

    def close(self) -> None:
        try:
            self.port.close()
        except (serial.SerialException, OSError):
            pass

    def send(self, line: bytes) -> None:
        try:
            self.port.write(line)
            self.port.flush()
        except (serial.SerialException, OSError) as exc:
            raise DeviceTimeout(f"lost the board on {self.url} while sending ({exc}): check the cable") from exc
        self.bytes_out += len(line)

    def discard_input(self) -> None:
        """Drop anything already received (stale replies, a REPL banner)."""
        try:
            self.port.reset_input_buffer()
        except (serial.SerialException, OSError):
            pass
        self.reader = ReplyReader()

    def frames_until(self, deadline: Deadline) -> Reply | None:
        """The next whole reply frame, or None when the deadline passes first."""
        while True:
            for frame in self.reader.frames():
                return frame
            if deadline.expired():
                return None
            try:
                waiting = self.port.in_waiting
                data = self.port.read(max(1, min(waiting, 65536)))
            except (serial.SerialException, OSError) as exc:
                raise DeviceTimeout(f"lost the board on {self.url} while reading ({exc}): check the cable") from exc
            if data:
                self.bytes_in += len(data)
                self.reader.feed(data)


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
        for _ in range(attempts):
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
            return frame.json()
        except (ValueError, UnicodeDecodeError) as exc:
            raise ProtocolError(f"the board's reply to '{verb}' is not JSON") from exc

    # -- commands -----------------------------------------------------------------------------------------------

    def hello(self, timeout: float | None = 2.0) -> dict[str, Any]:
        """Identify the board; ``DeviceNotFound`` if nothing answers (``retries`` tries of ``timeout`` s each)."""
        try:
            info = self._json("hello", timeout=timeout)
        except DeviceTimeout as exc:
            raise DeviceNotFound(
                f"no board answered on {self.transport.url} — is it plugged in and running nightcell firmware?"
            ) from exc
        if not isinstance(info, dict) or info.get("protocol") != 1:
            raise ProtocolError(f"the device on {self.transport.url} speaks an unknown protocol: {info!r}")
        return info

    def anchor(self, host_unix_ms: int) -> dict[str, Any]:
        return self._json("anchor", int(host_unix_ms), retry=False)

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
        return self._json("ack", int(position))

    def read(self, position: int, max_bytes: int = READ_CHUNK) -> tuple[int, bytes]:
        """Journal bytes from ``position`` (whole records)."""
        frame = self.request("read", int(position), int(max_bytes))
        if frame.kind != REPLY_DATA:
            raise ProtocolError(f"'read' expected DATA, got kind {frame.kind}")
        pos, data = frame.data()
        if pos != position:
            raise ProtocolError(f"asked for position {position}, the board sent {pos}")
        return pos, data

    def reset(self) -> dict[str, Any]:
        return self._json("reset", retry=False)


def progress_none(**_: Any) -> None:
    """A progress callback that does nothing."""


ProgressCallback = Callable[..., None]
