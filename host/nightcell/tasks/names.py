"""How people name what is stored: a device by its label (the bench it stands on) or its id, and the
"did you mean …" that follows a label typed with a typo.

Every lookup of a user-typed name (a run, a device, a blank, a calibration set) ends, when nothing matches, with
``did_you_mean`` over the names the store knows, so a typo is answered with the closest labels. It reads through
the store's methods only (no SQL here) and never prints.

Example::

    with Store.open("class.db") as store:
        device, label = resolve_device(store, "bench A")
        print(device_name(store, device))           # 'bench A'
    did_you_mean("fadign", ["fading", "warming"])    # "; did you mean 'fading'?"
"""

from __future__ import annotations

import difflib
from typing import Any, Mapping, Sequence

from ..errors import InputError
from ..store.database import Store

__all__ = ["did_you_mean", "not_found", "device_name", "resolve_device", "board_name", "label_hint"]


def did_you_mean(text: str, known: Sequence[str]) -> str:
    """``"; did you mean 'fading 25 C'?"`` naming up to three of ``known`` closest to ``text`` ("" when none is).

    Closeness is difflib's ratio (at least 0.6), first as typed, then ignoring case."""
    names = [k for k in dict.fromkeys(known) if k]
    close = difflib.get_close_matches(text, names, n=3, cutoff=0.6)
    if not close:
        lowered = {k.lower(): k for k in names}
        close = [lowered[k] for k in difflib.get_close_matches(text.lower(), list(lowered), n=3, cutoff=0.6)]
    return f"; did you mean {' or '.join(repr(c) for c in close)}?" if close else ""


def not_found(what: str, text: str, known: Sequence[str], advice: str) -> str:
    """The message for a name that matches nothing: ``what`` (``"no blank labelled 'watr' on 'bench A'"``), the
    closest of ``known`` to ``text`` when any is close (``did_you_mean``), then ``advice`` (what to type)."""
    close = did_you_mean(text, known)
    return f"{what}{close} {advice[:1].upper()}{advice[1:]}" if close else f"{what}: {advice}"


def device_name(store: Store, device: str) -> str:
    """A device as a person knows it: its label quoted (``'bench A'``), or its id when it has none."""
    row = store.device(device)
    return repr(row["label"]) if row is not None and row["label"] else device


def resolve_device(store: Store, text: str | None) -> tuple[str, str]:
    """The device (its id, and its label — the id when it has none) that ``text`` names by id or label; with
    ``text`` None, the only device of the store. ``InputError`` saying what to type when none or several match."""
    known = {d["device"]: d["label"] or d["device"] for d in store.devices()}
    if text is not None:
        if text in known:
            return text, known[text]
        by_label = [d for d, label in known.items() if label == text]
        if len(by_label) == 1:
            return by_label[0], text
        if by_label:
            raise InputError(f"{len(by_label)} devices are labelled {text!r}: name one by its id "
                             f"({', '.join(by_label)})")
        raise InputError(not_found(f"no device {text!r} in {store.path}", text, list(known.values()),
                                   f"give one of its devices by label or id ({', '.join(known.values())})"))
    if len(known) == 1:
        return next(iter(known.items()))
    if not known:
        raise InputError(f"{store.path} holds no devices yet: sync a board first")
    raise InputError(f"{store.path} holds {len(known)} devices: name one with --device "
                     f"({', '.join(known.values())})")


def board_name(hello: Mapping[str, Any]) -> str:
    """A connected board (its hello) as its class knows it: its label ("bench 3"), or "the board with no label yet"
    (the id is detail: ``label_hint`` gives it with the way to name the board)."""
    return str(hello.get("label") or "the board with no label yet")


def label_hint(hello: Mapping[str, Any]) -> str:
    """For a board with no label, how to give it one (its id kept as detail); "" for a labelled board."""
    if hello.get("label"):
        return ""
    return ("give it a label with `nightcell setup --label \"bench 1\"`, so its runs, tables and reports name it "
            f"(device id {hello.get('device')})")
