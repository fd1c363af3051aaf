"""Byte ports for the link: USB serial on a board (or a pty for the sim) through ``sys.stdin``/``sys.stdout``,
the same through file descriptors in CPython, and a scripted port for tests.

A port has ``readinto(buf) -> n`` (never blocks; 0 when nothing waits), ``write(buf)`` and ``wait(ms)`` (real
milliseconds; returns early when input arrives).

Usage::

    port = StdioPort()
    n = port.readinto(buf)
"""

import sys


class StdioPort:
    """MicroPython: poll ``sys.stdin``, read ``sys.stdin.buffer`` once per call, write ``sys.stdout.buffer``."""

    def __init__(self):
        import select
        self._poll = select.poll()
        self._poll.register(sys.stdin, select.POLLIN)
        self._in = sys.stdin.buffer
        self._out = sys.stdout.buffer

    def readinto(self, buf):
        # one byte per read: a bigger read on a pipe or pty waits until the whole buffer is filled
        mv = memoryview(buf)
        n = 0
        poll = self._poll.poll
        while n < len(mv) and poll(0):
            got = self._in.readinto(mv[n:n + 1])
            if not got:
                if got == 0 and n == 0:
                    raise SystemExit(0)  # the host closed the link (end of file): a sim board stops here
                break
            n += 1
        return n

    def write(self, buf):
        self._out.write(buf)
        try:
            self._out.flush()
        except AttributeError:
            pass

    def wait(self, ms):
        self._poll.poll(int(ms))


class FdPort:
    """CPython: file descriptors 0 and 1 with ``select``."""

    def __init__(self, fd_in=0, fd_out=1):
        import os
        import select
        self._os = os
        self._select = select.select
        self.fd_in = fd_in
        self.fd_out = fd_out

    def readinto(self, buf):
        if not self._select([self.fd_in], [], [], 0)[0]:
            return 0
        data = self._os.read(self.fd_in, len(buf))
        if not data:
            raise SystemExit(0)
        buf[:len(data)] = data
        return len(data)

    def write(self, buf):
        mv = memoryview(buf)
        while len(mv):
            n = self._os.write(self.fd_out, mv)
            mv = mv[n:]

    def wait(self, ms):
        self._select([self.fd_in], [], [], ms / 1000)


class ScriptedPort:
    """For tests: bytes fed in are read back; everything written is kept in ``sent``."""

    def __init__(self):
        self.inbox = bytearray()
        self.sent = bytearray()

    def feed(self, data):
        self.inbox += data

    def readinto(self, buf):
        n = min(len(buf), len(self.inbox))
        if n:
            buf[:n] = self.inbox[:n]
            self.inbox[:n] = b""
        return n

    def write(self, buf):
        self.sent += buf

    def wait(self, ms):
        pass

    def pending(self):
        return len(self.inbox) > 0
