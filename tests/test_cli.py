"""CLI wiring: help everywhere, clear one-line errors with documented exit codes, no tracebacks."""

from click.testing import CliRunner

from nightcell.cli import cli


def _all_commands(group, prefix=()):
    import click

    ctx = click.Context(group)
    for name in group.list_commands(ctx):  # loads the commands other rooms register
        cmd = group.get_command(ctx, name)
        yield prefix + (name,), cmd
        if hasattr(cmd, "commands"):
            yield from _all_commands(cmd, prefix + (name,))


def test_every_command_has_help_text_and_an_example():
    for path, cmd in _all_commands(cli):
        assert cmd.help and cmd.help.strip(), f"{' '.join(path)} has no help text"
        assert "Example:" in cmd.help, f"{' '.join(path)} has no example"


def test_port_that_does_not_exist():
    r = CliRunner().invoke(cli, ["hello", "--port", "/dev/nightcell-no-such-port"])
    assert r.exit_code == 3
    assert "no board at /dev/nightcell-no-such-port" in r.output
    assert "Traceback" not in r.output


def test_device_that_does_not_answer():
    # loop:// echoes our own request back: a device that never answers in the protocol.
    r = CliRunner().invoke(cli, ["hello", "--port", "loop://"])
    assert r.exit_code == 3
    assert "no board answered on loop://" in r.output
    assert "running nightcell firmware" in r.output


def test_demo_refuses_a_non_empty_folder(tmp_path):
    (tmp_path / "mine.txt").write_text("keep me")
    r = CliRunner().invoke(cli, ["demo", "--out", str(tmp_path)])
    assert r.exit_code == 2
    assert "not empty" in r.output and "--force" in r.output
    assert (tmp_path / "mine.txt").read_text() == "keep me"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["mine.txt"]


def test_help_lists_the_exit_codes():
    r = CliRunner().invoke(cli, ["--help"])
    assert r.exit_code == 0
    for line in ("2  bad input", "3  board", "4  database", "5  analysis"):
        assert line in r.output


def test_an_unknown_command_is_a_usage_error():
    r = CliRunner().invoke(cli, ["calibrat"])
    assert r.exit_code == 2 and "No such command 'calibrat'" in r.output


def test_long_tables_are_drawn_as_rich_draws_them():
    """The quick table drawer gives rich's own output (rich 13, the reference) for a table that fits, and leaves
    a table too wide, or with a cell that is not printable text, to rich."""
    import io

    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    from nightcell.cli import _box_lines

    columns = ("run", "label", "started (UTC)", "samples", "state")
    rows = [("d:1:2", "dye 日本", "2026-12-01 22:21:00", 34, "stopped"), ("d:1:9", "", None, 5, "open"),
            ("d:2:1", "[bold]not markup[/bold]", "", 0, "open")]
    table = Table(title="runs", title_justify="left")
    for c in columns:
        table.add_column(c, overflow="fold")
    for r in rows:
        table.add_row(*[Text("" if v is None else str(v)) for v in r])
    buf = io.StringIO()
    Console(file=buf, highlight=False, width=100).print(table)
    assert "\n".join(_box_lines("runs", columns, rows, 100, False)) + "\n" == buf.getvalue()
    assert _box_lines("runs", columns, rows, 40, False) is None  # too wide: rich folds the cells
    assert _box_lines("runs", columns, [("d:1:2", "bell\x07", "", 1, "open")], 100, False) is None
