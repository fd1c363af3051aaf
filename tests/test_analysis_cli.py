"""The analysis commands on CSV files: wiring, --json, --out, and one-line errors with their documented exit codes
(2 for a file or value that cannot be used, 5 when the data cannot support the fit)."""

from __future__ import annotations

import json
import re
from pathlib import Path

import click
import numpy as np
import pytest
from click.testing import CliRunner

from nightcell.cli import analysis as analysis_cli


@pytest.fixture()
def group() -> click.Group:
    @click.group()
    def root() -> None:
        """Test group."""

    analysis_cli.register(root)
    return root


def _write(path: Path, header: str, rows) -> Path:
    path.write_text(header + "\n" + "\n".join(",".join(str(v) for v in row) for row in rows) + "\n")
    return path


def _invoke(group, *args):
    return CliRunner().invoke(group, [str(a) for a in args])


# Miller & Miller, ch. 5 [memory for the attribution; the numbers were reproduced]
MM = list(zip([0, 2, 4, 6, 8, 10, 12], [2.1, 5.0, 9.0, 12.6, 17.3, 21.0, 24.7]))


def test_register_adds_four_commands_with_help(group):
    assert {"calibrate", "rate", "orders", "arrhenius"} <= set(group.commands)
    for name in ("calibrate", "rate", "orders", "arrhenius"):
        assert group.commands[name].help


def test_calibrate_text_json_and_out(group, tmp_path):
    csv_file = _write(tmp_path / "std.csv", "concentration,absorbance,replicate", [(x, y, 1) for x, y in MM])
    # the textbook's signals (up to 24.7) are not absorbances, so the %T guard asks for --accept-suspect
    refused = _invoke(group, "calibrate", csv_file, "--reading", 2.9)
    assert refused.exit_code == 2 and "look like percent transmittance" in refused.output, refused.output
    text = _invoke(group, "calibrate", csv_file, "--reading", 2.9, "--accept-suspect")
    assert text.exit_code == 0, text.output
    assert "slope" in text.output and "unknown" in text.output
    out = tmp_path / "cal.json"
    res = _invoke(group, "calibrate", csv_file, "--reading", 2.9, "--json", "--out", out, "--accept-suspect")
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    # worked example numbers pass through the command unchanged (Miller & Miller, ch. 5 [memory for the attribution])
    assert data["calibration"]["values"]["slope"] == pytest.approx(1.93036, abs=5e-6)
    assert data["prediction"]["value"] == pytest.approx(0.7160, abs=5e-5)
    assert data["prediction"]["stderr"] == pytest.approx(0.2646, abs=5e-5)
    assert json.loads(out.read_text()) == data


