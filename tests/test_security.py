"""Security: what a board, a file or another host's database can make nightcell do (the threat model is in
DEVELOPERS.md). Nothing that came from outside is evaluated as code; SQL text is built only from our own schema's
names, data always travels as parameters; file names made from labels stay inside the folder asked for; HTML, SVG,
CSV and the terminal show labels as inert text; the board answers only the documented verbs and trims only what
was acknowledged and is durable.
"""

from __future__ import annotations

import ast
import csv
import html as html_module
import json
import re
import sqlite3
from pathlib import Path

import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from nightcell.tasks import export as export_module
from nightcell.render import report as report_module
from nightcell.cli import cli
from nightcell.store.merge import merge_database
from nightcell.store.database import Store
from test_bad_input import make_db

ROOT = Path(__file__).resolve().parent.parent
HOST = ROOT / "host" / "nightcell"
SOURCES = sorted(HOST.rglob("*.py")) + sorted((ROOT / "firmware").rglob("*.py"))
HOSTILE_LABELS = [
    "<script>alert(1)</script>",
    "'; DROP TABLE samples;--",
    "../../../etc/cron.d/x",
    "=HYPERLINK(\"http://example.invalid\",\"click\")",
    "[bold red]not markup[/]",
    "$\\frac{a}{b}$ \\n",
    "\u202eevil.png",
    "@SUM(A1:A9)",
]


# -- no code from outside --------------------------------------------------------------------------------------------

FORBIDDEN_CALLS = {"eval", "exec", "compile", "__import__", "execfile"}
FORBIDDEN_MODULES = {"pickle", "marshal", "shelve", "yaml", "dill"}
# Reviewed: the firmware's boot imports optional driver modules by names written in main.py itself.
REVIEWED_CALLS = {("main.py", "__import__")}


