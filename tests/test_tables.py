"""Reading the tables teachers have: CSV in spreadsheet dialects, units in headers, times as minutes or mm:ss,
percent transmittance, UTF-16 text, and .xlsx/.ods sheets (written here with openpyxl and odfpy, read back through
python-calamine) — each read checked against the same numbers written plainly.

Transmittance to absorbance, A = 2 − log10(%T), is the definition A = −log10(T) with T = %T/100 (IUPAC Gold Book,
"absorbance"). The numbers are a small calibration set invented for the test.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from numpy.testing import assert_allclose

from nightcell.cli import cli
from nightcell.errors import InputError
from nightcell.tasks.tables import read_table

CONC = [0.0, 2.0, 4.0, 6.0, 8.0]
ABS = [0.01, 0.16, 0.31, 0.46, 0.61]


def _write(path: Path, text: str, encoding: str = "utf-8") -> Path:
    path.write_bytes(text.encode(encoding))
    return path


@pytest.mark.parametrize("name, text, encoding, note", [
    ("comma", "concentration,absorbance\n" + "".join(f"{c},{a}\n" for c, a in zip(CONC, ABS)), "utf-8", None),
    ("semicolon, decimal comma", "concentration;absorbance\n"
     + "".join(f"{c:g};{a}\n".replace(".", ",") for c, a in zip(CONC, ABS)), "utf-8", "semicolon-separated; decimal comma"),
    ("tab", "concentration\tabsorbance\n" + "".join(f"{c}\t{a}\n" for c, a in zip(CONC, ABS)), "utf-8",
     "tab-separated"),
    ("quoted cells with CRLF", '"concentration","absorbance"\r\n'
     + "".join(f'"{c}","{a}"\r\n' for c, a in zip(CONC, ABS)), "utf-8", None),
    ("UTF-8 with a byte-order mark", "\ufeffconcentration,absorbance\n"
     + "".join(f"{c},{a}\n" for c, a in zip(CONC, ABS)), "utf-8", None),
    ("UTF-16 (a spreadsheet's Unicode text)", "\ufeffconcentration\tabsorbance\r\n"
     + "".join(f"{c}\t{a}\r\n" for c, a in zip(CONC, ABS)), "utf-16-le", "read as UTF-16 text; tab-separated"),
    ("units in brackets", "Concentration (uM),Absorbance [AU]\n" + "".join(f"{c},{a}\n" for c, a in zip(CONC, ABS)),
     "utf-8", None),
])
def test_dialects_read_the_same_numbers(tmp_path, name, text, encoding, note):
    table = read_table(_write(tmp_path / "t.csv", text, encoding), ["concentration", "absorbance"])
    assert_allclose(table.columns["concentration"], CONC, rtol=0, atol=0)
    assert_allclose(table.columns["absorbance"], ABS, rtol=0, atol=0)
    assert "; ".join(table.notes) == (note or "")


def test_units_are_taken_and_times_converted(tmp_path):
    text = "Concentration (uM),time (min),Absorbance\n1,0,0.5\n2,1.5,0.4\n3,2,0.3\n"
    table = read_table(_write(tmp_path / "t.csv", text), ["time_s", "absorbance"], ["concentration"])
    assert table.units == {"time_s": "min", "concentration": "uM"}
    assert_allclose(table.columns["time_s"], [0.0, 90.0, 120.0])
    assert "'time (min)' in min: converted to seconds" in table.notes


@pytest.mark.parametrize("header, cells, seconds", [
    ("time_s", ["0", "30", "75"], [0, 30, 75]),
    ("time_min", ["0", "0.5", "1.25"], [0, 30, 75]),
    ("time_h", ["0", "0.5", "2"], [0, 1800, 7200]),
    ("time [s]", ["0", "30", "75"], [0, 30, 75]),
    ("Time (hours)", ["0", "1", "1.5"], [0, 3600, 5400]),
    ("time", ["0:00", "0:30", "1:15"], [0, 30, 75]),
    ("time", ["0:00:00", "1:00:30", "2:01:15"], [0, 3630, 7275]),
])
def test_times_in_every_unit_become_seconds(tmp_path, header, cells, seconds):
    text = f"{header},absorbance\n" + "".join(f"{c},0.5\n" for c in cells)
    table = read_table(_write(tmp_path / "t.csv", text), ["time_s", "absorbance"])
    assert_allclose(table.columns["time_s"], seconds)


def test_percent_transmittance_becomes_absorbance_and_says_so(tmp_path):
    percent = [100.0, 50.0, 10.0, 1.0]
    text = "time_s,%T\n" + "".join(f"{i},{t}\n" for i, t in enumerate(percent))
    table = read_table(_write(tmp_path / "t.csv", text), ["time_s", "absorbance"])
    # A = -log10(%T / 100): 100 % -> 0, 50 % -> 0.30103, 10 % -> 1, 1 % -> 2 (IUPAC Gold Book, "absorbance")
    assert_allclose(table.columns["absorbance"], [0.0, math.log10(2.0), 1.0, 2.0], rtol=1e-12)
    assert any("percent transmittance: converted to absorbance" in n for n in table.notes)


def test_overrides_win_over_detection(tmp_path):
    text = "concentration;absorbance\n0;0,01\n2;0,16\n4;0,31\n"
    with pytest.raises(InputError, match=r"'0,01' is not a number \(a decimal comma\? give --decimal ,\)"):
        read_table(_write(tmp_path / "t.csv", text), ["concentration", "absorbance"], decimal=".")


def _xlsx(path: Path, sheets: dict[str, list[list]]) -> Path:
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    book.remove(book.active)
    for name, rows in sheets.items():
        ws = book.create_sheet(name)
        for row in rows:
            ws.append(row)
    book.save(path)
    return path


def _ods(path: Path, rows: list[list]) -> Path:
    pytest.importorskip("odf")
    from odf.opendocument import OpenDocumentSpreadsheet
    from odf.table import Table, TableCell, TableRow
    from odf.text import P

    doc = OpenDocumentSpreadsheet()
    table = Table(name="readings")
    for row in rows:
        tr = TableRow()
        for v in row:
            if isinstance(v, str):
                cell = TableCell(valuetype="string")
            else:
                cell = TableCell(valuetype="float", value=v)
            cell.addElement(P(text=str(v)))
            tr.addElement(cell)
        table.addElement(tr)
    doc.spreadsheet.addElement(table)
    doc.save(str(path))
    return path


ROWS = [["concentration", "absorbance"]] + [[c, a] for c, a in zip(CONC, ABS)]


def test_xlsx_first_sheet_and_named_sheet(tmp_path):
    book = _xlsx(tmp_path / "standards.xlsx", {"notes": [["made up on Monday"]], "standards": ROWS})
    with pytest.raises(InputError, match="has no column 'concentration'"):
        read_table(book, ["concentration", "absorbance"])  # the first sheet holds notes, not readings
    table = read_table(book, ["concentration", "absorbance"], sheet="standards")
    assert_allclose(table.columns["absorbance"], ABS, rtol=0, atol=0)
    with pytest.raises(InputError, match=r"has no sheet 'Sheet9' \(sheets: 'notes', 'standards'\)"):
        read_table(book, ["concentration", "absorbance"], sheet="Sheet9")


def test_ods_sheet(tmp_path):
    table = read_table(_ods(tmp_path / "standards.ods", ROWS), ["concentration", "absorbance"])
    assert_allclose(table.columns["concentration"], CONC, rtol=0, atol=0)
    assert_allclose(table.columns["absorbance"], ABS, rtol=0, atol=0)
    assert table.notes == ["sheet 'readings'"]


def test_calibrate_reads_a_semicolon_file_and_says_how(tmp_path):
    plain = _write(tmp_path / "plain.csv", "concentration,absorbance\n"
                   + "".join(f"{c},{a}\n" for c, a in zip(CONC, ABS)))
    semi = _write(tmp_path / "semi.csv", "Concentration (uM);Absorbance\n"
                  + "".join(f"{c:g};{a}\n".replace(".", ",") for c, a in zip(CONC, ABS)))
    runner = CliRunner()
    a = runner.invoke(cli, ["calibrate", str(plain), "--json"])
    b = runner.invoke(cli, ["calibrate", str(semi), "--json"])
    assert a.exit_code == 0 and b.exit_code == 0, (a.output, b.output)
    assert "read semi.csv: semicolon-separated; decimal comma" in b.output
    assert "read plain.csv" not in a.output
    import json

    fit_a = json.loads(a.stdout)["calibration"]["values"]
    fit_b = json.loads(b.stdout)["calibration"]["values"]
    assert fit_a == fit_b


def test_rate_reads_an_xlsx_with_mm_ss_and_percent_t(tmp_path):
    k = 0.01
    times = np.arange(0, 600, 30)
    absorbance = 0.05 + 0.6 * np.exp(-k * times)
    rows = [["time", "%T"]] + [[f"{t // 60}:{t % 60:02d}", 100 * 10 ** (-a)] for t, a in zip(times, absorbance)]
    book = _xlsx(tmp_path / "run.xlsx", {"Sheet1": rows})
    result = CliRunner().invoke(cli, ["rate", str(book), "--model", "first_order_to_final", "--json"])
    assert result.exit_code == 0, result.output
    import json

    fit = json.loads(result.stdout)["detail"]["first_order_to_final"]
    # noiseless data made with k = 0.01 s^-1: the fit gives it back
    assert_allclose(fit["values"]["k"], k, rtol=1e-6)
    assert "times written as mm:ss or h:mm:ss" in result.output
