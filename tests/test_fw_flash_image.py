"""The flash image the firmware leaves after a power-cut campaign is a valid littlefs image to an independent
implementation: littlefs-python (the littlefs C library's own code, built outside MicroPython) mounts the raw flash
bytes as the board left them, with files still open as at a power cut, and every journal file it finds decodes with
the host's reference codec (host/nightcell/wire/frames.py) into whole records; the stream equals the one the
firmware itself reads back.

The littlefs geometry is the one MicroPython's VfsLfs2 uses on the board and in the simulator: 4096-byte blocks,
256-byte programs (``progsize=256``), 32-byte reads and lookahead, a cache of 4 × 256 bytes [memory: MicroPython's
extmod/vfs_lfsx.c].
"""

from __future__ import annotations

from littlefs import LittleFS

from nightcell.wire import frames as F
from test_fw_powercut import run_campaign


def _mount(image: bytes, blocks: int) -> LittleFS:
    fs = LittleFS(block_size=4096, block_count=blocks, read_size=32, prog_size=256, cache_size=1024,
                  lookahead_size=32, mount=False)
    fs.context.buffer = bytearray(image)
    fs.mount()
    return fs


def test_the_flash_after_a_campaign_mounts_in_an_independent_littlefs_and_every_journal_file_decodes(tmp_path):
    dump, image = str(tmp_path / "journal.bin"), str(tmp_path / "flash.img")
    res = run_campaign(60, 20261202, dump, image=image)
    assert int(res["cuts"]) == 60
    blocks = int(res["blocks"])
    fs = _mount(open(image, "rb").read(), blocks)
    names = fs.listdir("/nc")
    segments = sorted(n for n in names if len(n) == 9 and n[0] == "s")
    assert segments and "id" in names and "boot" in names
    stream = b""
    total = 0
    for name in segments:
        with fs.open(f"/nc/{name}", "rb") as f:
            data = f.read()
        start = int(name[1:], 16)
        recs = list(F.iter_records(data, start))
        assert sum(r.size for r in recs) == len(data), f"{name}: bytes left over that are not whole records"
        assert recs[0].position == start
        total += len(recs)
        stream += data
    # the segments hold exactly the journal the firmware read back at the end (tail to head)
    assert int(res["head"]) - int(res["tail"]) == len(stream)
    assert stream == open(dump, "rb").read()
    firmware = list(F.iter_records(open(dump, "rb").read(), 0))
    assert total == len(firmware)
    # the open sample block saved beside the stream, when there is one, is one whole SAMPLES record
    if "o" in names and "open" in fs.listdir("/nc/o"):
        with fs.open("/nc/o/open", "rb") as f:
            data = f.read()
        if data:
            (rec,) = list(F.iter_records(data, 0))
            assert rec.kind == F.KIND_SAMPLES
    print(f"littlefs-python mounted {blocks} blocks; {len(segments)} segments, {total} records, {len(stream)} bytes")