@pytest.mark.parametrize("path", SOURCES, ids=lambda p: str(p.relative_to(ROOT)))
def test_no_eval_exec_pickle_or_shell_anywhere(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        if isinstance(node, ast.Call):
            f = node.func
            name = f.id if isinstance(f, ast.Name) else ""  # the builtins; re.compile and the like are fine
            assert name not in FORBIDDEN_CALLS or (path.name, name) in REVIEWED_CALLS, \
                f"{path.name}:{node.lineno} calls {name}"
            assert not (name in ("system", "popen") and isinstance(f, ast.Attribute)
                        and getattr(f.value, "id", "") == "os"), f"{path.name}:{node.lineno} runs a shell"
            for kw in node.keywords:
                assert not (kw.arg == "shell" and isinstance(kw.value, ast.Constant) and kw.value.value), \
                    f"{path.name}:{node.lineno} runs a shell"
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else [node.module or ""]
            assert not {n.split(".")[0] for n in names} & FORBIDDEN_MODULES, f"{path.name}:{node.lineno}"


# -- SQL with parameters only ------------------------------------------------------------------------------------

# Every place that builds SQL text at run time, and why what it splices in is never data: each splices only table and
# column names from our own schema (constants in the module, or PRAGMA table_info of our own main database), or
# "?" placeholders. A new place must be reviewed and added here.
REVIEWED_DYNAMIC_SQL = {
    ("store/merge.py", "_insert_missing"): "table names from RAW_IDENTITY, columns from PRAGMA of main",
    ("store/merge.py", "_device_conflicts"): "column names from _DEVICE_METADATA",
    ("store/merge.py", "_merge_sync_sessions"): "columns from PRAGMA of main",
    ("store/merge.py", "_conflicts"): "table and key names from RAW_IDENTITY, columns from PRAGMA of main",
    ("store/merge.py", "_columns"): "table names from RAW_IDENTITY",
    ("store/merge.py", "_condition_conflicts"): "the module's own constant query of the other database's conditions",
    ("store/merge.py", "_merge_run_conditions"): "the module's own constant query of the other database's conditions",
    ("store/database.py", "query"): "the caller's SQL text; callers pass data as params",
    ("store/database.py", "marks"): "fixed WHERE clauses with ? placeholders",
    ("store/database.py", "run_samples"): "fixed clauses with ? placeholders",
    ("store/database.py", "_run_sample_columns"): "fixed clauses with ? placeholders and column names from its own "
                                                  "tuples",
    ("store/database.py", "_chunked_columns"): "a fixed WHERE clause with ? placeholders and group_concat of column "
                                               "names from _run_sample_columns' own tuples",
    ("store/database.py", "open_read"): "an integer from a module constant",
    ("store/database.py", "open_write"): "an integer from a module constant",
    ("store/database.py", "_migrate"): "an integer: the number of migration files shipped",
    ("store/database.py", "damage_report"): "table names read from the damaged file's own sqlite_master, double-quoted",
    ("store/database.py", "insert_rows"): "table names from ingest's own dict, ? placeholders",
    ("store/database.py", "_guard_set_aside"): "a trigger name from ingest's own table names, double-quoted, and "
                                               "that trigger's own text read back from sqlite_master",
    ("store/database.py", "_refuse_conflicts"): "table names from ingest's own dict, column names from its PRAGMA "
                                                 "table_info, ? placeholders",
    ("store/database.py", "_migrations"): "statements from schema/migrations",
    ("store/database.py", "apply"): "statements from schema/migrations",
    ("store/database.py", "_last_uptime"): "table names from _RAW_TABLES",
    ("store/database.py", "count"): "a table name checked against the database's own table list",
    ("store/merge.py", "_merge"): "temporary table names built from RAW_IDENTITY's own table names",
    ("store/merge.py", "_translate_boots"): "table names from RAW_IDENTITY",
    ("store/merge.py", "_translated"): "table names from RAW_IDENTITY, column names from its PRAGMA table_info",
    ("store/clocks.py", "rebuild_clocks"): "a fixed WHERE clause with ? placeholders",
    ("store/queries.py", "_rows"): "SQL text written in this module's own methods; values as params",
    ("store/queries.py", "sample_count"): "fixed WHERE clauses with ? placeholders",
    ("store/queries.py", "run_condition_rows"): "a fixed WHERE clause with ? placeholders",
}


def _dynamic_sql_sites() -> set[tuple[str, str]]:
    sites = set()
    for path in sorted(HOST.rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for fn in ast.walk(tree):
            if not isinstance(fn, (ast.FunctionDef, ast.AsyncFunctionDef)):
                continue
            for node in ast.walk(fn):
                if (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.args
                        and node.func.attr in ("execute", "executemany", "executescript", "query")
                        and not (isinstance(node.args[0], ast.Constant) and isinstance(node.args[0].value, str))):
                    sites.add((path.relative_to(HOST).as_posix(), fn.name))
    return sites


def test_sql_text_is_built_only_in_reviewed_places():
    new = _dynamic_sql_sites() - set(REVIEWED_DYNAMIC_SQL)
    assert not new, f"SQL built at run time in unreviewed places (use ? parameters, or review and list): {new}"


def test_hostile_labels_are_stored_as_given_and_every_table_survives(tmp_path):
    for i, label in enumerate(HOSTILE_LABELS):
        db = make_db(tmp_path / f"h{i}.db", run_label=label, blank_label=label)
        con = sqlite3.connect(db)
        labels = {r[0] for r in con.execute("SELECT label FROM marks WHERE mark IN ('run_start', 'blank')")}
        assert labels == {label}
        assert con.execute("SELECT count(*) FROM samples").fetchone()[0] == 40
        con.close()
        r = CliRunner().invoke(cli, ["list", "runs", "--db", str(db), "--json"])
        assert r.exit_code == 0 and json.loads(r.output)[0]["label"] == label


def test_merging_a_hostile_database_takes_rows_as_data(tmp_path):
    here = make_db(tmp_path / "here.db")
    other = make_db(tmp_path / "other.db", device="5eba0000000000aa", run_label=HOSTILE_LABELS[1])
    with Store.open(here) as store:
        report = merge_database(store, other)
        assert report.applied and report.new > 0
        assert {r.label for r in store.runs()} == {"fading 25 C", HOSTILE_LABELS[1]}
        assert store.count("samples") == 80


# -- files named from labels ---------------------------------------------------------------------------------------

@settings(max_examples=300, deadline=None)
@given(st.text(max_size=120))
def test_file_names_from_any_label_are_plain_names(label):
    name = report_module.safe_filename(label)
    assert name and len(name) <= 80
    assert re.fullmatch(r"[A-Za-z0-9._-]+", name)
    assert not name.startswith(".") and name not in (".", "..")
    assert Path(name).name == name


def test_export_and_report_of_hostile_labels_stay_inside_the_folder_and_are_inert(tmp_path):
    for i, label in enumerate(HOSTILE_LABELS):
        db = make_db(tmp_path / f"h{i}.db", run_label=label, blank_label=label)
        out = tmp_path / f"out{i}"
        for args in (["export", "--db", db, "--out", out], ["report", "--db", db, "--all", "--out", out]):
            r = CliRunner().invoke(cli, [str(a) for a in args])
            assert r.exit_code == 0, r.output
        written = [p for p in tmp_path.rglob("*") if p.is_file() and p.parent != tmp_path]
        assert list(out.glob("*.html")) and list(out.glob("*.csv"))
        assert all(p.relative_to(tmp_path).parts[0].startswith("out") for p in written), written
        assert not (tmp_path.parent / "etc").exists() and not (tmp_path / "etc").exists()
        for page in out.glob("*.html"):
            html = page.read_text(encoding="utf-8")
            assert "<script" not in html.lower(), page  # the page has no script of its own either
            assert label not in html or not any(c in label for c in "<>&\"'")
        for svg in out.glob("*.svg"):
            assert "<script" not in svg.read_text(encoding="utf-8").lower()
        for sheet in out.glob("*.csv"):
            with open(sheet, newline="", encoding="utf-8") as fh:
                for row in csv.reader(fh):
                    assert not any(cell[:1] in ("=", "+", "@") for cell in row), (sheet, row)


def test_csv_cells_a_spreadsheet_would_run_are_written_as_text(tmp_path):
    # the formula prefixes = + - @ (and tab, carriage return), as commonly listed for spreadsheet formula injection
    # [memory: OWASP's CSV injection page]; numbers, negative ones included, stay numbers
    path = report_module.write_csv(tmp_path / "x.csv", ["label", "value"],
                                   [["=1+1", -2.5], ["+A1", 3], ["-B2", "plain"], ["@SUM(A1)", "\tx"]])
    rows = list(csv.reader(open(path, newline="", encoding="utf-8")))
    assert rows[1:] == [["'=1+1", "-2.5"], ["'+A1", "3"], ["'-B2", "plain"], ["'@SUM(A1)", "'\tx"]]


def test_terminal_tables_show_rich_markup_in_labels_literally(tmp_path):
    db = make_db(tmp_path / "m.db", run_label="[bold red]not markup[/]")
    r = CliRunner().invoke(cli, ["list", "runs", "--db", str(db)], env={"COLUMNS": "250"})
    assert r.exit_code == 0 and "[bold red]not markup[/]" in r.output


# Escape sequences a terminal acts on (ECMA-48: CSI "ESC [", OSC "ESC ]" ended by BEL, C1 CSI 0x9b) and a
# right-to-left override (Unicode bidi control U+202E) that reorders what follows it.
TERMINAL_ATTACKS = ["\x1b[2J\x1b[Hcleared", "\x1b[5mblink\x1b[0m", "\x1b]0;owned\x07title", "\x9b31mred",
                    "ok\rOVERWRITE", "abc\u202etxt.exe"]
_ACTS_ON = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")


@pytest.mark.parametrize("label", TERMINAL_ATTACKS)
def test_labels_reach_the_terminal_inert(tmp_path, label):
    db = make_db(tmp_path / "t.db", run_label=label, blank_label=label)
    con = sqlite3.connect(db)
    con.execute("UPDATE devices SET label = ?", (label,))
    con.commit()
    con.close()
    for args in (["list", "runs"], ["list", "devices"], ["list", "blanks"]):
        r = CliRunner().invoke(cli, [*args, "--db", str(db)], env={"COLUMNS": "250"})
        assert r.exit_code == 0, r.output
        assert not _ACTS_ON.search(r.output), (args, r.output)  # nothing the terminal would act on
        assert label.split("\x1b")[-1][-3:] in r.output  # the printable part is still shown
    r = CliRunner().invoke(cli, ["rate", "--db", str(db), "--run", label + "x"])
    assert r.exit_code == 2 and not _ACTS_ON.search(r.output), r.output


@pytest.mark.parametrize("label", TERMINAL_ATTACKS)
def test_hello_shows_a_boards_label_inert(label, monkeypatch):
    import json as json_module

    from nightcell.wire import frames
    from test_bad_input import HELLO, FakePort

    info = dict(HELLO, label=label, board=label)

    def board(line: bytes) -> bytes:
        return frames.encode_reply(frames.REPLY_OK, int(line.split(b" ")[0]), json_module.dumps(info).encode())

    fake = FakePort(board)
    try:
        r = CliRunner().invoke(cli, ["hello", "--port", fake.path])
    finally:
        fake.close()
    assert r.exit_code == 0, r.output
    assert not _ACTS_ON.search(r.output), r.output
    assert "\\x" in r.output or "\\u" in r.output  # the label is shown, escaped


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=60), st.text(max_size=60).filter(lambda t: "\n\n" not in t))
def test_html_pages_escape_any_title_and_text(title, para):
    page = report_module.html_report(title, [{"title": title, "text": para}])
    plain = report_module.html_report("t", [{"title": "t", "text": "p" if para else ""}])
    # whatever the text, the page has the same tags as one with plain words: nothing in it became markup
    assert page.count("<") == plain.count("<") and page.count(">") == plain.count(">")
    assert html_module.escape(para) in page and html_module.escape(title) in page


