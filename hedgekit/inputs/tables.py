"""Reading one table from disk: CSV or Parquet, with the file's own row numbers.

Checks made before any value is interpreted:

* the path is a regular file (a folder, FIFO or device is refused before it is opened);
* UTF-8 text, comma-separated, a named header with unique names and no bidirectional
  control characters (U+202A-U+202E, U+2066-U+2069, U+200E/F), which can disguise a name;
* every row has as many fields as the header: a trailing comma or a missing field is
  blamed on its row and field. The count is made in one streaming pass over the bytes
  (numpy per 4 MB chunk; the csv module when the file has quotes), so it costs no memory
  beyond the chunk.

Numeric columns are parsed straight to float64 by pandas' C reader; when a cell is not a
number, the file is read again in chunks as text to name the cell. The peak memory of a
read stays below three times the file's size (measured: docs/interface.md).
"""

from __future__ import annotations

import csv
import hashlib
import re
import stat
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError, quoted, shown

NA_VALUES = ["", "NA", "NaN", "nan", "null", "NULL", "#N/A"]
BIDI = re.compile("[\u202a-\u202e\u2066-\u2069\u200e\u200f]")
_CHUNK = 1 << 22
_DECIMAL_COMMA = re.compile(r"^\s*[+-]?\d*,\d+\s*$")


