"""Names people type: the "did you mean …" that answers a typo, and a device found by its label or its id.

The closeness rule is the standard library's ``difflib.get_close_matches`` (ratio ≥ 0.6, the reference), tried as
typed and then ignoring case; each guard that uses it is a row of tests/test_bad_input.py with its full message.
"""

from __future__ import annotations

import difflib

import pytest

from nightcell.errors import InputError
from nightcell.tasks.names import device_name, did_you_mean, not_found, resolve_device


def test_did_you_mean_offers_what_difflib_finds_close_and_nothing_when_none_is():
    known = ["fading 25 C", "fading 35 C", "warming", "fading 25 C"]
    # closest first, as difflib ranks them ("fading 35 C" keeps one more character in place than "fading 25 C")
    assert difflib.get_close_matches("fading 52 C", list(dict.fromkeys(known)), n=3, cutoff=0.6) == \
        ["fading 35 C", "fading 25 C"]
    assert did_you_mean("fading 52 C", known) == "; did you mean 'fading 35 C' or 'fading 25 C'?"
    assert did_you_mean("absorbance", known) == ""
    assert did_you_mean("x", []) == ""


def test_did_you_mean_ignores_case_when_nothing_matches_as_typed():
    # "BENCH A" against "bench a": ratio 0.14 as typed, 1.0 ignoring case; the label is offered as it is stored
    assert difflib.SequenceMatcher(None, "BENCH A", "bench a").ratio() < 0.6
    assert did_you_mean("BENCH A", ["bench a", "window"]) == "; did you mean 'bench a'?"


def test_did_you_mean_names_at_most_three_and_skips_empty_labels():
    known = ["", "run 1", "run 2", "run 3", "run 4"]
    offered = did_you_mean("run 0", known)
    assert offered.count("'run ") == 3 and "''" not in offered


def test_not_found_puts_the_advice_after_the_closest_names_or_after_a_colon():
    assert not_found("no blank labelled 'watr'", "watr", ["water"], "list blanks first") == \
        "no blank labelled 'watr'; did you mean 'water'? List blanks first"
    assert not_found("no blank labelled 'tap'", "tap", ["water"], "list blanks first") == \
        "no blank labelled 'tap': list blanks first"


def test_a_device_is_found_by_label_or_id_and_a_typo_is_answered(store):
    with store.write():
        store.touch_device("5eba0000000000a1", board="sim", firmware="0.1.0", label="bench A")
        store.touch_device("5eba0000000000b2", board="sim", firmware="0.1.0", label="")
    assert resolve_device(store, "bench A") == ("5eba0000000000a1", "bench A")
    assert resolve_device(store, "5eba0000000000b2") == ("5eba0000000000b2", "5eba0000000000b2")
    assert device_name(store, "5eba0000000000a1") == "'bench A'"
    assert device_name(store, "5eba0000000000b2") == "5eba0000000000b2"
    with pytest.raises(InputError, match=r"no device 'bench B' in .*; did you mean 'bench A'\? Give one of its "
                                         r"devices by label or id \(bench A, 5eba0000000000b2\)"):
        resolve_device(store, "bench B")
    with pytest.raises(InputError, match=r"holds 2 devices: name one with --device"):
        resolve_device(store, None)