# -- the board: documented verbs only, trims only what was acknowledged ----------------------------------------------

def _protocol_verbs() -> set[str]:
    text = (ROOT / "schema" / "protocol.md").read_text(encoding="utf-8")
    return set(re.findall(r"^\| `([a-z]+)` \|", text, flags=re.MULTILINE))


def test_the_board_knows_exactly_the_documented_verbs():
    from support.fwharness import results, run_mp

    out = results(run_mp("from nightcell_fw.commands import VERBS\nprint('verbs=' + ' '.join(sorted(VERBS)))"))
    assert set(out["verbs"].split()) == _protocol_verbs() and len(_protocol_verbs()) == 16


BOARD = r"""
import struct
from boards.simkit import SimKit
from nightcell_fw import records as R
kit = SimKit(blocks=64, settings={"interval_ms": 1000, "warmup_ms": 0, "marker_samples": 1, "reads": 2,
                                  "segment_bytes": 1024, "durability_ms": 1000})
lg = kit.lg

def reply(line):
    kit.port.sent = bytearray()
    kit.port.feed(line + b"\n")
    for _ in range(3):
        lg.run(1)
    b = bytes(kit.port.sent)
    kind, tag, n = struct.unpack_from("<BHH", b, 2)
    return kind, b[7:7 + n]

for i, line in enumerate([b"1 exec print(1)", b"2 __import__ os", b"3 eval 1+1", b"4 HELLO", b"5 hello x",
                          b"6 set __class__ 1", b"7 set label", b"8 ack -1", b"9 read 0 99999", b"10 reset now",
                          b"11 status;reset", b"12  hello"]):
    kind, text = reply(line)
    assert kind == 2, (line, kind, text)
    print("refused%d=%s" % (i, text.decode()))
kit.request(b"20 start")
kit.run_ms(1200000)
kit.request(b"21 stop")
kit.request(b"22 flush")
j = lg.journal
head, tail, segs = j.head, j.tail, len(j.starts)
print("segments=%d" % segs)
def ack(tag, pos):
    return reply(b"%d ack %d %08x" % (tag, pos, R.crc32(b"ack %d" % pos)))

kind, text = ack(23, head + 1)
print("past_head=%d %s" % (kind, text.decode()))
assert (j.tail, len(j.starts)) == (tail, segs)
second = j.starts[1]
kind, text = reply(b"26 ack %d" % second)  # no check: not verified, so nothing is trimmed
print("unchecked=%d %s" % (kind, text.decode()))
assert kind == 2 and (j.tail, len(j.starts)) == (tail, segs)
kind, text = ack(24, second - 1)
print("mid_first=%d" % kind)
assert j.tail == tail and len(j.starts) == segs  # the first segment still holds unacknowledged bytes
kind, text = ack(25, second)
print("at_second=%d tail=%d" % (kind, j.tail))
assert j.tail == second and len(j.starts) == segs - 1
s, n = j.read(second, 4096, memoryview(bytearray(4096)))
print("still_readable=%d" % n)
print("errors=%d" % lg.faults.total)
"""


