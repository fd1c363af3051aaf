"""Run the firmware on the simulated board: ``micropython sim_main.py CONFIG.json`` (or ``python3``).

Standard input and output carry the link protocol (a pty in raw mode); nothing else is written to stdout.
CONFIG.json is described in ``schema/simulation.md``. The flash is a littlefs image file in MicroPython (created and
formatted only when the file does not exist yet; an image that will not mount is an error, never reformatted) and a
plain folder in CPython. Kill the process to cut the power; start it again to boot again.

Exit codes: 0 after a ``reset`` request or when the host closes the link, 2 for a bad CONFIG, 3 for a flash image
that cannot be mounted.
"""

import sys

_MICRO = sys.implementation.name == "micropython"
if not _MICRO:
    import boards.cpy  # noqa: F401 — the const() shim, before any firmware module

import json
import os


def _fail(code, text):
    sys.stderr.write("sim_main: %s\n" % text)
    raise SystemExit(code)


def _rand32():
    return int.from_bytes(os.urandom(4), "little")


def _exists(p):
    try:
        os.stat(p)
        return True
    except OSError:
        return False


def load_config(path):
    try:
        with open(path) as f:
            cfg = json.loads(f.read())
    except OSError as e:
        _fail(2, "cannot read config %s (%s): give the path of a CONFIG.json" % (path, e))
    except ValueError as e:
        _fail(2, "config %s is not valid JSON (%s): fix the file" % (path, e))
    if not isinstance(cfg, dict) or not isinstance(cfg.get("flash"), str):
        _fail(2, "config %s needs a \"flash\" path (see schema/simulation.md)" % path)
    checks = (("speed", 1, 0.001), ("flash_blocks", 352, 16), ("seed", 1, 0), ("ticks_start_ms", 0, 0))
    for key, default, lo in checks:
        v = cfg.get(key, default)
        if not isinstance(v, (int, float)) or isinstance(v, bool) or v < lo or key != "speed" and v != int(v):
            _fail(2, "config %s: %s must be a number of at least %s" % (path, key, lo))
    return cfg


def mount_flash(cfg):
    """(root folder, free-bytes function) for the flash named in the config."""
    blocks = int(cfg.get("flash_blocks", 352))
    path = cfg["flash"]
    if _MICRO:
        import vfs
        from boards.simflash import FileBlockDevice
        dev = FileBlockDevice(path, blocks)
        if dev.created:
            vfs.VfsLfs2.mkfs(dev, progsize=256)
        try:
            fs = vfs.VfsLfs2(dev, progsize=256)
            vfs.mount(fs, "/flash")
        except OSError as e:
            _fail(3, "flash image %s does not mount (%s): it is left untouched; move it away to start afresh"
                  % (path, e))

        def free():
            st = os.statvfs("/flash")
            return st[0] * st[3]

        return "/flash", free
    if not _exists(path):
        os.makedirs(path)
    capacity = blocks * 4096

    def free_folder():
        used = 0
        for sub in (path, path + "/nc"):
            try:
                names = os.listdir(sub)
            except OSError:
                continue
            for n in names:
                st = os.stat(sub + "/" + n)
                used += 4096 * (1 + st[6] // 4096)
        return capacity - used

    return path, free_folder


def main(argv):
    if len(argv) != 2:
        _fail(2, "usage: sim_main.py CONFIG.json")
    cfg = load_config(argv[1])
    root, free = mount_flash(cfg)
    from nightcell_fw import settings as S
    spath = root + "/settings.json"
    if not _exists(spath) and isinstance(cfg.get("settings"), dict):
        with open(spath, "w") as f:
            f.write(json.dumps(cfg["settings"]))
    settings, problem = S.load(spath)
    from boards.sim import SimBoard, SimClock
    if _MICRO:
        from boards.ports import StdioPort
        port = StdioPort()
    else:
        from boards.ports import FdPort
        port = FdPort()
    clock = SimClock(cfg.get("speed", 1), int(cfg.get("ticks_start_ms", 0)))
    board = SimBoard(cfg, port, clock, free, _rand32)
    board.configure(settings)
    from nightcell_fw.logger import Logger
    lg = Logger(board, settings, problem, root)
    lg.boot()
    lg.run()


if __name__ == "__main__":
    main(sys.argv)
