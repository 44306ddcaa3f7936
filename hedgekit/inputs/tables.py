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
_CHUNK = 1 << 20
_READ_BYTES = 64_000_000  # text per parsed chunk
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


def header_names(path: Path, what: str) -> list[str]:
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
    line = line.rstrip("\r\n")
    if '"' not in line:
        return [n.strip() for n in line.split(",")]
    try:
        names = next(csv.reader([line]))
    except csv.Error as exc:
        raise InputError(f"the header cannot be read ({shown(exc, 80)}).", file=name, row=1,
                         fix="give the columns short names in a plain comma-separated header.") from None
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
            try:
                next(reader, None)
                for fields in reader:
                    if len(fields) == 0 or (len(fields) == 1 and not fields[0].strip()):
                        continue
                    lines.append(reader.line_num)
                    counts.append(len(fields))
            except csv.Error as exc:
                raise InputError(f"malformed CSV ({shown(exc, 80)}).", file=str(path), row=reader.line_num + 1,
                                 fix="close every quoted cell and keep cells short.") from None
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
            # a line without a comma may be blank (spaces, tabs, a carriage return): look at those only
            has_text = counts > 1
            for k in np.flatnonzero(~has_text):
                has_text[k] = bool(buf[starts[k]:nl[k]].strip())
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


def _read_parquet(path: Path) -> pd.DataFrame:
    name = str(path)
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
    return frame


def _checked_csv(path: Path, what: str) -> tuple[list[str], np.ndarray]:
    names = header_names(path, what)
    _check_header(names, str(path))
    try:
        lines = _check_fields(path, names)
    except UnicodeDecodeError:
        raise InputError("is not UTF-8 text.", file=str(path), fix="save the file as UTF-8 CSV.") from None
    return names, lines


def _csv_errors(exc: Exception, path: Path, what: str) -> InputError:
    name = str(path)
    if isinstance(exc, pd.errors.EmptyDataError):
        return InputError(f"{what} file has no header or rows.", file=name)
    if isinstance(exc, UnicodeDecodeError):
        return InputError("is not UTF-8 text.", file=name, fix="save the file as UTF-8 CSV.")
    return InputError(f"malformed CSV ({shown(exc, 200)}).", file=name,
                      fix="every row needs the same number of comma-separated fields as the header.")


def read_table(path: Path, what: str) -> tuple[pd.DataFrame, np.ndarray]:
    """A CSV or Parquet table as text (holdings, sheets), and the file's line number of every row."""
    check_file(path, what)
    if path.suffix.lower() in (".parquet", ".pq"):
        frame = _read_parquet(path).astype("string")
        return frame, np.arange(2, len(frame) + 2)
    names, lines = _checked_csv(path, what)
    try:
        frame = pd.read_csv(path, sep=",", encoding="utf-8-sig", skip_blank_lines=True, header=0,
                            names=names, dtype=str, na_values=NA_VALUES, keep_default_na=False)
    except (ValueError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise _csv_errors(exc, path, what) from None
    if len(lines) != len(frame):  # cannot happen after the field check; plain numbering as a fallback
        lines = np.arange(2, len(frame) + 2)
    return frame, lines


def read_numeric(path: Path, what: str) -> tuple[pd.Series, list[str], np.ndarray, np.ndarray]:
    """A time-series table: its first column as text, the other columns' names, their values as
    one float64 array (rows x columns), and the file's line number of every row.

    The CSV is parsed in chunks of about ``_READ_BYTES`` of text straight into the preallocated
    array, so the peak memory is the array plus one chunk (about 1.3 times the file's size for
    a wide file of ten-digit decimals; measured in docs/interface.md).
    """
    check_file(path, what)
    if path.suffix.lower() in (".parquet", ".pq"):
        frame = _read_parquet(path)
        if frame.shape[1] < 2:
            return frame.iloc[:, 0] if frame.shape[1] else pd.Series([], dtype=str), [], \
                np.empty((len(frame), 0)), np.arange(2, len(frame) + 2)
        body = frame.iloc[:, 1:]
        bad = [c for c in body.columns if not (pd.api.types.is_numeric_dtype(body[c])
                                               and not pd.api.types.is_bool_dtype(body[c]))]
        if bad:
            col = bad[0]
            text = body[col].astype("string")
            ok = pd.to_numeric(text.str.strip(), errors="coerce").notna() | text.isna()
            i = int(np.flatnonzero(~ok.to_numpy())[0]) if (~ok).any() else 0
            raise InputError(f"value {quoted(body[col].iloc[i])} is not a number.", file=str(path), row=i + 2,
                             column=col, fix="store the series as numbers, blank (null) when missing.")
        values = body.to_numpy(dtype=float, na_value=np.nan)
        return frame.iloc[:, 0], list(body.columns), values, np.arange(2, len(frame) + 2)
    names, lines = _checked_csv(path, what)
    size = max(path.stat().st_size, 1)
    rows_per_chunk = max(256, int(_READ_BYTES / max(size / max(len(lines), 1), 1.0)))
    values = np.empty((len(lines), len(names) - 1), order="F")  # column-major: pandas' own layout
    first: list[pd.Series] = []
    dtype = {c: ("float64" if j else "str") for j, c in enumerate(names)}
    offset = 0
    try:
        reader = pd.read_csv(path, sep=",", encoding="utf-8-sig", skip_blank_lines=True, header=0, names=names,
                             dtype=dtype, na_values=NA_VALUES, keep_default_na=False, chunksize=rows_per_chunk)
        with reader:
            for chunk in reader:
                n = len(chunk)
                if offset + n > len(values):
                    raise InputError("rows could not be counted (a line break inside a quoted cell?).",
                                     file=str(path), fix="remove line breaks from the cells.")
                for j, col in enumerate(names[1:]):  # straight into the array, no 2-D temporary
                    values[offset:offset + n, j] = chunk[col].to_numpy(dtype=float, na_value=np.nan)
                first.append(chunk.iloc[:, 0])
                offset += n
    except ValueError as exc:
        if "convert" in str(exc):
            raise locate_non_number(path, names[1:], lines) from None
        raise _csv_errors(exc, path, what) from None
    except (pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise _csv_errors(exc, path, what) from None
    dates = pd.concat(first, ignore_index=True) if first else pd.Series([], dtype=str, name=names[0])
    return dates, names[1:], values[:offset], lines[:offset]