def test_the_board_refuses_undocumented_commands_and_trims_only_what_was_acknowledged():
    from support.fwharness import results, run_mp

    res = results(run_mp(BOARD))
    refusals = [res[f"refused{i}"] for i in range(12)]
    assert all("unknown command" in t for t in refusals[:4])
    assert "usage: hello" in refusals[4] and "unknown setting" in refusals[5]
    assert int(res["segments"]) >= 3
    assert res["past_head"].startswith("2 ") and "past the durable head" in res["past_head"]
    assert res["mid_first"] == "1" and res["at_second"].startswith("1 ")
    assert int(res["still_readable"]) > 0 and res["errors"] == "0"


# -- the house: one direction of use between rooms, SQL only in the store, no cycle -----------------------------------

# What each room of host/nightcell may import besides itself (DEVELOPERS.md, "How the rooms fit"). ``errors`` and the
# package root (its version, and the public API that loads rooms only when a name is asked for) are open to all;
# the root may load any room but ``cli``.
ROOM_USES = {
    "errors": set(),
    "wire": set(),
    "science": set(),
    "store": {"wire", "science"},
    "sim": {"wire"},
    "render": {"science"},
    "tasks": {"wire", "science", "store", "sim", "render"},
    "cli": {"wire", "science", "store", "sim", "render", "tasks"},
    "": {"wire", "science", "store", "sim", "render", "tasks"},  # nightcell/__init__.py, the public API
}
SQL_TEXT = re.compile(r"^\s*(SELECT|INSERT|UPDATE|DELETE|REPLACE|CREATE|DROP|ALTER|PRAGMA|WITH|BEGIN|VACUUM|ATTACH)\s")


