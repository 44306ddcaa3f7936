"""Errors the command line turns into exit codes.

``InputError`` (exit 2): bad input or configuration; the message names the file,
the row or date, the column and what to do.  ``UnreachableError`` (exit 3): hedge
targets the instruments or limits cannot reach.  Anything else exits 1.

Text taken from a user's file (a cell, a column name) is echoed through :func:`shown`,
which cuts it to ``SHOWN_CHARS`` characters with an ellipsis and escapes control
characters, so a 50 MB header cannot flood the terminal.
"""

from __future__ import annotations

SHOWN_CHARS = 60


def shown(value: object, limit: int = SHOWN_CHARS) -> str:
    """``value`` as text for a message: control characters escaped, at most ``limit`` characters."""
    text = str(value)
    if len(text) > 4 * limit:
        text = text[:4 * limit]
    text = "".join(ch if ch.isprintable() else ascii(ch)[1:-1] for ch in text)
    return text if len(text) <= limit else text[:limit - 1] + "…"


def quoted(value: object, limit: int = SHOWN_CHARS) -> str:
    """``'value'`` cut to a readable length (see :func:`shown`)."""
    return f"'{shown(value, limit)}'"


class HedgekitError(Exception):
    """Base class of hedgekit's own errors."""

    exit_code = 1


class InputError(HedgekitError):
    """Bad input file or configuration: exit code 2.

    ``file``, ``row`` (a number as counted in the file, header = row 1, or a text such as
    ``"date 1994-02"``), ``column`` and ``fix`` are kept as attributes and joined into one line.
    """

    exit_code = 2

    def __init__(self, message: str, *, file: str | None = None, row: int | str | None = None,
                 column: str | None = None, fix: str | None = None) -> None:
        column = None if column is None else shown(column)
        self.file, self.row, self.column, self.fix = file, row, column, fix
        parts = []
        where = []
        if file:
            where.append(str(file))
        if row is not None:
            where.append(f"row {row}" if isinstance(row, int) else shown(row))
        if column is not None:
            where.append(f"column '{column}'")
        if where:
            parts.append(", ".join(where) + ": ")
        parts.append(message)
        if fix:
            parts.append(f" Fix: {fix}")
        super().__init__("".join(parts))


class UnreachableError(HedgekitError):
    """Hedge targets cannot be reached with the instruments and limits: exit code 3."""

    exit_code = 3

    def __init__(self, message: str, factors: list[str] | None = None, result: object = None) -> None:
        super().__init__(message)
        self.factors = list(factors or [])
        self.result = result
