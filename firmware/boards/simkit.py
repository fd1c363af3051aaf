"""An in-process simulated board on RAM flash with a virtual clock: what the firmware tests and benchmarks drive.

Builds the same objects ``sim_main.py`` builds, but the flash is a ``RamBlockDevice`` (counted, cuttable), time
moves only when the firmware sleeps or waits, and the link is a ``ScriptedPort``. ``power_cycle`` remounts the
same RAM after a cut and boots the firmware again, as a board does when power returns.

Usage (MicroPython)::

    kit = SimKit(blocks=64, settings={"interval_ms": 1000})
    kit.request(b"1 start")            # runs the loop until the reply arrives
    kit.run_ms(60000)                  # one board minute
    kit = SimKit(..., cuts=True)       # for power cuts:
    kit.dev.cut_at = kit.dev.ops + 7   # the 7th flash write from now fails ...
    kit.power_cycle()                  # ... after which the board boots again
"""

import builtins
import os
import vfs
from boards.simflash import RamBlockDevice, PowerCut
from boards.sim import SimBoard, SimClock, Cell
from boards.ports import ScriptedPort
from nightcell_fw import settings as S
from nightcell_fw.logger import Logger

_MOUNT = "/flash"


class FixedCell(Cell):
    """A cell whose absorbance is set directly by the test (no file)."""

    def __init__(self, absorbance=0.3):
        Cell.__init__(self, None)
        self.spec = {"absorbance": absorbance}


_OPEN = builtins.open
_FILES = []
_GRAVE = []


def _still_open():
    out = []
    for f in _FILES:
        try:
            f.tell()
            out.append(f)
        except (OSError, ValueError):
            pass
    _FILES[:] = []
    return out


def _tracked_open(*args):
    f = _OPEN(*args)
    if len(_FILES) > 400:
        _FILES[:] = _still_open()
    _FILES.append(f)
    return f




class _Powered:
    """The flash as seen by one power-on: after the power goes, this view drops every call without allocating,
    so a file object of the dead mount that the garbage collector closes later cannot touch the flash."""

    def __init__(self, dev):
        self.dev = dev
        self.on = True

    def readblocks(self, block, buf, off=0):
        if self.on:
            self.dev.readblocks(block, buf, off)
        return 0

    def writeblocks(self, block, buf, off=None):
        if self.on:
            self.dev.writeblocks(block, buf, off)
        return 0

    def ioctl(self, op, arg):
        if self.on:
            return self.dev.ioctl(op, arg)
        return 0


class SimKit:
    def __init__(self, blocks=64, settings=None, optics=None, ticks_start_ms=0, seed=1, format=True,
                 board_class=None, cuts=False, dev=None, folder=None):
        self.board_class = board_class or SimBoard
        if cuts:
            builtins.open = _tracked_open  # power cuts leave files open: keep them from ever being finalized
        self.folder = folder  # a host folder instead of littlefs: no Python block device in the way
        self.dev = None if folder else dev or RamBlockDevice(blocks)
        self.settings = settings or {}
        self.optics = optics or {"led_counts": 3000, "dark_counts": 100, "noise_counts": 2, "stray": 0.0,
                                 "ambient_counts": 0}
        self.seed = seed
        self.cell = FixedCell()
        self.clock = SimClock(1, ticks_start_ms, virtual=True)
        self.port = ScriptedPort()
        self.boots = 0
        self.view = None
        if format and not folder:
            vfs.VfsLfs2.mkfs(self.dev, progsize=256)
        self._mount()
        self.start()

    def _mount(self):
        if self.view is not None:
            self.view.on = False
        try:
            vfs.umount(_MOUNT)
        except OSError:
            pass
        if self.folder:
            return  # the unix port's root is the host's file system already
        self.view = _Powered(self.dev)
        vfs.mount(vfs.VfsLfs2(self.view, progsize=256), _MOUNT)

    def free(self):
        st = os.statvfs(self.folder or _MOUNT)
        return st[0] * st[3]

    def start(self):
        root = self.folder or _MOUNT
        spath = root + "/settings.json"
        try:
            os.stat(spath)
        except OSError:
            S.save(spath, S.validate(dict({"board": "sim"}, **self.settings)))
        settings, problem = S.load(spath)
        cfg = {"device": "51a0c0ffee000001", "optics": self.optics, "seed": self.seed + self.boots}
        self.board = self.board_class(cfg, self.port, self.clock, self.free, self._rand32, self.cell)
        self.board.configure(settings)
        self.lg = Logger(self.board, settings, problem, root)
        self.boots += 1
        self.lg.boot()

    def _rand32(self):
        return int.from_bytes(os.urandom(4), "little")

    def power_cycle(self):
        """Power returns after a cut: forget all RAM state, remount the flash, boot again."""
        # files the dead firmware left open are finalized now, while the device still refuses every write
        # files the dead firmware left open stay referenced for good: no finalizer ever closes them on the new mount
        _GRAVE.extend(_still_open())
        self.dev.dead = False  # a cut set for the boot itself (cut_at) stays armed
        self.port.inbox = bytearray()
        self.port.sent = bytearray()
        self._mount()
        self.start()

    def run_ms(self, ms):
        end = self.clock.t + ms
        while self.clock.t < end:
            self.lg.run(1)

    def request(self, line, turns=50):
        """Send one request line and run the loop until a reply frame has been written; returns the frame bytes."""
        self.port.sent = bytearray()
        self.port.feed(line + b"\n")
        for _ in range(turns):
            self.lg.run(1)
            if len(self.port.sent) >= 11:
                break
        return bytes(self.port.sent)


class IntegerBoard(SimBoard):
    """The virtual cell without floating point: fixed counts and integer noise, so that heap measurements see the
    firmware's own allocations, not the simulator's (MicroPython boxes every float on the heap)."""

    def before_measure(self, now_ms):
        pass

    def read(self, ch):
        self._n = (getattr(self, "_n", 1) * 1103515245 + 12345) & 0x7FFFFFFF
        v = 100 + ((self._n >> 16) & 7)
        if self._led_state[self._led_of[ch]]:
            v += 1500
        return v


__all__ = ["SimKit", "FixedCell", "PowerCut", "IntegerBoard"]
