"""Shared fixtures: a fresh database, the schema's test vectors, and a simulated board running the real firmware."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
SCHEMA = ROOT / "schema"


@pytest.fixture
def vectors() -> dict:
    """Byte test vectors of the record layout and the link protocol (schema/vectors)."""
    return {
        "records": json.loads((SCHEMA / "vectors" / "records.json").read_text(encoding="utf-8")),
        "protocol": json.loads((SCHEMA / "vectors" / "protocol.json").read_text(encoding="utf-8")),
    }


@pytest.fixture
def store(tmp_path):
    """A fresh nightcell database file."""
    from nightcell.store.database import Store

    s = Store.open(tmp_path / "test.db")
    yield s
    s.close()


@pytest.fixture
def sim_board(tmp_path):
    """A simulated board (real firmware in MicroPython where installed) behind a pty; yields the SimulatedBoard."""
    from nightcell.sim.board import SimulatedBoard

    sim = SimulatedBoard(tmp_path / "sim", device="5e1f000000000001", speed=50.0, seed=3,
                         settings={"interval_ms": 2000, "durability_ms": 2000})
    sim.start()
    yield sim
    sim.stop()
