"""Tables a person brings: CSV in the dialects spreadsheets write, and ``.xlsx`` / ``.xls`` / ``.ods`` sheets.

Owns: reading a file of columns by header name for the analysis commands — delimiter and decimal mark detected
(and overridable), units in brackets after a header (``Concentration (uM)``, ``time [min]``) taken and, for times,
converted to seconds, times written as seconds, minutes, hours or ``mm:ss`` / ``h:mm:ss``, percent transmittance
columns converted to absorbance, UTF-8 with or without a byte-order mark and UTF-16 with one. Everything that was
detected or converted is said in ``Table.notes``, so the command can state it. A file that cannot be used gives one
``InputError`` naming the file, the row and the column, what was found and what to do. Sheets are read with
python-calamine (the first sheet, or the one named). Plain numeric CSV (one byte encoding, no quotes, no times)
takes a fast path through ``numpy.loadtxt``. Never computes anything from the numbers; never writes.

Example::

    table = read_table("standards.csv", ["concentration", "absorbance"], min_rows=3)
    print(table.notes, table.columns["absorbance"])
"""

from __future__ import annotations

import codecs
import csv
import io
import math
import os
import re
import stat
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from ..errors import InputError

__all__ = ["Table", "read_table", "SHEET_SUFFIXES", "DELIMITERS"]

SHEET_SUFFIXES = (".xlsx", ".xlsm", ".xls", ".ods")
DELIMITERS = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}
MAX_BYTES = 512 * 1024 * 1024
MAX_CELL = 10_000  # characters: far beyond any number or label, far below what would fill memory
_SAMPLE_LINES = 50

# a time unit in a header: seconds per unit
_TIME_UNITS = {"s": 1.0, "sec": 1.0, "secs": 1.0, "second": 1.0, "seconds": 1.0, "ms": 1e-3, "min": 60.0,
               "mins": 60.0, "minute": 60.0, "minutes": 60.0, "h": 3600.0, "hr": 3600.0, "hrs": 3600.0,
               "hour": 3600.0, "hours": 3600.0}
_TIME_NAMES = ("time", "t", "elapsed", "elapsed_time")
_PERCENT_T = re.compile(r"^(%\s*t|t\s*%|transmittance\s*\(?%\)?|percent_?transmittance|%_?transmittance)$", re.I)
_UNIT = re.compile(r"^(?P<name>.*?)\s*[(\[](?P<unit>[^)\]]*)[)\]]\s*$")
_CLOCK = re.compile(r"^(?:(\d+):)?(\d{1,2}):(\d{1,2}(?:[.,]\d*)?)$")
_COMMA_NUMBER = re.compile(r"^[+-]?\d*,\d+(?:[eE][+-]?\d+)?$")


@dataclass
class Table:
    """Columns read from a file: ``columns`` by canonical name (float arrays; text columns as object arrays),
    ``units`` as written in the header, ``notes`` saying what was detected or converted, and ``rows`` (the file's
    line or sheet-row number of each data row, for messages)."""

    path: Path
    columns: dict[str, np.ndarray]
    units: dict[str, str] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    rows: list[int] = field(default_factory=list)
    first_line: int = 2  # the line of the first data row when ``rows`` is empty (a plain file read in one go)

    def line(self, i: int) -> int:
        """The file's line (or sheet row) of data row ``i``."""
        return self.rows[i] if self.rows else self.first_line + i

    def to_dict(self) -> dict[str, Any]:
        return {"file": self.path.name, "units": dict(self.units), "notes": list(self.notes)}


@dataclass
class _Header:
    index: int          # column number, 0-based
    written: str        # as in the file
    name: str           # canonical: lower case, spaces as _, unit taken off, time and %T renamed
    unit: str = ""
    scale: float = 1.0  # multiply to get the canonical unit (time in s)
    offset: float = 0.0
    percent_t: bool = False
    clock: bool = False  # times may be written mm:ss or h:mm:ss


