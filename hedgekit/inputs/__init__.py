"""Input layer: every file hedgekit reads goes through here.

Validates at the boundary and hands the stages plain pandas objects on a ``PeriodIndex``
named ``date``. Every problem raises :class:`~hedgekit.errors.InputError` naming the file,
the row (as numbered in the file, header = row 1) or date, the column, and the fix.
Files are only read, never modified.

Modules, in reading order: :mod:`.tables` (bytes to a table: file type, header, field
counts, non-numbers), :mod:`.dates`, :mod:`.units`, :mod:`.checks` (plausibility by kind
of series), :mod:`.aggregate` (monthly files into quarterly runs), :mod:`.series` (one
time-series file), :mod:`.readers` (each input file), :mod:`.coverage` (spans and gaps),
:mod:`.dataset` (:class:`Dataset`, :func:`load_dataset`).
"""

from __future__ import annotations

from .dataset import Dataset, check_common_months, load_dataset
from .dates import FREQ, PERIODS_PER_YEAR
from .readers import (
           SHEET_COLUMNS,
           read_holdings,
           read_positions,
           read_returns,
           read_sheet,
           read_states,
)
from .series import read_series
from .tables import file_hash

__all__ = ["FREQ", "PERIODS_PER_YEAR", "SHEET_COLUMNS", "Dataset", "check_common_months", "file_hash",
           "load_dataset", "read_holdings", "read_positions", "read_returns", "read_series", "read_sheet",
           "read_states"]
