"""Errors the command line turns into exit codes.

``InputError`` (exit 2): bad input or configuration; the message names the file,
the row or date, the column and what to do.  ``UnreachableError`` (exit 3): hedge
targets the instruments or limits cannot reach.  Anything else exits 1.
"""

from __future__ import annotations


class HedgekitError(Exception):
    """Base class of hedgekit's own errors."""

    exit_code = 1


class InputError(HedgekitError):
    """Bad input file or configuration: exit code 2.

    Build the message with :func:`input_error` so every one names where and what to do.
    """

    exit_code = 2

    def __init__(self, message: str, *, file: str | None = None, row: int | str | None = None,
                 column: str | None = None, fix: str | None = None) -> None:
        self.file, self.row, self.column, self.fix = file, row, column, fix
        parts = []
        where = []
        if file:
            where.append(str(file))
        if row is not None:
            where.append(f"row {row}" if isinstance(row, int) else str(row))
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


class StageNotBuilt(HedgekitError):
    """A command whose stage is not built yet: exit code 1."""

    exit_code = 1