def _regular_file(path: Path) -> None:
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise InputError(f"{path} does not exist: check the file name") from None
    except OSError as exc:
        raise InputError(f"cannot read {path}: {exc.strerror or exc}") from None
    if stat.S_ISDIR(st.st_mode):
        raise InputError(f"{path} is a directory: give a CSV or spreadsheet file")
    if not stat.S_ISREG(st.st_mode):
        raise InputError(f"{path} is not a regular file (a pipe or a device): save the table to a file and give "
                         "that")
    if st.st_size > MAX_BYTES:
        raise InputError(f"{path} is {st.st_size / 1e6:.0f} MB; a table of readings is far smaller: check the file")


def _decode(path: Path, raw: bytes) -> tuple[str, str]:
    """The text and the name of its encoding: a byte-order mark decides; else UTF-8."""
    for bom, name, codec in ((codecs.BOM_UTF32_LE, "UTF-32", "utf-32"), (codecs.BOM_UTF32_BE, "UTF-32", "utf-32"),
                             (codecs.BOM_UTF8, "UTF-8", "utf-8-sig"), (codecs.BOM_UTF16_LE, "UTF-16", "utf-16"),
                             (codecs.BOM_UTF16_BE, "UTF-16", "utf-16")):
        if raw.startswith(bom):
            try:
                return raw.decode(codec), name
            except UnicodeDecodeError as exc:
                raise InputError(f"cannot read {path}: it starts as {name} text but byte {exc.start} is not: save it "
                                 "again as 'CSV UTF-8'") from None
    if b"\x00" in raw[:4096]:
        raise InputError(f"cannot read {path}: it holds NUL bytes, so it is not a text table (a binary file, or "
                         "UTF-16 without its byte-order mark): save it as 'CSV UTF-8'")
    try:
        return raw.decode("utf-8"), "UTF-8"
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        raise InputError(f"cannot read {path}: line {line} is not UTF-8 text (byte {raw[exc.start]:#04x}): save it "
                         "as 'CSV UTF-8' from the spreadsheet") from None


class _Head(str):
    """The first 64 KB of a plain UTF-8 file as text: enough to find the header and the dialect. The rest stays
    bytes for ``numpy.loadtxt`` (which refuses a bad byte, sending the read to the careful path)."""


def _decode_lazily(path: Path, raw: bytes) -> tuple[str, str]:
    if len(raw) <= 65536 or raw.startswith((codecs.BOM_UTF8, codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)) or \
            b"\x00" in raw[:4096] or b"\r" in raw[:65536]:
        return _decode(path, raw)
    piece = raw[:65536]
    for cut in range(4):  # a character may straddle the cut
        try:
            return _Head(piece[:len(piece) - cut].decode("utf-8")), "UTF-8"
        except UnicodeDecodeError:
            continue
    return _decode(path, raw)


def _detect_delimiter(lines: list[str]) -> str | None:
    """The delimiter that gives the header at least two fields and the same count on (nearly) every row."""
    best = None
    for d in DELIMITERS:
        try:
            counts = [len(r) for r in csv.reader(lines, delimiter=d)]
        except csv.Error:
            continue
        if not counts or counts[0] < 2:
            continue
        same = sum(1 for c in counts[1:] if c == counts[0])
        if len(counts) > 1 and same < 0.9 * (len(counts) - 1):
            continue
        score = (same, counts[0])
        if best is None or score > best[0]:
            best = (score, d)
    return None if best is None else best[1]


