"""The ``benches`` command: every attached board live in one browser page (``tasks.dashboard`` keeps the state and
serves the page through ``render.dashboard``). ``cli/__init__.py`` calls ``register(cli)``; nothing here computes.
"""

from __future__ import annotations

import secrets
import sys
from pathlib import Path

import click

from .options import db_option, friendly
from ..errors import DeviceNotFound

__all__ = ["register"]


@click.command("benches")
@click.option("--port", "ports", multiple=True,
              help="A board's port or pyserial URL, beside the boards found by USB id; repeat for several.")
@db_option
@click.option("--every", type=click.FloatRange(min=0.2, max=60.0), default=0.5, show_default=True, metavar="SECONDS",
              help="How often each board is asked for its status (one worker per board).")
@click.option("--planned-end", metavar="HH:MM|DURATION",
              help="When the class's runs should end (e.g. 15:30 or 3h): a journal that fills before then is an alert.")
@click.option("--host", "host", default=None, metavar="ADDRESS",
              help="Listen on this address instead of 127.0.0.1 (anyone who can reach it sees the page: warned).")
@click.option("--http-port", type=click.IntRange(min=0, max=65535), default=8731, show_default=True,
              help="The page's TCP port on that address (0: any free port).")
@click.option("--no-browser", is_flag=True, help="Do not open the page in the default browser.")
@click.option("--control", is_flag=True,
              help="Also allow start, stop and blank from the page, with a one-time token printed here.")
@click.option("--no-ack", is_flag=True, help="Sync all without letting the boards trim what was stored.")
@friendly
def benches(ports: tuple[str, ...], db: Path, every: float, planned_end: str | None, host: str | None,
            http_port: int, no_browser: bool, control: bool, no_ack: bool) -> None:
    """Every attached board live in one browser page: state, absorbance and trend, last mark, samples, journal
    fill, alerts, and one action, "Sync all" into --db.

    Boards are found as `roll-call` finds them, plus every --port. The page is served on 127.0.0.1 only, unless
    --host is given. Ctrl-C stops the page; the boards go on logging.

    Example: nightcell benches --db class.db --planned-end 3h
    """
    from ..tasks.dashboard import board_ports, parse_planned_end, serve_page

    end = parse_planned_end(planned_end)
    chosen = board_ports(ports)
    if not chosen:
        raise DeviceNotFound("no board answered on any port with a board's USB id: plug the boards in, or name "
                             "them with --port")
    token = secrets.token_urlsafe(16) if control else None
    bind = host or "127.0.0.1"
    if host is not None and host not in ("127.0.0.1", "localhost", "::1"):
        click.echo(f"warning: listening on {host}: anyone who can reach this address can see every board and "
                   "start a sync" + (" (the controls still need the token)" if control else "")
                   + "; use it only on a network you trust", err=True)

    def ready(url: str) -> None:
        click.echo(f"page: {url}")
        click.echo(f"{len(chosen)} board(s): {', '.join(chosen)}; sync all goes into {db}")
        if token:
            click.echo(f"control token (shown once; paste it into the page to use start, stop, blank): {token}")
        click.echo("Ctrl-C stops the page; the boards go on logging.")
        sys.stdout.flush()
        if not no_browser:
            import webbrowser

            webbrowser.open(url)

    serve_page(chosen, db, every=every, planned_end=end, acknowledge=not no_ack, host=bind, http_port=http_port,
               control_token=token, any_host=host is not None, ready=ready)
    click.echo("page stopped; the boards go on logging")


def register(cli: click.Group) -> None:
    """Add this room's command to the ``nightcell`` group."""
    cli.add_command(benches)
