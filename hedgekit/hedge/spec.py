"""What the overlay must achieve and within which limits: :class:`HedgeSpec`, and the checks
that tie a spec to the factors, instruments and sheet it is used with."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError

SHEET_COLUMNS = ("multiplier", "price", "cost_bps", "min_weight", "max_weight")


def _frozen_map(value: Mapping | None) -> Mapping | None:
    return None if value is None else MappingProxyType(dict(value))


@dataclass(frozen=True)
class HedgeSpec:
    """What the overlay must achieve and within which limits.

    ``min_weight``/``max_weight``/``cost_bps`` of ``None`` mean "take them from the
    instrument sheet"; a mapping overrides the sheet (a missing or NaN entry is unbounded
    or costless).  ``tolerance`` is one number or a map by neutralised factor.

    Whole contracts (see :mod:`hedgekit.hedge.ticket`):

    - ``rounding_slack`` (beta units, default 0, config key ``[hedge] rounding_slack``):
      extra room beyond each tolerance band (neutralised factors) and keep band that the
      whole-contract overlay may use without a warning; the integer program measures its
      miss beyond ``tolerance + rounding_slack``.  With 0, every whole-contract exposure
      outside its tolerance is warned.
    - ``rounding_stage_slack`` (beta units, default 1e-9): the second stage of the
      whole-contract program (least tracking distance and cost) keeps the total miss within
      this of the first stage's minimum.
    """

    neutralise: tuple[str, ...] = ()
    targets: Mapping[str, float] = field(default_factory=lambda: MappingProxyType({}))
    tolerance: float | Mapping[str, float] = 0.0
    keep: Mapping[str, tuple[float, float]] = field(default_factory=lambda: MappingProxyType({}))
    max_gross: float | None = None
    min_weight: Mapping[str, float] | None = None
    max_weight: Mapping[str, float] | None = None
    cost_bps: Mapping[str, float] | None = None
    exclude: tuple[str, ...] = ()
    objective: str = "tracking"
    premium_weight: float = 0.0
    robust: bool = False
    confidence: float = 0.95
    rounding_slack: float = 0.02
    rounding_stage_slack: float = 1e-9

    def __post_init__(self) -> None:
        set_ = object.__setattr__
        set_(self, "neutralise", tuple(self.neutralise))
        set_(self, "exclude", tuple(self.exclude))
        set_(self, "targets", MappingProxyType({k: float(v) for k, v in self.targets.items()}))
        set_(self, "keep", MappingProxyType({k: (float(v[0]), float(v[1]))
                                             for k, v in self.keep.items()}))
        if isinstance(self.tolerance, Mapping):
            set_(self, "tolerance", MappingProxyType({k: float(v)
                                                      for k, v in self.tolerance.items()}))
        for name in ("min_weight", "max_weight", "cost_bps"):
            set_(self, name, _frozen_map(getattr(self, name)))
        if self.objective not in ("tracking", "total"):
            raise InputError(f"[hedge] objective '{self.objective}' is not known; valid: "
                             "tracking, total.", fix="set objective = \"tracking\" or \"total\".")
        if not 0.5 <= self.confidence < 1.0:
            raise InputError(f"[intervals] confidence {self.confidence} is not inside [0.5, 1).",
                             fix="use e.g. confidence = 0.95.")
        if self.premium_weight < 0:
            raise InputError(f"[hedge] premium_weight {self.premium_weight} is negative.",
                             fix="use premium_weight = 0 or a positive number.")
        if self.max_gross is not None and not self.max_gross >= 0:
            raise InputError(f"[hedge] max_gross {self.max_gross} is negative or not a number.",
                             fix="give the gross cap as a fraction of NAV, e.g. max_gross = 1.5.")
        tols = self.tolerance.values() if isinstance(self.tolerance, Mapping) else [self.tolerance]
        if not self.rounding_slack >= 0:
            raise InputError(f"[hedge] rounding_slack {self.rounding_slack} is negative.",
                             fix="use rounding_slack = 0 (beta units) or a small positive number.")
        if not self.rounding_stage_slack >= 0:
            raise InputError(f"rounding_stage_slack {self.rounding_stage_slack} is negative.",
                             fix="use the default 1e-9 (beta units).")
        if any(not v >= 0 for v in tols):
            raise InputError("[hedge] tolerance must be zero or positive.",
                             fix="give a tolerance in beta units, e.g. tolerance = 0.05.")
        for name, (lo, hi) in self.keep.items():
            if not lo <= hi:
                raise InputError(f"[hedge] keep band for '{name}' has lower {lo:g} above "
                                 f"upper {hi:g}.", fix="write the band as [lower, upper].")
        both = set(self.neutralise) & set(self.keep)
        if both:
            raise InputError(f"[hedge] {quoted(sorted(both))} both in neutralise and in keep.",
                             fix="list each factor in one of neutralise or keep.")

    @classmethod
    def from_sheet(cls, sheet: pd.DataFrame, **kw: Any) -> HedgeSpec:
        """Spec with min/max weights and costs read from the instrument sheet (NaN dropped)."""
        sheet = sheet_frame(sheet)
        filled: dict[str, Any] = {}
        for col in ("min_weight", "max_weight", "cost_bps"):
            if col in sheet.columns and col not in kw:
                vals = pd.to_numeric(sheet[col], errors="coerce")
                filled[col] = {str(k): float(v) for k, v in vals.items() if np.isfinite(v)}
        return cls(**filled, **kw)

    def tolerance_for(self, factor: str) -> float:
        if isinstance(self.tolerance, Mapping):
            return float(self.tolerance.get(factor, 0.0))
        return float(self.tolerance)

    def target_for(self, factor: str) -> float:
        return float(self.targets.get(factor, 0.0))


# --------------------------------------------------------------------------- label helpers

def quoted(names: list[str] | tuple[str, ...]) -> str:
    """'a', 'b' and 'c' for a message."""
    q = [f"'{n}'" for n in names]
    return q[0] if len(q) == 1 else ", ".join(q[:-1]) + " and " + q[-1]


def names_error(where: str, kind: str, bad: list[str], valid: list[str]) -> InputError:
    """"[hedge] neutralise names unknown factor 'credit'; valid: mkt, dy, term, def, rf." """
    plural = "s" if len(bad) > 1 else ""
    listed = ", ".join(map(str, valid)) if valid else "none"
    return InputError(f"{where} names unknown {kind}{plural} {quoted(bad)}; valid: {listed}.",
                      fix=f"spell each {kind} as one of the valid names.")


def labels(obj: pd.Series | pd.DataFrame) -> pd.Series | pd.DataFrame:
    """The object with string labels (a relabelled copy only when some label is not str)."""
    if not all(isinstance(i, str) for i in obj.index):
        obj = obj.set_axis([str(i) for i in obj.index], axis=0)
    if isinstance(obj, pd.DataFrame) and not all(isinstance(c, str) for c in obj.columns):
        obj = obj.set_axis([str(c) for c in obj.columns], axis=1)
    return obj


def take(obj: pd.Series | pd.DataFrame, rows: list[str], cols: list[str] | None = None
         ) -> pd.Series | pd.DataFrame:
    """obj on exactly these row (and column) labels; no reindexing when already in order."""
    obj = labels(obj)
    if list(obj.index) != rows:
        obj = obj.reindex(rows)
    if cols is not None and list(obj.columns) != cols:
        obj = obj.reindex(columns=cols)
    return obj


def sheet_frame(sheet: pd.DataFrame) -> pd.DataFrame:
    if "instrument" in sheet.columns:
        sheet = sheet.set_index("instrument")
    return labels(sheet)


def limits(active: list[str], spec: HedgeSpec, sheet: pd.DataFrame
           ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per instrument: lower, upper bound (inf = none) and cost as a fraction of notional."""
    def column(name: str, override: Mapping[str, float] | None, default: float) -> np.ndarray:
        if override is not None:
            out = np.array([float(override.get(a, np.nan)) for a in active], dtype=float)
        elif name in sheet.columns:
            out = pd.to_numeric(take(sheet[name], active), errors="coerce").to_numpy(dtype=float)
        else:
            out = np.full(len(active), np.nan)
        return np.where(np.isfinite(out), out, default)

    lo = column("min_weight", spec.min_weight, -np.inf)
    hi = column("max_weight", spec.max_weight, np.inf)
    cost = column("cost_bps", spec.cost_bps, 0.0) / 1e4
    bad = [a for a, lo_j, hi_j in zip(active, lo, hi, strict=True) if lo_j > hi_j]
    if bad:
        raise InputError(f"min_weight is above max_weight for {quoted(bad)}.",
                         file="instrument sheet", column="min_weight",
                         fix="make min_weight <= max_weight.")
    if np.any(cost < 0):
        bad = [a for a, c in zip(active, cost, strict=True) if c < 0]
        raise InputError(f"cost_bps is negative for {quoted(bad)}.", file="instrument sheet",
                         column="cost_bps",
                         fix="costs are one-way, in basis points of notional, >= 0.")
    return lo, hi, cost