def _canonical(written: str, index: int) -> _Header:
    text = written.strip()
    h = _Header(index, written, "")
    m = _UNIT.match(text)
    if m and m.group("name").strip():
        text, h.unit = m.group("name").strip(), m.group("unit").strip()
    if _PERCENT_T.match(text) or (h.unit == "%" and text.lower() in ("t", "transmittance")):
        h.name, h.percent_t, h.unit = "absorbance", True, "%T"
        return h
    name = re.sub(r"\s+", "_", text)
    # a reactant keeps the case it was written in (conc_NaOH); every other name is matched in lower case
    name = "conc_" + name[5:] if name.lower().startswith("conc_") else name.lower()
    if h.unit and name in ("temperature", "temp", "t") and h.unit.replace("°", "").upper() in ("C", "DEGC"):
        h.name, h.offset = "temperature_K", 273.15
        return h
    if h.unit and name in ("temperature", "temp", "t") and h.unit.upper() == "K":
        h.name = "temperature_K"
        return h
    base, _, suffix = name.rpartition("_")
    if name in _TIME_NAMES or (base in _TIME_NAMES and suffix in _TIME_UNITS):
        unit = h.unit or (suffix if base in _TIME_NAMES else "")
        if unit and unit.lower() not in _TIME_UNITS and not re.fullmatch(r"h+:m+(:s+)?|m+:s+", unit.lower()):
            raise InputError(f"column {written!r}: {unit!r} is not a unit of time: write s, min or h")
        h.name, h.unit, h.clock = "time_s", unit or "s", True
        h.scale = _TIME_UNITS.get(unit.lower(), 1.0) if unit else 1.0
        return h
    h.name = name
    if name in ("temperature_k",):
        h.name = "temperature_K"
    return h


def _headers(path: Path, header: list[str], prefix: str | None) -> list[_Header]:
    out = []
    seen: dict[str, _Header] = {}
    for i, written in enumerate(header):
        if not written.strip():
            out.append(_Header(i, written, ""))
            continue
        try:
            h = _canonical(written, i)
        except InputError as exc:
            raise InputError(f"{path}: {exc}") from None
        if prefix and h.name == prefix.rstrip("_") + "_":
            raise InputError(f"{path} column {i + 1} is named {written!r} with nothing after {prefix!r}: name it "
                             f"{prefix}<reactant>, e.g. {prefix}hydroxide")
        if h.name in seen:
            raise InputError(f"{path} has two columns that mean {h.name!r} ({seen[h.name].written!r} in column "
                             f"{seen[h.name].index + 1} and {written!r} in column {i + 1}): keep one of them")
        seen[h.name] = h
        out.append(h)
    return out


def _number(cell: str, decimal: str) -> float:
    if decimal == ",":
        cell = cell.replace(",", ".")
    return float(cell)


def _clock_seconds(cell: str) -> float | None:
    m = _CLOCK.match(cell)
    if not m:
        return None
    hours, minutes, seconds = m.group(1), m.group(2), m.group(3).replace(",", ".")
    if float(seconds) >= 60 or (hours and int(minutes) >= 60):
        return None
    return (int(hours) if hours else 0) * 3600.0 + int(minutes) * 60.0 + float(seconds)


