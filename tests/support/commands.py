"""How a test or a benchmark starts ``nightcell`` as a person would: the console script installed beside this Python,
else the one on PATH, else the same entry point through ``python -c``."""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

__all__ = ["nightcell_command"]


def nightcell_command() -> list[str]:
    script = Path(sys.executable).parent / "nightcell"
    if script.exists():
        return [str(script)]
    found = shutil.which("nightcell")
    return [found] if found else [sys.executable, "-c", "from nightcell.cli import main; main()"]