def check_names(spec: HedgeSpec, factors: list[str], instruments: list[str]) -> None:
    """Every name in the spec must be a factor / instrument of the inputs (config key named)."""
    for key, names in (("neutralise", spec.neutralise), ("keep", list(spec.keep)),
                       ("targets", list(spec.targets))):
        bad = [n for n in names if n not in factors]
        if bad:
            raise names_error(f"[hedge] {key}", "factor", bad, factors)
    off = [n for n in spec.targets if n not in spec.neutralise]
    if off:
        raise InputError(f"[hedge] targets names {quoted(off)}, not in neutralise; valid: "
                         f"{', '.join(spec.neutralise) or 'none'}.",
                         fix="add them to neutralise or drop the targets.")
    if isinstance(spec.tolerance, Mapping):
        bad = [n for n in spec.tolerance if n not in spec.neutralise]
        if bad:
            raise names_error("[hedge] tolerance", "factor", bad, list(spec.neutralise))
    bad = [n for n in spec.exclude if n not in instruments]
    if bad:
        raise names_error("[hedge] exclude", "instrument", bad, instruments)
    for name, mapping in (("min_weight", spec.min_weight), ("max_weight", spec.max_weight),
                          ("cost_bps", spec.cost_bps)):
        bad = [n for n in (mapping or {}) if n not in instruments]
        if bad:
            raise names_error(f"the {name} limits", "instrument", bad, instruments)