def read_table(path: str | Path, required: Sequence[str], optional: Sequence[str] = (), *, prefix: str | None = None,
               min_rows: int = 1, text: Sequence[str] = (), delimiter: str | None = None,
               decimal: str | None = None, sheet: str | None = None) -> Table:
    """Columns of a CSV file or spreadsheet by (canonical) header name.

    ``required`` columns must be there, ``optional`` are taken when present, ``prefix`` also collects every column
    whose name starts with it, ``text`` columns are kept as strings. ``delimiter`` (``,`` ``;`` tab ``|``) and
    ``decimal`` (``.`` or ``,``) override what is detected; ``sheet`` names the sheet of a workbook (default: the
    first). Raises ``InputError`` naming the file, row and column, what was found and what to do.
    """
    p = Path(path)
    _regular_file(p)
    if delimiter is not None and delimiter not in DELIMITERS:
        raise InputError(f"--delimiter {delimiter!r}: give one of , ; | or tab")
    if decimal is not None and decimal not in (".", ","):
        raise InputError(f"--decimal {decimal!r}: give . or ,")
    notes: list[str] = []
    if p.suffix.lower() in SHEET_SUFFIXES:
        grid, row_numbers = _sheet_rows(p, sheet, notes)
        decimal = "."
        body = None
    else:
        if sheet is not None:
            raise InputError(f"--sheet applies to spreadsheets ({', '.join(SHEET_SUFFIXES)}), not to {p.name}")
        with open(p, "rb") as fh:
            raw = fh.read()
        content, encoding = _decode_lazily(p, raw)
        if encoding != "UTF-8":
            notes.append(f"read as {encoding} text")
        partial = isinstance(content, _Head) or len(content) > 65536
        head = content[:65536].splitlines()
        if partial:
            head = head[:-1]  # the last line of the slice may be cut
        first = next((i for i, ln in enumerate(head) if ln.strip()), None)
        if first is None and partial:
            if isinstance(content, _Head):
                content, _ = _decode(p, raw)
            head = content.splitlines()
            first = next((i for i, ln in enumerate(head) if ln.strip()), None)
        if first is None:
            raise InputError(f"{p} is empty; it needs a header row ({','.join(required)}) and data rows")
        sample = [ln for ln in head[first:first + _SAMPLE_LINES] if ln.strip()]
        detected = _detect_delimiter(sample)
        if delimiter is None:
            delimiter = detected or ","
        if delimiter != ",":
            notes.append(f"{DELIMITERS[delimiter]}-separated" + (" (as given)" if delimiter != detected else ""))
        data_sample = sample[1:]
        if decimal is None:
            decimal = "." if delimiter == "," else _detect_decimal(data_sample, delimiter)
        if decimal == ",":
            notes.append("decimal comma")
        plain = encoding == "UTF-8" and not raw.startswith(codecs.BOM_UTF8)
        fast = _fast_path(p, raw if plain else content.encode("utf-8"), head[first], delimiter, decimal, required,
                          optional, prefix, text, min_rows, notes, from_file=plain)
        if fast is not None:
            return fast
        if isinstance(content, _Head):
            content, _ = _decode(p, raw)  # the careful path reads every byte as text (and names a bad one)
        lines = content.splitlines()
        first = next(i for i, ln in enumerate(lines) if ln.strip())
        grid, row_numbers = _csv_rows(p, lines, first, delimiter)
        body = grid
    if not grid:
        raise InputError(f"{p} is empty; it needs a header row ({','.join(required)}) and data rows")
    header_cells = [str(c) if c is not None else "" for c in grid[0]]
    headers = _headers(p, header_cells, prefix)
    data = grid[1:]
    numbers = row_numbers[1:]
    keep = [(r, n) for r, n in zip(data, numbers) if any(str(c).strip() for c in r if c is not None)]
    data, numbers = [r for r, _ in keep], [n for _, n in keep]
    del body
    return _columns(p, headers, data, numbers, required, optional, prefix, text, min_rows, decimal or ".", notes)


def _detect_decimal(rows: list[str], delimiter: str) -> str:
    commas = points = 0
    for row in csv.reader(rows, delimiter=delimiter):
        for cell in row:
            c = cell.strip()
            if _COMMA_NUMBER.match(c):
                commas += 1
            elif re.fullmatch(r"[+-]?\d*\.\d+(?:[eE][+-]?\d+)?", c):
                points += 1
    return "," if commas > points else "."


def _csv_rows(p: Path, lines: list[str], first: int, delimiter: str) -> tuple[list[list[str]], list[int]]:
    grid: list[list[str]] = []
    numbers: list[int] = []
    old = csv.field_size_limit()
    csv.field_size_limit(max(old, MAX_CELL * 20))
    try:
        reader = csv.reader(io.StringIO("\n".join(lines[first:])), delimiter=delimiter)
        try:
            while True:
                line = first + reader.line_num + 1  # where the row starts (a quoted cell may span lines)
                row = next(reader, None)
                if row is None:
                    break
                for j, cell in enumerate(row):
                    if len(cell) > MAX_CELL:
                        raise InputError(f"{p} line {line}, column {j + 1}: a cell of {len(cell)} characters where a "
                                         "number or a label goes (an unclosed quote?); fix or delete that row")
                grid.append(row)
                numbers.append(line)
        except csv.Error as exc:
            raise InputError(f"{p} line {line}: {exc} (an unclosed quote?); fix that line") from None
    finally:
        csv.field_size_limit(old)
    return grid, numbers