def test_rate_all_and_single_model(group, tmp_path):
    rng = np.random.default_rng(1)  # synthetic run, fixed seed
    t = np.arange(0, 600, 10.0)
    a = 0.1 + 0.8 * np.exp(-0.006 * t) + rng.normal(0, 0.003, t.size)
    csv_file = _write(tmp_path / "run.csv", "time_s,absorbance", zip(t, a))
    res = _invoke(group, "rate", csv_file, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert data["answer"]["law"] == data["laws_ranked"][0]["law"] == "first_order_to_final"
    k = data["answer"]["rate_constant"]
    assert abs(k["value"] - 0.006) < 3 * k["standard_error"] and k["unit"] == "s⁻¹"
    assert k["value"] == data["detail"]["first_order_to_final"]["values"]["k"]
    one = _invoke(group, "rate", csv_file, "--model", "initial_rate", "--window", 0, 60)
    assert one.exit_code == 0 and "window given: 0 to 60 s" in one.output


def test_orders_and_arrhenius(group, tmp_path):
    rows = [(3.5e-5 * k * h, k, h, i) for k, h, i in
            [(0.4, 0.2, 0.002), (0.8, 0.2, 0.002), (1.2, 0.2, 0.002), (0.4, 0.4, 0.002), (0.4, 0.6, 0.002),
             (0.4, 0.2, 0.004), (0.4, 0.2, 0.006)]]
    noise = [1.01, 0.99, 1.02, 0.98, 1.0, 1.01, 0.99]  # synthetic
    rows = [(r * f, k, h, i) for (r, k, h, i), f in zip(rows, noise)]
    orders_csv = _write(tmp_path / "orders.csv", "initial_rate,conc_ketone,conc_acid,conc_iodine", rows)
    res = _invoke(group, "orders", orders_csv, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert data["joint"]["values"]["order_iodine"] == pytest.approx(0.0, abs=0.1)
    assert data["joint"]["values"]["order_ketone"] == pytest.approx(1.0, abs=0.1)

    # N2O5 decomposition (Daniels & Johnston 1921 [memory for the table]): Ea = 102.9 ± 0.5 kJ/mol [reproduced]
    arr_csv = _write(tmp_path / "arr.csv", "temperature_K,k",
                     zip([273, 298, 308, 318, 328, 338], [7.87e-7, 3.46e-5, 1.35e-4, 4.98e-4, 1.50e-3, 4.87e-3]))
    res = _invoke(group, "arrhenius", arr_csv, "--eyring", "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert data["arrhenius"]["extra"]["Ea_kJ_per_mol"] == pytest.approx(102.9, abs=0.05)
    assert "eyring" in data
    text = _invoke(group, "arrhenius", arr_csv, "--eyring")
    # Ea the one way it is printed everywhere, rounded by its standard error, in kJ mol⁻¹ (render.numbers)
    assert re.search(r"Ea = 102\.\d+ ± \d\.\d+ kJ mol⁻¹", text.output) and "ΔH‡ = " in text.output
    assert "Ea_J_per_mol" not in text.output and "Ea_J_per_mol" in _invoke(group, "arrhenius", arr_csv,
                                                                              "--detail").output
    orders_text = _invoke(group, "orders", orders_csv).output
    assert re.search(r"order in ketone: 1\.\d+ ± 0\.\d+", orders_text), orders_text


@pytest.mark.parametrize(
    "command, header, rows, message, code",
    [
        ("calibrate", "conc,absorbance", [(1, 0.1), (2, 0.2), (3, 0.3)], "has no column 'concentration'", 2),
        ("calibrate", "concentration,absorbance", [(1, 0.1), (2, "abc"), (3, 0.3)],
         "line 3, column absorbance: 'abc' is not a number; fix or delete that row", 2),
        ("calibrate", "concentration,absorbance", [(1, 0.1), (2, "nan"), (3, 0.3)], "not a finite number", 2),
        ("calibrate", "concentration,absorbance", [(1, 0.1), (2, 0.2)], "needs at least 3", 2),
        ("calibrate", "concentration,absorbance", [(1, 0.1), (1, 0.2), (1, 0.3)],
         "prepare standards at more levels", 5),
        ("rate", "time_s,absorbance", [(0, 0.5), (10, 0.4), (5, 0.3), (20, 0.2), (30, 0.1)],
         "sort the readings by time", 2),
        ("rate", "time_s,absorbance", [(0, 0.5), (10, 0.4), (10, 0.3), (20, 0.2), (30, 0.1)], "repeats", 2),
        ("rate", "time_s,absorbance", [(t, 0.5) for t in range(0, 100, 10)], "does not change", 5),
        ("orders", "initial_rate,ketone", [(1, 1), (2, 2), (3, 3), (4, 4)], "conc_<name>", 2),
        ("arrhenius", "temperature_K,k", [(300, 1e-3), (300, 2e-3), (300, 3e-3)], "different temperatures", 5),
    ],
)
def test_bad_csv_gives_one_line_and_its_exit_code(group, tmp_path, command, header, rows, message, code):
    csv_file = _write(tmp_path / "bad.csv", header, rows)
    out = tmp_path / "never.json"
    res = _invoke(group, command, csv_file, "--out", out)
    assert res.exit_code == code
    assert message in res.output
    assert "Traceback" not in res.output and res.output.count("\n") == 1
    assert not out.exists()
    assert not list(tmp_path.glob(".nightcell-*"))


def test_nonconvergent_rate_fit_is_a_clean_error(group, tmp_path):
    # the law towards a final absorbance, on a straight line, has no final absorbance to find
    csv_file = _write(tmp_path / "line.csv", "time_s,absorbance", [(t, 0.01 * t) for t in range(0, 60, 10)])
    res = _invoke(group, "rate", csv_file, "--model", "first_order_to_final")
    assert res.exit_code == 5 and "Traceback" not in res.output
    assert res.output.startswith("Error: first_order_to_final:")