def file_hash(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def check_name(name: str, file: str, row: int | str, column: str | None, what: str) -> None:
    """Refuse a name carrying a bidirectional control character (it can disguise the name)."""
    m = BIDI.search(name)
    if m:
        raise InputError(f"{what} {ascii(shown(name))} holds the invisible direction control "
                         f"U+{ord(m.group()):04X}, which can make a name read differently from what it is.",
                         file=file, row=row, column=column,
                         fix="delete the control character (retype the name).")


def check_file(path: Path, what: str) -> None:
    """The path names an existing, non-empty regular file."""
    name = str(path)
    try:
        info = path.stat()
    except FileNotFoundError:
        raise InputError(f"{what} file not found.", file=name,
                         fix="check the path in [data] (paths are relative to the config file).") from None
    except OSError as exc:
        raise InputError(f"cannot read the {what} file ({exc.strerror}).", file=name,
                         fix="check the path and its permissions.") from None
    if stat.S_ISDIR(info.st_mode):
        raise InputError(f"{what} path is a folder, not a file.", file=name,
                         fix="point [data] at the file inside it.")
    if not stat.S_ISREG(info.st_mode):
        raise InputError(f"{what} path is not a regular file (a device, FIFO or socket).", file=name,
                         fix="point [data] at a CSV or Parquet file.")
    if info.st_size == 0:
        raise InputError(f"{what} file is empty.", file=name, fix="export the table again with a header row.")


def _header(path: Path, what: str) -> list[str]:
    name = str(path)
    try:
        with open(path, encoding="utf-8-sig", newline="") as fh:
            line = fh.readline()
    except UnicodeDecodeError:
        raise InputError("is not UTF-8 text.", file=name, fix="save the file as UTF-8 CSV.") from None
    if not line.strip():
        raise InputError(f"{what} file has an empty first line; the header must be row 1.", file=name,
                         row=1, fix="remove blank lines above the header.")
    if line.count(",") == 0:
        for sep, label in ((";", "semicolons"), ("\t", "tabs"), ("|", "pipes")):
            if sep in line:
                raise InputError(f"columns are separated by {label}, not commas.", file=name, row=1,
                                 fix="save the file as comma-separated CSV.")
    names = next(csv.reader([line.rstrip("\r\n")]))
    return [n.strip() for n in names]


def _check_header(names: list[str], name: str) -> None:
    seen: dict[str, int] = {}
    for j, col in enumerate(names):
        check_name(col, name, 1, None, f"column name (field {j + 1})")
        if col == "":
            raise InputError(f"field {j + 1} of the header has no name.", file=name, row=1,
                             fix="name every column (or delete the trailing comma).")
        if col in seen:
            raise InputError("column name appears twice.", file=name, row=1, column=col,
                             fix="give every column a unique name.")
        seen[col] = j


def _line_fields(path: Path, quoted_file: bool) -> tuple[np.ndarray, np.ndarray]:
    """Line numbers (1-based) and field counts of every non-blank line after the header."""
    if quoted_file:
        lines, counts = [], []
        with open(path, encoding="utf-8-sig", newline="") as fh:
            reader = csv.reader(fh)
            next(reader, None)
            for fields in reader:
                if len(fields) == 0 or (len(fields) == 1 and not fields[0].strip()):
                    continue
                lines.append(reader.line_num)
                counts.append(len(fields))
        return np.asarray(lines, dtype=np.int64), np.asarray(counts, dtype=np.int64)
    lines_out, counts_out = [], []
    line0 = 1  # number of the first line in the current chunk
    tail = b""
    with open(path, "rb") as fh:
        while True:
            block = fh.read(_CHUNK)
            buf = tail + block
            if not block:
                if buf:
                    buf += b"\n"
                else:
                    break
            arr = np.frombuffer(buf, dtype=np.uint8)
            nl = np.flatnonzero(arr == 10)
            if nl.size == 0:
                tail = buf
                continue
            starts = np.concatenate(([0], nl[:-1] + 1))
            commas = np.flatnonzero(arr == 44)
            counts = np.searchsorted(commas, nl) - np.searchsorted(commas, starts) + 1
            # a line is blank when it holds nothing but spaces, tabs and a carriage return
            blank_chars = (arr == 32) | (arr == 9) | (arr == 13) | (arr == 10)
            non_blank = np.flatnonzero(~blank_chars)
            has_text = np.searchsorted(non_blank, nl) > np.searchsorted(non_blank, starts)
            numbers = line0 + np.arange(nl.size)
            lines_out.append(numbers[has_text])
            counts_out.append(counts[has_text])
            line0 += nl.size
            tail = buf[nl[-1] + 1:]
            if not block:
                break
    lines = np.concatenate(lines_out) if lines_out else np.empty(0, np.int64)
    counts = np.concatenate(counts_out) if counts_out else np.empty(0, np.int64)
    keep = lines > 1  # the header is checked apart
    return lines[keep], counts[keep]


def _check_fields(path: Path, names: list[str]) -> np.ndarray:
    """Every data row has the header's field count; returns the file's line number per row."""
    with open(path, "rb") as fh:
        quoted_file = any(b'"' in chunk for chunk in iter(lambda: fh.read(_CHUNK), b""))
    lines, counts = _line_fields(path, quoted_file)
    width = len(names)
    bad = np.flatnonzero(counts != width)
    if bad.size:
        i = int(bad[0])
        n = int(counts[i])
        if n > width:
            extra = n - width
            what = "a trailing comma" if extra == 1 else f"{extra} extra fields"
            raise InputError(f"malformed row: {n} fields, but the header has {width}; field {width + 1} on, after "
                             f"column {quoted(names[-1])}, has no header ({what}; a decimal comma such as 0,05 "
                             "also splits a cell in two).", file=str(path), row=int(lines[i]),
                             fix="delete the extra comma(s), or name the extra column in the header; "
                                 "write decimals with a point (0.05).")
        raise InputError(f"malformed row: {n} fields, but the header has {width}; the cells from field {n + 1} "
                         f"(column {quoted(names[n])}) on are missing.", file=str(path), row=int(lines[i]),
                         column=names[n], fix="give every row one field per header column "
                                              "(blank cells as empty fields, e.g. 0.01,,0.02).")
    return lines


def locate_non_number(path: Path, columns: list[str], lines: np.ndarray) -> InputError:
    """Read the file again in chunks as text and name the first cell that is not a number."""
    name = str(path)
    offset = 0
    for chunk in pd.read_csv(path, sep=",", encoding="utf-8-sig", dtype=str, usecols=columns,
                             na_values=NA_VALUES, keep_default_na=False, chunksize=50_000):
        best = None
        for col in columns:
            text = chunk[col]
            ok = pd.to_numeric(text.str.strip(), errors="coerce").notna() | text.isna()
            if not ok.all():
                i = int(np.flatnonzero(~ok.to_numpy())[0])
                if best is None or i < best[0]:
                    best = (i, col)
        if best is not None:
            i, col = best
            cell = chunk[col].iloc[i]
            row = int(lines[offset + i]) if offset + i < len(lines) else offset + i + 2
            if _DECIMAL_COMMA.match(cell):
                return InputError(f"value {quoted(cell)} has a decimal comma; hedgekit reads only decimal "
                                  "points and never guesses.", file=name, row=row, column=col,
                                  fix=f"write {cell.strip().replace(',', '.')} (export with a decimal point).")
            hint = " (drop the % sign and declare the units)" if cell.strip().endswith("%") else ""
            return InputError(f"value {quoted(cell)} is not a number{hint}.", file=name, row=row, column=col,
                              fix="use plain decimals (0.012), leave the cell blank when missing.")
        offset += len(chunk)
    return InputError("a value is not a number.", file=name,
                      fix="use plain decimals (0.012), leave the cell blank when missing.")


def read_table(path: Path, what: str, *, numeric_from: int | None = None) -> tuple[pd.DataFrame, np.ndarray]:
    """A CSV or Parquet table as it is, and the file's line number of every row.

    ``numeric_from``: columns from this position on are parsed as float64 (time series);
    ``None`` reads every column as text (holdings, sheets).
    """
    name = str(path)
    check_file(path, what)
    if path.suffix.lower() in (".parquet", ".pq"):
        try:
            frame = pd.read_parquet(path)
        except ImportError:
            raise InputError("reading Parquet needs pyarrow.", file=name,
                             fix="pip install pyarrow, or export the table as CSV.") from None
        except Exception as exc:  # noqa: BLE001 - any parquet failure is a bad file
            raise InputError(f"cannot read Parquet file ({shown(exc, 200)}).", file=name) from None
        if isinstance(frame.index, pd.DatetimeIndex | pd.PeriodIndex) or frame.index.name == "date":
            frame = frame.reset_index()
        frame.columns = [str(c) for c in frame.columns]
        _check_header(list(frame.columns), name)
        return frame, np.arange(2, len(frame) + 2)
    names = _header(path, what)
    _check_header(names, name)
    try:
        lines = _check_fields(path, names)
    except UnicodeDecodeError:
        raise InputError("is not UTF-8 text.", file=name, fix="save the file as UTF-8 CSV.") from None
    if numeric_from is None:
        dtype: dict[str, str] | type = str
    else:
        dtype = {c: ("float64" if j >= numeric_from else "str") for j, c in enumerate(names)}
    try:
        frame = pd.read_csv(path, sep=",", encoding="utf-8-sig", skip_blank_lines=True, header=0,
                            names=names, dtype=dtype, na_values=NA_VALUES, keep_default_na=False)
    except ValueError as exc:
        if numeric_from is not None and "convert" in str(exc):
            raise locate_non_number(path, names[numeric_from:], lines) from None
        raise InputError(f"malformed CSV ({shown(exc, 200)}).", file=name,
                         fix="every row needs the same number of comma-separated fields as the header.") from None
    except pd.errors.EmptyDataError:
        raise InputError(f"{what} file has no header or rows.", file=name) from None
    except UnicodeDecodeError:
        raise InputError("is not UTF-8 text.", file=name, fix="save the file as UTF-8 CSV.") from None
    if len(lines) != len(frame):  # a quoted newline inside a cell; fall back to plain numbering
        lines = np.arange(2, len(frame) + 2)
    return frame, lines