def _sheet_rows(p: Path, sheet: str | None, notes: list[str]) -> tuple[list[list[Any]], list[int]]:
    try:
        from python_calamine import CalamineWorkbook
    except ImportError:  # pragma: no cover — a dependency of nightcell
        raise InputError(f"{p}: reading spreadsheets needs python-calamine (pip install python-calamine), or save "
                         "the sheet as CSV") from None
    try:
        book = CalamineWorkbook.from_path(str(p))
        names = list(book.sheet_names)
    except Exception as exc:  # calamine raises its own kinds for every broken zip, XML or password
        raise InputError(f"cannot read {p} as a spreadsheet ({type(exc).__name__}: {exc}): open it in the "
                         "spreadsheet and save it again, or save the sheet as CSV") from None
    if not names:
        raise InputError(f"{p} holds no sheets")
    name = names[0] if sheet is None else sheet
    if name not in names:
        raise InputError(f"{p} has no sheet {sheet!r} (sheets: {', '.join(repr(n) for n in names)}): give one of "
                         "them with --sheet")
    try:
        rows = book.get_sheet_by_name(name).to_python(skip_empty_area=False)
    except Exception as exc:
        raise InputError(f"cannot read sheet {name!r} of {p} ({exc})") from None
    notes.append(f"sheet {name!r}" + (f" (the first of {len(names)})" if len(names) > 1 and sheet is None else ""))
    grid, numbers = [], []
    for i, row in enumerate(rows, start=1):
        cells = [_sheet_cell(c) for c in row]
        if not grid and not any(c.strip() for c in cells if isinstance(c, str)) and not any(
                not isinstance(c, str) for c in cells):
            continue  # blank rows above the header
        grid.append(cells)
        numbers.append(i)
    return grid, numbers


def _sheet_cell(c: Any) -> Any:
    import datetime

    if c is None:
        return ""
    if isinstance(c, bool):
        return str(c)
    if isinstance(c, (int, float)):
        return float(c)
    if isinstance(c, datetime.time):
        return c.hour * 3600.0 + c.minute * 60.0 + c.second + c.microsecond / 1e6
    if isinstance(c, datetime.timedelta):
        return c.total_seconds()
    return str(c)


def _wanted(headers: list[_Header], required: Sequence[str], optional: Sequence[str],
            prefix: str | None) -> list[_Header]:
    by_name = {h.name: h for h in headers if h.name}
    wanted = [by_name[c] for c in list(required) + list(optional) if c in by_name]
    if prefix:
        wanted += [h for h in headers if h.name.startswith(prefix) and h not in wanted]
    return wanted


def _missing(p: Path, headers: list[_Header], required: Sequence[str], notes: list[str]) -> None:
    names = {h.name for h in headers}
    missing = [c for c in required if c not in names]
    if missing:
        found = ", ".join(h.written.strip() for h in headers if h.written.strip()) or "none"
        how = f" (read as {', '.join(notes)})" if notes else ""
        raise InputError(
            f"{p} has no column {', '.join(repr(m) for m in missing)} (found: {found}){how}; the header row must "
            f"name {','.join(required)}"
        )


def _describe(headers: list[_Header], notes: list[str]) -> None:
    for h in headers:
        if h.percent_t:
            notes.append(f"{h.written.strip()!r} is percent transmittance: converted to absorbance = 2 - log10(%T)")
        elif h.name == "time_s" and h.scale != 1.0:
            notes.append(f"{h.written.strip()!r} in {h.unit}: converted to seconds")
        elif h.offset:
            notes.append(f"{h.written.strip()!r} in °C: converted to kelvin (+273.15)")


