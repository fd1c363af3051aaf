"""A simulated board made with a relative folder (as `nightcell demo` makes one from a fresh checkout) still starts:
the firmware runs in its own folder, so every path handed to it must be absolute."""

from nightcell.wire.link import Board
from nightcell.sim.board import SimulatedBoard


def test_relative_workdir_board_answers(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    sim = SimulatedBoard("relative-boards", device="5e1f0000000000aa", speed=20.0)
    assert sim.workdir.is_absolute()
    sim.start()
    try:
        import time

        deadline = time.monotonic() + 20
        while True:
            with Board.open(sim.url, timeout=1.0) as board:
                try:
                    info = board.hello(timeout=1.0)
                    break
                except Exception:
                    if time.monotonic() > deadline:
                        raise AssertionError("the board never answered:\n" + sim.stderr_text())
        assert info["device"] == "5e1f0000000000aa"
        assert "ENOENT" not in sim.stderr_text()
    finally:
        sim.stop()
