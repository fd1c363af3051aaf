"""Rate-law names: the current identifiers on the command line, in JSON and in the library; the names of version 0.1
still parse for one version with a deprecation message; a fit result laid out answer first."""

from __future__ import annotations

import json
import re
import warnings

import click
import numpy as np
import pytest
from click.testing import CliRunner

from nightcell.cli import analysis as analysis_cli
from nightcell.science import kinetics
from nightcell.science import laws

T = np.arange(0, 600, 10.0)
A = 0.1 + 0.8 * np.exp(-0.006 * T) + np.random.default_rng(1).normal(0, 0.003, T.size)  # synthetic, fixed seed


@pytest.fixture()
def group() -> click.Group:
    @click.group()
    def root() -> None:
        """Test group."""

    analysis_cli.register(root)
    return root


@pytest.fixture()
def run_csv(tmp_path):
    path = tmp_path / "run.csv"
    path.write_text("time_s,absorbance\n" + "".join(f"{t},{a}\n" for t, a in zip(T, A)))
    return path


def test_every_law_has_a_title_and_no_identifier_says_plateau():
    assert set(kinetics.ALL_MODELS) == set(laws.LAWS)
    for name, law in laws.LAWS.items():
        assert "plateau" not in name and "plateau" not in law.title
        assert law.rate_parameter in law.parameters and law.rate_unit
    # every old name maps to a current one, and the rise law's working name is ready for when it lands
    assert set(laws.OLD_NAMES.values()) <= set(laws.LAWS)
    assert laws.OLD_NAMES["first_order_rise"] == "first_order_rise_to_final"


@pytest.mark.parametrize("old, new", [("first_order_plateau", "first_order_to_final"),
                                      ("first_order", "first_order_to_zero")])
def test_library_takes_old_names_with_a_deprecation_warning(old, new):
    with pytest.warns(DeprecationWarning, match=f"{old}.*deprecated.*{new}"):
        fit = kinetics.fit_model(T, A, old)
    assert fit.model == new
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert kinetics.fit_model(T, A, new).model == new  # the current name is quiet


@pytest.mark.parametrize("old, new", [("first_order_plateau", "first_order_to_final"),
                                      ("first_order", "first_order_to_zero")])
def test_command_line_takes_old_names_hidden_with_a_deprecation_message(group, run_csv, old, new):
    res = CliRunner().invoke(group, ["rate", str(run_csv), "--model", old, "--json"])
    assert res.exit_code == 0, res.output + res.stderr
    assert f"warning: the rate-law name {old!r} is deprecated" in res.stderr and repr(new) in res.stderr
    assert json.loads(res.stdout)["answer"]["law"] == new
    helptext = CliRunner().invoke(group, ["rate", "--help"]).output
    assert new in helptext and not re.search(rf"\b{old}\b(?!_)", helptext)
    arr = CliRunner().invoke(group, ["arrhenius", "--help"]).output
    assert "plateau" not in arr and "first_order_to_final" in arr


def test_fit_result_is_laid_out_answer_first_in_text_and_json(group, run_csv):
    res = CliRunner().invoke(group, ["rate", str(run_csv), "--json"])
    data = json.loads(res.output)
    assert list(data) == ["answer", "how_well_it_fits", "parameters", "intervals", "laws_ranked", "detail"]
    k = data["answer"]["rate_constant"]
    assert k["interval_95"][0] < k["value"] < k["interval_95"][1] and k["unit"] == "s⁻¹"
    assert data["answer"]["half_life"]["value"] == pytest.approx(np.log(2) / k["value"])
    deltas = [r["delta_aicc"] for r in data["laws_ranked"]]
    assert deltas[0] == 0 and deltas == sorted(deltas)
    text = CliRunner().invoke(group, ["rate", str(run_csv)]).output
    heads = ["answer:", "how well it fits", "parameters", "laws ranked"]
    assert [text.index(h) for h in heads] == sorted(text.index(h) for h in heads)
    assert "k = " in text.splitlines()[1] and "s⁻¹" in text.splitlines()[1]
    assert "plateau" not in text and "runs-test" not in text and "AIC " not in text
    detail = CliRunner().invoke(group, ["rate", str(run_csv), "--detail"]).output
    assert "runs-test p" in detail