def _columns(p: Path, headers: list[_Header], data: list[list[Any]], numbers: list[int], required: Sequence[str],
             optional: Sequence[str], prefix: str | None, text: Sequence[str], min_rows: int, decimal: str,
             notes: list[str]) -> Table:
    _missing(p, headers, required, notes)
    if len(data) < min_rows:
        raise InputError(f"{p} has {len(data)} data rows; this analysis needs at least {min_rows}")
    wanted = _wanted(headers, required, optional, prefix)
    _describe(wanted, notes)
    out: dict[str, np.ndarray] = {}
    units: dict[str, str] = {}
    clock_used = False
    for h in wanted:
        col = h.name
        if h.unit:
            units[col] = h.unit
        values: list[Any] = []
        for row, line in zip(data, numbers):
            raw = row[h.index] if h.index < len(row) else ""
            cell = raw.strip() if isinstance(raw, str) else raw
            where = f"{p} line {line}, column {h.written.strip() or h.index + 1}"
            if col in text:
                if cell == "" or cell is None:
                    raise InputError(f"{where} is empty; fill it in or delete that row")
                values.append(cell if isinstance(cell, str) else f"{cell:g}")
                continue
            if isinstance(cell, float):
                v = cell * h.scale
            else:
                try:
                    v = _number(cell, decimal) * h.scale
                except ValueError:
                    seconds = _clock_seconds(cell) if h.clock else None
                    if seconds is None:
                        hint = ""
                        if decimal == "." and _COMMA_NUMBER.match(cell):
                            hint = " (a decimal comma? give --decimal ,)"
                        raise InputError(f"{where}: {cell!r} is not a number{hint}; fix or delete that row") from None
                    v, clock_used = seconds, True
            if not math.isfinite(v):
                raise InputError(f"{where}: {cell!r} is not a finite number; fix or delete that row")
            if h.percent_t:
                if not 0 < v <= 150:
                    raise InputError(f"{where}: {cell!r} is not a percent transmittance above 0; fix or delete that "
                                     "row")
                v = 2.0 - math.log10(v)
            v += h.offset
            values.append(v)
        out[col] = np.array(values, dtype=object if col in text else float)
    if clock_used:
        notes.append("times written as mm:ss or h:mm:ss: converted to seconds")
    return Table(p, out, units, notes, numbers)


def _fast_path(p: Path, data: bytes, header_line: str, delimiter: str, decimal: str, required: Sequence[str],
               optional: Sequence[str], prefix: str | None, text: Sequence[str], min_rows: int,
               notes: list[str], from_file: bool = False) -> Table | None:
    """A plain numeric file (UTF-8 ``data``) read by ``numpy.loadtxt`` in one go; None to take the careful path
    (which also gives the precise message for anything wrong)."""
    if text:
        return None
    try:
        headers = _headers(p, header_line.split(delimiter), prefix)
    except InputError:
        return None
    if any(h.percent_t or h.offset for h in headers):
        return None
    names = {h.name for h in headers}
    if any(c not in names for c in required):
        return None
    wanted = _wanted(headers, required, optional, prefix)
    head = header_line.encode("utf-8")
    start = data.find(head)
    if start < 0 or data[start + len(head):start + len(head) + 1] != b"\n":
        return None
    first_line = data.count(b"\n", 0, start) + 2
    begin = start + len(head) + 1  # the body is read in place: no copy of a 10^6-row file
    # quotes, CRs, clock times and blank lines: the careful path counts and reads them as a person would
    # (loadtxt skips blank lines, which the row count below then catches)
    if begin >= len(data) or any(data.find(mark, begin) >= 0 for mark in (b'"', b"\r", b":")):
        return None
    skip = data.count(b"\n", 0, begin)
    source: Any = p if from_file else io.BytesIO(data)  # numpy reads a file by its path fastest
    if decimal == ",":
        data, begin, skip = data[begin:].replace(b",", b"."), 0, 0
        source = io.BytesIO(data)
    columns = [h.index for h in wanted]
    try:
        values = np.loadtxt(source, delimiter=delimiter, ndmin=2, dtype=float, comments=None, skiprows=skip,
                            encoding="utf-8", usecols=None if columns == list(range(len(headers))) else columns)
    except ValueError:
        return None
    rows = data.count(b"\n", begin) + (0 if data.endswith(b"\n") else 1)
    if values.shape[0] != rows or values.shape[0] < min_rows or not np.all(np.isfinite(values)):
        return None
    _describe(wanted, notes)
    out = {}
    units = {}
    for j, h in enumerate(wanted):
        out[h.name] = values[:, j] * h.scale if h.scale != 1.0 else values[:, j]
        if h.unit:
            units[h.name] = h.unit
    return Table(p, out, units, notes, [], first_line=first_line)
