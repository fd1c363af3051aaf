"""Block devices for the simulated board and the tests: flash in RAM or in an image file, with counters and cuts.

Implements the block protocol littlefs uses through MicroPython's ``vfs`` (``readblocks``, ``writeblocks``,
``ioctl``). Counts programs, programmed bytes and erases, so the journal's flash cost can be measured; and can cut
the power at the N-th program or erase — stopping there, or tearing that operation half way — after which every
write raises ``PowerCut`` (a BaseException, so the firmware's own error handling cannot swallow it).

Usage::

    dev = RamBlockDevice(352)
    vfs.VfsLfs2.mkfs(dev, progsize=256); vfs.mount(vfs.VfsLfs2(dev, progsize=256), "/flash")
    dev.cut_at = dev.ops + 40; dev.tear = True     # power fails during the 40th write from now
"""

BLOCK = 4096
_ERASED = b"\xff" * BLOCK


class PowerCut(BaseException):
    pass


class _Counted:
    def _setup(self, blocks):
        self.blocks = blocks
        self.progs = 0
        self.prog_bytes = 0
        self.erases = 0
        self.ops = 0
        self.cut_at = -1
        self.tear = False
        self.dead = False

    def _op(self):
        if self.dead:
            raise PowerCut()
        self.ops += 1
        if self.ops == self.cut_at:
            self.dead = True
            return True
        return False

    def readblocks(self, block, buf, off=0):
        self._read(block * BLOCK + off, buf)

    def writeblocks(self, block, buf, off=None):
        if off is None:  # the old protocol: erase, then program the whole block
            self.ioctl(6, block)
            off = 0
        cut = self._op()
        a = block * BLOCK + off
        if cut:
            if self.tear:
                self._write(a, memoryview(buf)[:len(buf) // 2])
            raise PowerCut()
        self.progs += 1
        self.prog_bytes += len(buf)
        self._write(a, buf)

    def ioctl(self, op, arg):
        if op == 4:
            return self.blocks
        if op == 5:
            return BLOCK
        if op == 6:
            cut = self._op()
            if cut:
                if self.tear:
                    self._write(arg * BLOCK, _ERASED[:BLOCK // 2])
                raise PowerCut()
            self.erases += 1
            self._write(arg * BLOCK, _ERASED)
            return 0
        return 0


class RamBlockDevice(_Counted):
    def __init__(self, blocks, data=None):
        self._setup(blocks)
        if data is None:
            data = bytearray(blocks * BLOCK)
            for b in range(blocks):  # erased flash reads 0xFF; filled in place, no second copy on the heap
                data[b * BLOCK:(b + 1) * BLOCK] = _ERASED
        self.data = data
        self.mv = memoryview(self.data)

    def _read(self, a, buf):
        buf[:] = self.mv[a:a + len(buf)]  # a view, not a copy: the flash driver should not load the heap

    def _write(self, a, buf):
        self.mv[a:a + len(buf)] = buf


class FileBlockDevice(_Counted):
    """Flash kept in an image file; every write goes straight to the file (survives the process being killed)."""

    def __init__(self, path, blocks):
        self._setup(blocks)
        try:
            self.f = open(path, "r+b")
            self.created = False
        except OSError:
            self.f = open(path, "w+b")
            chunk = b"\xff" * BLOCK
            for _ in range(blocks):
                self.f.write(chunk)
            self.f.flush()
            self.created = True

    def _read(self, a, buf):
        self.f.seek(a)
        self.f.readinto(buf)

    def _write(self, a, buf):
        self.f.seek(a)
        self.f.write(buf)
        self.f.flush()
