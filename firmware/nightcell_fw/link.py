"""The link's byte level (``schema/protocol.md``): request lines in, reply frames out.

Owns the framing. ``LineReader`` collects printable ASCII lines from a non-blocking port and flags lines that are
too long or hold bytes outside 0x20–0x7E; ``Frames`` writes OK/ERR/DATA frames from one buffer allocated once.
Nothing here writes unless asked to reply.

Usage::

    lines = LineReader(port)
    line = lines.poll()            # bytes of one line (without \\n), or None; lines.problem says what was wrong
    out = Frames(port)
    out.ok(tag, b'{"a":1}')
"""

from micropython import const
import struct
from nightcell_fw.records import crc32

MAX_LINE = const(249)  # 250 bytes with the newline
MAX_READ = const(4096)
OK = const(1)
ERR = const(2)
DATA = const(3)
NO_TAG = const(0xFFFF)


class LineReader:
    def __init__(self, port):
        self.port = port
        self.buf = bytearray(MAX_LINE)
        self.n = 0
        self.chunk = bytearray(64)
        self.cmv = memoryview(self.chunk)
        self.have = 0
        self.at = 0
        self.problem = None
        self._long = False
        self._bad = False

    def poll(self):
        """One complete line if there is one: bytes, or b"" for a bad line (``problem`` says why)."""
        while True:
            if self.at >= self.have:
                self.have = self.port.readinto(self.cmv)
                self.at = 0
                if not self.have:
                    return None
            b = self.chunk[self.at]
            self.at += 1
            if b == 10:
                line = bytes(self.buf[:self.n])
                self.problem = None
                if self._long:
                    self.problem = "request line longer than 250 bytes"
                elif self._bad:
                    self.problem = "request line holds a byte outside printable ASCII: percent-encode text"
                self.n = 0
                self._long = False
                self._bad = False
                return line
            if b == 13:
                continue
            if b < 0x20 or b > 0x7E:
                self._bad = True
            elif self.n < MAX_LINE:
                self.buf[self.n] = b
                self.n += 1
            else:
                self._long = True


class Frames:
    def __init__(self, port):
        self.port = port
        self.buf = bytearray(7 + 4 + MAX_READ + 4)
        self.mv = memoryview(self.buf)

    def _send(self, kind, tag, n):
        struct.pack_into("<BBBHH", self.buf, 0, 0xA7, 0x5C, kind, tag, n)
        struct.pack_into("<I", self.buf, 7 + n, crc32(self.mv[2:7 + n]))
        self.port.write(self.mv[:11 + n])

    def reply(self, kind, tag, payload):
        n = len(payload)
        self.buf[7:7 + n] = payload
        self._send(kind, tag, n)

    def ok(self, tag, payload):
        self.reply(OK, tag, payload)

    def err(self, tag, text):
        b = text.encode("utf-8")
        self.reply(ERR, tag, b[:400])

    def data(self, tag, journal, pos, max_bytes):
        start, n = journal.read(pos, max_bytes, self.mv[11:11 + max_bytes])
        struct.pack_into("<I", self.buf, 7, start)
        self._send(DATA, tag, 4 + n)


def unquote(text):
    """Decode a percent-encoded argument to text; ValueError says what is wrong."""
    if "%" not in text:
        return text
    raw = bytearray()
    i = 0
    while i < len(text):
        ch = text[i]
        if ch == "%":
            h = text[i + 1:i + 3]
            if len(h) != 2 or not all(c in "0123456789abcdefABCDEF" for c in h):
                raise ValueError("bad percent escape in %r: write %% as %%25" % text)
            raw.append(int(h, 16))
            i += 3
        else:
            raw.append(ord(ch))
            i += 1
    try:
        return bytes(raw).decode("utf-8")
    except UnicodeError:
        raise ValueError("percent-encoded text is not UTF-8")


def parse(line):
    """(tag, verb, args) of a request line; ValueError when the tag cannot be read."""
    parts = line.decode().split(" ")
    t = parts[0]
    if not t or len(t) > 5 or not all(c in "0123456789" for c in t) or int(t) > 65535:
        raise ValueError("request must start with a tag from 0 to 65535")
    return int(t), (parts[1] if len(parts) > 1 else ""), parts[2:]
