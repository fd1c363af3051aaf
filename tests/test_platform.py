"""Windows and macOS: the host's code outside the simulator uses no POSIX-only call, ports are found by USB id on
every system (pyserial's list_ports), and file names are valid on Windows (its reserved device names and trailing
dots, as Microsoft's "Naming Files, Paths, and Namespaces" lists them [memory])."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from nightcell.render.report import safe_filename

HOST = Path(__file__).resolve().parent.parent / "host" / "nightcell"
POSIX_MODULES = {"pty", "tty", "fcntl", "termios", "pwd", "grp", "resource"}
POSIX_CALLS = {"killpg", "fork", "setsid", "geteuid", "getuid", "mkfifo", "ttyname", "openpty", "getpgid"}


def _guarded(tree: ast.AST) -> set[int]:
    """Line numbers of imports inside ``try: … except ImportError``."""
    lines = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Try) and any(
                isinstance(h.type, ast.Name) and h.type.id in ("ImportError", "ModuleNotFoundError") for h in node.handlers):
            for inner in node.body:
                for sub in ast.walk(inner):
                    if isinstance(sub, (ast.Import, ast.ImportFrom)):
                        lines.add(sub.lineno)
    return lines


def test_no_posix_only_call_outside_the_simulator():
    found = []
    for path in sorted(HOST.rglob("*.py")):
        if "sim" in path.relative_to(HOST).parts[:1]:
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        guarded = _guarded(tree)
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name.split(".")[0] for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                names = [node.module.split(".")[0]]
            if set(names) & POSIX_MODULES and node.lineno not in guarded:
                found.append(f"{path.relative_to(HOST)}:{node.lineno} imports {names}")
            if isinstance(node, ast.Attribute) and node.attr in POSIX_CALLS and \
                    isinstance(node.value, ast.Name) and node.value.id == "os":
                found.append(f"{path.relative_to(HOST)}:{node.lineno} calls os.{node.attr}")
    assert not found, found


def test_ports_are_found_by_usb_id_through_pyserial_on_every_system(monkeypatch):
    from serial.tools import list_ports_common

    from nightcell.wire import link

    def port(device, vid, pid):
        p = list_ports_common.ListPortInfo(device, skip_link_detection=True)
        p.vid, p.pid = vid, pid
        return p

    fake = [port("COM3", 0x2E8A, 0x0005), port("COM4", 0x046D, 0xC52B), port("/dev/cu.usbmodem1101", 0x2E8A, 0x0005),
            port("COM7", 0x1A86, 0x7523), port("COM1", None, None)]
    monkeypatch.setattr(link.list_ports, "comports", lambda: fake)
    assert [p["port"] for p in link.candidate_ports()] == ["COM3", "/dev/cu.usbmodem1101", "COM7"]


@pytest.mark.parametrize("label, expected", [
    ("CON", "_CON"), ("con", "_con"), ("lpt1.txt", "_lpt1.txt"), ("NUL.", "_NUL"), ("aux", "_aux"),
    ("COM9", "_COM9"), ("COM10", "COM10"), ("run.", "run"), ("run...", "run"), ("a:b\\c/d", "a_b_c_d"),
    ("console", "console"),
])
def test_file_names_are_valid_on_windows(label, expected):
    assert safe_filename(label) == expected
