"""The README is kept true by machine: its command list is the CLI's (both ways), every command has help with an
example, its exit codes are the CLI's, its session uses only real commands, and its two set-up commands are exactly
what `.ci/run` reads."""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import click

from nightcell.cli import EXIT_CODES, cli

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")


def _between(marker: str) -> str:
    m = re.search(rf"<!-- {marker} -->\n(.*?)<!-- /{marker} -->", README, re.S)
    assert m, f"README has no <!-- {marker} --> … <!-- /{marker} --> section"
    return m.group(1)


def _cli_commands() -> dict[str, click.Command]:
    """Every command by its full name ('list runs' for a group's command); groups themselves are not listed."""
    out: dict[str, click.Command] = {}

    def walk(group: click.Group, prefix: str) -> None:
        ctx = click.Context(group)
        for name in group.list_commands(ctx):
            cmd = group.get_command(ctx, name)
            assert cmd is not None
            if isinstance(cmd, click.Group):
                walk(cmd, prefix + name + " ")
            else:
                out[prefix + name] = cmd

    walk(cli, "")
    return out


def _readme_commands() -> list[str]:
    return re.findall(r"^- `nightcell ([a-z][a-z -]*?)`", _between("commands"), re.M)


def test_readme_command_list_is_the_clis():
    listed = _readme_commands()
    assert len(listed) == len(set(listed)), "a command is listed twice in the README"
    real = set(_cli_commands())
    missing = sorted(real - set(listed))
    extra = sorted(set(listed) - real)
    assert not missing, f"add these to the README's command list: {missing}"
    assert not extra, f"the README lists commands the CLI does not have: {extra}"


def test_every_command_has_help_and_an_example():
    for name, cmd in _cli_commands().items():
        assert cmd.help and cmd.help.strip(), f"`nightcell {name}` has no help text"
        assert "Example: nightcell " + name.split()[0] in cmd.help, f"`nightcell {name}` has no example"
    ctx = click.Context(cli)
    for name in cli.list_commands(ctx):
        assert cli.get_command(ctx, name).help, name


def test_readme_exit_codes_are_the_clis():
    rows = re.findall(r"^\| (\d+) \| (.+?) \|$", _between("exit-codes"), re.M)
    assert {int(code): text for code, text in rows} == EXIT_CODES
    top_help = cli.help or ""
    for code, text in EXIT_CODES.items():
        assert f"{code}" in top_help and text in top_help, f"`nightcell --help` does not explain exit code {code}"


def test_the_session_uses_only_real_commands():
    session = _between("session")
    shown = re.findall(r"^\$ nightcell (.+)$", session, re.M)
    assert len(shown) >= 15
    real = _cli_commands()
    for line in shown:
        words = line.split()
        name = " ".join(words[:2]) if words[0] == "list" else words[0]
        assert name in real, f"the README's session runs `nightcell {line}`, which is not a command"


def test_setup_commands_are_one_line_each_and_ci_reads_the_test_command():
    demo = [ln for ln in _between("demo-command").splitlines() if ln.strip() and not ln.startswith("```")]
    test = [ln for ln in _between("test-command").splitlines() if ln.strip() and not ln.startswith("```")]
    assert len(demo) == 1 and "nightcell demo" in demo[0]
    assert len(test) == 1 and "pytest" in test[0]
    # .ci/run states the command it runs and runs exactly that; its README check must find the same line here
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    stated = next(ln for ln in ci.splitlines() if ln.startswith("TEST_COMMAND="))
    assert stated == 'TEST_COMMAND="' + test[0] + '"'
    assert any(ln.startswith("{ " + test[0] + "; }") for ln in ci.splitlines()), "the command .ci/run runs"
    extract = next(ln for ln in ci.splitlines() if ln.startswith('readme="$('))
    out = subprocess.run(["bash", "-c", extract + '\nprintf "%s" "$readme"'], cwd=ROOT, capture_output=True,
                         text=True, check=True).stdout
    assert out == test[0]


def test_readme_opens_with_the_job_then_the_two_setup_commands():
    body = README.split("\n## ")
    assert body[0].startswith("# nightcell\n")
    paragraphs = [p for p in body[0].split("\n\n")[1:] if p.strip()]
    assert len(paragraphs) == 1, "the README opens with one paragraph stating the job"
    assert body[1].startswith("Set up")
    assert README.count("<!-- demo-command -->") == 1 and README.count("<!-- test-command -->") == 1