def _module_name(path: Path, host: Path = HOST) -> str:
    parts = ("nightcell",) + path.relative_to(host).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _room(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else ""


def _imports(path: Path, host: Path = HOST) -> list[tuple[int, str]]:
    """Every nightcell module ``path`` imports (at any depth: lazy imports count), with the line."""
    here = _module_name(path, host)
    package = here if path.name == "__init__.py" else here.rpartition(".")[0]
    known = {_module_name(p, host) for p in host.rglob("*.py")}
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found += [(node.lineno, a.name) for a in node.names if a.name.split(".")[0] == "nightcell"]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != "nightcell":
                continue
            # ``from . import x`` / ``from ..room import x``: x may be a module of that package
            found += [(node.lineno, f"{target}.{a.name}" if f"{target}.{a.name}" in known else target)
                      for a in node.names]
    return found


def _check_downward(path: Path, host: Path = HOST) -> None:
    room = _room(_module_name(path, host))
    for line, target in _imports(path, host):
        other = _room(target)
        if other in (room, "", "errors"):
            continue
        assert other in ROOM_USES[room], (
            f"{path.relative_to(host)}:{line} imports {target}: the {room or 'root'} room may use only "
            f"{sorted(ROOM_USES[room]) or 'errors'} (DEVELOPERS.md, How the rooms fit)")


def _check_no_sql(path: Path, host: Path = HOST) -> None:
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            assert not SQL_TEXT.match(node.value), \
                f"{path.relative_to(host)}:{node.lineno} holds SQL text {node.value[:40]!r}: ask a Store method"
        if isinstance(node, ast.Attribute):
            assert node.attr != "conn", \
                f"{path.relative_to(host)}:{node.lineno} reaches for a database connection: ask a Store method"


def _check_no_cycle(paths: list[Path], host: Path = HOST) -> None:
    graph = {_module_name(p, host): {t for _, t in _imports(p, host) if t != "nightcell"} for p in paths}
    state: dict[str, int] = {}  # 1 on the current path, 2 done

    def visit(module: str, trail: list[str]) -> None:
        state[module] = 1
        for nxt in sorted(graph.get(module, ())):
            if nxt not in graph:
                continue
            assert state.get(nxt) != 1, "import cycle: " + " → ".join(trail + [module, nxt])
            if nxt not in state:
                visit(nxt, trail + [module])
        state[module] = 2

    for module in sorted(graph):
        if module not in state:
            visit(module, [])


HOST_SOURCES = sorted(HOST.rglob("*.py"))


@pytest.mark.parametrize("path", HOST_SOURCES, ids=lambda p: str(p.relative_to(HOST)))
def test_rooms_import_only_downward(path):
    _check_downward(path)


@pytest.mark.parametrize("path", [p for p in HOST_SOURCES if _room(_module_name(p)) != "store"],
                         ids=lambda p: str(p.relative_to(HOST)))
def test_sql_and_connections_live_only_in_the_store(path):
    _check_no_sql(path)


def test_no_import_cycle_between_host_modules():
    _check_no_cycle(HOST_SOURCES)


def test_the_room_rules_can_fail(tmp_path):
    # The same checks on a small package written to break them: an upward import, SQL text, a connection, a cycle.
    host = tmp_path / "nightcell"
    for room in ("", "science", "store"):
        (host / room).mkdir(parents=True, exist_ok=True)
        (host / room / "__init__.py").write_text("", encoding="utf-8")
    (host / "store" / "database.py").write_text("X = 1\n", encoding="utf-8")
    probe = host / "science" / "probe.py"
    probe.write_text("from ..store.database import X\nQ = 'SELECT 1 FROM samples'\n", encoding="utf-8")
    with pytest.raises(AssertionError, match="may use only"):
        _check_downward(probe, host)
    with pytest.raises(AssertionError, match="holds SQL text"):
        _check_no_sql(probe, host)
    probe.write_text("def f(store):\n    return store.conn\n", encoding="utf-8")
    with pytest.raises(AssertionError, match="database connection"):
        _check_no_sql(probe, host)
    probe.write_text("from . import other\n", encoding="utf-8")
    (host / "science" / "other.py").write_text("from .probe import f\n", encoding="utf-8")
    with pytest.raises(AssertionError, match="import cycle"):
        _check_no_cycle(sorted(host.rglob("*.py")), host)
    (host / "science" / "other.py").write_text("import math\n", encoding="utf-8")
    _check_no_cycle(sorted(host.rglob("*.py")), host)  # and passes once the cycle is gone