def test_no_plateau_in_any_output(group, run_csv):
    for args in (["rate", str(run_csv), "--json"], ["rate", str(run_csv), "--detail"], ["rate", "--help"],
                 ["arrhenius", "--help"]):
        assert "plateau" not in CliRunner().invoke(group, args).output.lower()


def _database_of_version_0_1(path):
    """A database as nightcell 0.1 left it: migrations 0001–0003 and results saved under the old law names."""
    import sqlite_utils

    from nightcell.store.database import _statements, migration_files

    db = sqlite_utils.Database(path)
    migrations = sqlite_utils.Migrations("nightcell")
    for name, sql in [m for m in migration_files() if m[0] < "0004"]:
        @migrations(name=name)
        def step(d, _sql=sql):
            for stmt in _statements(_sql):
                d.conn.execute(stmt)
    migrations.apply(db)
    old = {"best_model": "first_order_plateau",
           "fits": {"first_order_plateau": {"model": "first_order_plateau", "values": {"k": 0.02}},
                    "first_order": {"model": "first_order", "values": {"k": 0.019}},
                    "zero_order": {"model": "zero_order", "values": {"rate": -1e-3}}}}
    compact = {"sort_keys": True, "separators": (",", ":")}  # how 0.1 wrote result_json
    db.conn.execute("INSERT INTO results(kind, label, created_unix, nightcell_version, inputs_json, result_json) "
                    "VALUES ('rate', 'first_order_plateau run', 0, '0.1.0', ?, ?)",
                    (json.dumps({"model": "first_order", "run": "d:1:2"}, **compact), json.dumps(old, **compact)))
    db.conn.execute("INSERT INTO results(kind, label, created_unix, nightcell_version, inputs_json, result_json) "
                    "VALUES ('calibration', 'bench A', 0, '0.1.0', '{}', '{\"model\":\"line\"}')")
    db.conn.commit()
    db.close()


def test_migration_renames_the_laws_of_stored_results(tmp_path):
    from nightcell.store.database import Store

    path = tmp_path / "old.db"
    _database_of_version_0_1(path)
    with Store.open(path) as store:
        rows = store.query("SELECT label, inputs_json, result_json FROM results ORDER BY id")
    rate, cal = rows
    result, inputs = json.loads(rate["result_json"]), json.loads(rate["inputs_json"])
    assert result["best_model"] == "first_order_to_final"
    assert set(result["fits"]) == {"first_order_to_final", "first_order_to_zero", "zero_order"}
    assert result["fits"]["first_order_to_final"] == {"model": "first_order_to_final", "values": {"k": 0.02}}
    assert result["fits"]["first_order_to_zero"]["model"] == "first_order_to_zero"
    assert inputs == {"model": "first_order_to_zero", "run": "d:1:2"}
    assert rate["label"] == "first_order_plateau run"  # a user's label is theirs: only law names are renamed
    assert json.loads(cal["result_json"]) == {"model": "line"}
    assert "plateau" not in rate["result_json"]


def test_readme_lists_every_rate_law_with_its_title_and_unit():
    from pathlib import Path

    readme = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")
    table = re.search(r"<!-- laws -->\n(.*?)<!-- /laws -->", readme, re.S).group(1)
    rows = re.findall(r"^\| `([a-z_]+)` \| ([^:|]+):", table, re.M)
    assert [name for name, _ in rows] == list(kinetics.ALL_MODELS)
    for name, title in rows:
        assert title == laws.LAWS[name].title and laws.LAWS[name].rate_unit in table
