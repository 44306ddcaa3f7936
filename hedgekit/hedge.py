"""Overlay hedge: neutralise chosen exposures at minimum tracking cost, in whole contracts.

The program (methods.md section 4), over overlay weights h (fractions of NAV, + = long)::

    minimise   h' Sigma_H h + sum_j c_j |h_j - h0_j| + w * premium_given_up(h)
    subject to |(b_p + B_H h)_f - t_f| <= tol_f     f in neutralise
               lo_g <= (b_p + B_H h)_g <= hi_g       g in keep
               lo_j <= h_j <= hi_j,  sum_j |h_j| <= gross cap.

Sigma_H is the annualised covariance of instrument excess returns, so h' Sigma_H h is the
tracking variance of hedged against unhedged book.  ``objective="total"`` minimises
Var(r_p + h' r_H) = s_p^2 + 2 c_pH' h + h' Sigma_H h instead.  With equality targets and
no bounds the solution is the KKT one, h* = Sigma^-1 C'(C Sigma^-1 C')^-1 d (Boyd and
Vandenberghe 2004, *Convex Optimization*, section 10.1).

The robust option asks every neutralised exposure to stay within tolerance across the
per-factor confidence interval of the estimated betas, a second-order cone constraint
|b_p,f + B_f h - t_f| + z sqrt(se_p,f^2 + sum_j se_jf^2 h_j^2) <= tol_f (the robust
linear-programming form of Ben-Tal and Nemirovski 1999, *Operations Research Letters*,
"Robust solutions of uncertain linear programs"; errors taken as independent).

Reuse: :class:`OverlayProblem` is built once per *structure* (active instruments, which
constraints exist) with cvxpy ``Parameter`` s for the Cholesky-type factor of Sigma, the
betas, targets, tolerances, bounds, cap and costs (DPP), so a re-solve with new numbers
does not rebuild or re-canonicalise.  ``design_overlay`` takes ``problem=`` (build one
with :meth:`OverlayProblem.for_inputs`) or else uses a small module cache keyed on the
structure; either way a walk-forward loop re-solves the same compiled program.
"""

from __future__ import annotations

import math
import warnings as _warnings
from collections import OrderedDict
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Any

import cvxpy as cp
import numpy as np
import pandas as pd
from scipy import stats

from .errors import HedgekitError, InputError

__all__ = [
    "CAUTIONS",
    "HedgeResult",
    "HedgeSpec",
    "OverlayProblem",
    "OverlaySolveError",
    "design_overlay",
    "instrument_covariance",
]

CAUTIONS: tuple[str, ...] = (
    "Decision support, not investment advice: sizing and execution stay with the firm's "
    "licensed professionals, its model-risk governance and the rules that apply to it.",
    "Betas, covariances and prices of risk are statistical estimates from one sample; "
    "relations between state variables and returns shift across regimes.",
    "Derivative overlays bring margin and collateral calls, basis risk between the "
    "instrument and the exposure it offsets, liquidity and roll risk, and counterparty risk.",
    "Whole-contract rounding leaves a residual exposure; check it before trading.",
)

SHEET_COLUMNS = ("multiplier", "price", "cost_bps", "min_weight", "max_weight")
SOLVERS = ("CLARABEL", "OSQP", "SCS")
_SOLVER_OPTIONS: dict[str, dict[str, Any]] = {
    "CLARABEL": {"tol_gap_abs": 1e-10, "tol_gap_rel": 1e-10, "tol_feas": 1e-10},
    "OSQP": {"eps_abs": 1e-9, "eps_rel": 1e-9, "polish": True, "max_iter": 200_000},
    "SCS": {"eps_abs": 1e-8, "eps_rel": 1e-8, "max_iters": 200_000},
}
_QP_ONLY = {"OSQP"}              # cannot take second-order cones (robust option)
_ACTIVE_TOL = 1e-6              # a limit "binds" when the solution sits this close to it
_REACH_TOL = 1e-7               # slack below this (beta units) counts as reached


_INSTALLED: list[tuple[str, ...]] = []


def _installed_solvers() -> tuple[str, ...]:
    """SOLVERS that are installed, looked up once (cvxpy's check imports every solver)."""
    if not _INSTALLED:
        have = set(cp.installed_solvers())
        if "OSQP" in have:
            import osqp  # option renamed in OSQP 1.0

            if int(str(osqp.__version__).split(".")[0]) >= 1:
                _SOLVER_OPTIONS["OSQP"]["polishing"] = _SOLVER_OPTIONS["OSQP"].pop("polish")
        _INSTALLED.append(tuple(name for name in SOLVERS if name in have))
    return _INSTALLED[0]


class OverlaySolveError(HedgekitError):
    """No installed solver returned an optimal solution (exit code 1)."""

    exit_code = 1


# --------------------------------------------------------------------------- covariance

def instrument_covariance(returns: pd.DataFrame, *, periods_per_year: int = 12,
                          method: str = "sample") -> pd.DataFrame:
    """Annualised covariance of instrument excess returns over the rows all instruments have.

    ``"sample"``: S = X_c'X_c / (T - 1) x periods_per_year.  ``"ledoit-wolf"``: shrinkage to
    a scaled identity, S* = (b^2/d^2) m I + (a^2/d^2) S_T with S_T the divisor-T covariance,
    m = tr(S_T)/p, d^2 = ||S_T - m I||^2, b^2 = min(d^2, T^-2 sum_t ||x_t x_t' - S_T||^2),
    a^2 = d^2 - b^2, ||A||^2 = tr(AA')/p (Ledoit and Wolf 2004, *Journal of Multivariate
    Analysis*, "A well-conditioned estimator for large-dimensional covariance matrices").
    Rows with any missing instrument are dropped (listwise), which keeps the matrix PSD.
    """
    if not isinstance(returns, pd.DataFrame) or returns.shape[1] == 0:
        raise InputError("instrument returns must be a non-empty DataFrame.",
                         fix="pass one column per instrument.")
    if method not in ("sample", "ledoit-wolf"):
        raise InputError(f"[hedge] covariance method '{method}' is not known; valid: sample, "
                         "ledoit-wolf.", fix="set covariance = \"sample\" or \"ledoit-wolf\".")
    if periods_per_year <= 0:
        raise InputError("periods_per_year must be positive.", fix="use 12 or 4.")
    values = returns.apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)
    x = values[np.isfinite(values).all(axis=1)]
    t, p = x.shape
    if t < 2:
        raise InputError(f"only {t} month(s) where every instrument has a return.",
                         fix="supply a longer common sample of instrument returns.")
    xc = x - x.mean(axis=0)
    if method == "sample":
        cov = xc.T @ xc / (t - 1)
    else:
        s = xc.T @ xc / t
        m = np.trace(s) / p
        d2 = np.sum((s - m * np.eye(p)) ** 2) / p
        # sum_t ||x_t x_t' - S||^2 = sum_t ||x_t||^4 - T ||S||^2  (expanding the square)
        b2_bar = (np.sum(np.sum(xc ** 2, axis=1) ** 2) - t * np.sum(s ** 2)) / (t ** 2 * p)
        b2 = min(b2_bar, d2)
        shrink = b2 / d2 if d2 > 0 else 1.0
        cov = shrink * m * np.eye(p) + (1.0 - shrink) * s
    cols = list(returns.columns)
    return pd.DataFrame(cov * periods_per_year, index=pd.Index(cols, name="instrument"),
                        columns=pd.Index(cols, name="instrument"))


# --------------------------------------------------------------------------- specification

def _frozen_map(value: Mapping | None) -> Mapping | None:
    return None if value is None else MappingProxyType(dict(value))


@dataclass(frozen=True)
class HedgeSpec:
    """What the overlay must achieve and within which limits.

    ``min_weight``/``max_weight``/``cost_bps`` of ``None`` mean "take them from the
    instrument sheet"; a mapping overrides the sheet (a missing or NaN entry is unbounded
    or costless).  ``tolerance`` is one number or a map by neutralised factor.
    ``rounding_slack`` (beta units): the whole-contract overlay is reported as breaking a
    neutralised factor's tolerance or a kept factor's band only when it lands more than this
    beyond it (a materiality floor, common practice; with tolerance 0 any rounding misses).
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
        if not 0.0 < self.confidence < 1.0:
            raise InputError(f"[hedge] confidence {self.confidence} is not inside (0, 1).",
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
                             fix="use e.g. rounding_slack = 0.02 (beta units).")
        if any(not v >= 0 for v in tols):
            raise InputError("[hedge] tolerance must be zero or positive.",
                             fix="give a tolerance in beta units, e.g. tolerance = 0.05.")
        for name, (lo, hi) in self.keep.items():
            if not lo <= hi:
                raise InputError(f"[hedge] keep band for '{name}' has lower {lo:g} above "
                                 f"upper {hi:g}.", fix="write the band as [lower, upper].")
        both = set(self.neutralise) & set(self.keep)
        if both:
            raise InputError(f"[hedge] {_quoted(sorted(both))} both in neutralise and in keep.",
                             fix="list each factor in one of neutralise or keep.")

    @classmethod
    def from_sheet(cls, sheet: pd.DataFrame, **kw: Any) -> HedgeSpec:
        """Spec with min/max weights and costs read from the instrument sheet (NaN dropped)."""
        sheet = _sheet_frame(sheet)
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


def _sheet_frame(sheet: pd.DataFrame) -> pd.DataFrame:
    if "instrument" in sheet.columns:
        sheet = sheet.set_index("instrument")
    return _labels(sheet)


# --------------------------------------------------------------------------- the program

@dataclass(frozen=True)
class _Structure:
    """Everything that fixes the shape of the cvxpy program (the cache key)."""

    instruments: tuple[str, ...]
    neutral: tuple[str, ...]          # all neutralised factors, in spec order
    equality: tuple[bool, ...]        # per neutralised factor: tolerance exactly zero
    keep: tuple[str, ...]
    keep_lower: tuple[bool, ...]      # band side finite?
    keep_upper: tuple[bool, ...]
    lower: tuple[int, ...]            # instrument positions with a finite lower bound
    upper: tuple[int, ...]
    has_cap: bool
    robust: bool


class OverlayProblem:
    """The overlay program compiled once with cvxpy Parameters (DPP); re-solve via values.

    Build with :meth:`for_inputs` (or let ``design_overlay`` use its cache) and pass it as
    ``problem=`` on every re-solve: only Parameter values change, so cvxpy reuses the
    canonicalised program.  ``n_solves`` counts solves; ``structure`` is the cache key.
    The "closest reachable" pair of programs (remaining exposure first, tracking variance
    second) is compiled on first use and kept as well.
    """

    def __init__(self, structure: _Structure) -> None:
        self.structure = s = structure
        n_h, n_n, n_k = len(s.instruments), len(s.neutral), len(s.keep)
        self.n_solves = 0
        self.h = cp.Variable(n_h, name="overlay")
        self.params = {
            "F": cp.Parameter((n_h, n_h), name="risk_factor"),
            "lin": cp.Parameter(n_h, name="linear"),
            "cost": cp.Parameter(n_h, nonneg=True, name="cost"),
            "h0": cp.Parameter(n_h, name="current"),
            "Bn": cp.Parameter((max(n_n, 1), n_h), name="neutral_betas"),
            "off_n": cp.Parameter(max(n_n, 1), name="neutral_offset"),
            "tol": cp.Parameter(max(n_n, 1), nonneg=True, name="tolerance"),
            "Bk": cp.Parameter((max(n_k, 1), n_h), name="keep_betas"),
            "bk": cp.Parameter(max(n_k, 1), name="keep_book"),
            "lo_k": cp.Parameter(max(n_k, 1), name="keep_lower"),
            "hi_k": cp.Parameter(max(n_k, 1), name="keep_upper"),
            "lo": cp.Parameter(max(len(s.lower), 1), name="min_weight"),
            "hi": cp.Parameter(max(len(s.upper), 1), name="max_weight"),
            "cap": cp.Parameter(nonneg=True, name="max_gross"),
            "se_p": cp.Parameter(max(n_n, 1), nonneg=True, name="book_se_z"),
            "se_B": cp.Parameter((max(n_n, 1), n_h), nonneg=True, name="instrument_se_z"),
            "smax": cp.Parameter(nonneg=True, name="slack_total"),
        }
        self._main = self._build(self.h, slack=None)
        self._closest: tuple[cp.Problem, cp.Problem, cp.Variable, cp.Variable] | None = None
        self._closest_slack: tuple[cp.Variable, cp.Variable] | None = None

    # -- construction
    @classmethod
    def for_inputs(cls, instruments: pd.Index | list[str], spec: HedgeSpec,
                   sheet: pd.DataFrame) -> OverlayProblem:
        """Compile the program for these instruments (index order), spec and sheet limits."""
        sheet = _sheet_frame(sheet)
        active = [str(i) for i in instruments if str(i) not in set(spec.exclude)]
        lo, hi, _ = _limits(active, spec, sheet)
        return cls(_structure(active, spec, lo, hi))

    def _objective(self, h: cp.Variable, trade: cp.Variable) -> cp.Expression:
        p = self.params
        return (cp.sum_squares(p["F"] @ h) + p["lin"] @ h + p["cost"] @ cp.abs(trade))

    def _constraints(self, h: cp.Variable, slack: tuple[cp.Variable, cp.Variable] | None
                     ) -> list[cp.Constraint]:
        s, p = self.structure, self.params
        cons: list[cp.Constraint] = []
        if s.neutral:
            e_n = p["off_n"] + p["Bn"] @ h
            sn = slack[0] if slack is not None else None
            if s.robust:
                for i in range(len(s.neutral)):
                    spread = cp.norm(cp.hstack([p["se_p"][i:i + 1],
                                                cp.multiply(p["se_B"][i], h)]), 2)
                    rhs = p["tol"][i] + (sn[i] if sn is not None else 0)
                    cons.append(cp.abs(e_n[i]) + spread <= rhs)
            elif sn is not None:
                cons.append(cp.abs(e_n) <= p["tol"] + sn)
            else:
                eq = [i for i, flag in enumerate(s.equality) if flag]
                band = [i for i, flag in enumerate(s.equality) if not flag]
                if eq:
                    cons.append(e_n[eq] == 0)
                if band:
                    cons.append(cp.abs(e_n[band]) <= p["tol"][band])
        if s.keep:
            e_k = p["bk"] + p["Bk"] @ h
            lo_i = [i for i, f in enumerate(s.keep_lower) if f]
            hi_i = [i for i, f in enumerate(s.keep_upper) if f]
            if lo_i:
                widen = slack[1][lo_i] if slack is not None else 0
                cons.append(e_k[lo_i] >= p["lo_k"][lo_i] - widen)
            if hi_i:
                widen = slack[1][hi_i] if slack is not None else 0
                cons.append(e_k[hi_i] <= p["hi_k"][hi_i] + widen)
        if s.lower:
            cons.append(h[list(s.lower)] >= p["lo"])
        if s.upper:
            cons.append(h[list(s.upper)] <= p["hi"])
        if s.has_cap:
            cons.append(cp.norm1(h) <= p["cap"])
        return cons

    def _build(self, h: cp.Variable, slack: tuple[cp.Variable, cp.Variable] | None) -> cp.Problem:
        trade = cp.Variable(h.shape[0], name="trade")
        cons = self._constraints(h, slack) + [trade == h - self.params["h0"]]
        if slack is not None:
            cons += [slack[0] >= 0, slack[1] >= 0,
                     cp.sum(slack[0]) + cp.sum(slack[1]) <= self.params["smax"]]
        return cp.Problem(cp.Minimize(self._objective(h, trade)), cons)

    def _closest_programs(self) -> tuple[cp.Problem, cp.Problem, cp.Variable, cp.Variable]:
        if self._closest is None:
            n_n, n_k = max(len(self.structure.neutral), 1), max(len(self.structure.keep), 1)
            h1 = cp.Variable(self.h.shape[0], name="overlay_closest")
            sl1 = (cp.Variable(n_n, name="neutral_excess"), cp.Variable(n_k, name="keep_excess"))
            first = cp.Problem(cp.Minimize(cp.sum(sl1[0]) + cp.sum(sl1[1])),
                               self._constraints(h1, sl1) + [sl1[0] >= 0, sl1[1] >= 0])
            h2 = cp.Variable(self.h.shape[0], name="overlay_closest_min_risk")
            sl2 = (cp.Variable(n_n), cp.Variable(n_k))
            second = self._build(h2, sl2)
            self._closest = (first, second, h1, h2)
            self._closest_slack = sl1
        return self._closest

    # -- solving
    def set_values(self, values: Mapping[str, np.ndarray | float]) -> None:
        for name, value in values.items():
            param = self.params[name]
            if param.value is not None and np.array_equal(param.value, value):
                continue                # unchanged: skip cvxpy's re-validation
            try:
                param.value = value
            except ValueError as exc:
                raise ValueError(f"{name}: {exc}") from exc

    def _run(self, problem: cp.Problem) -> tuple[str, str]:
        """Solve with CLARABEL, then the other solvers; return (outcome, solver name)."""
        last = ""
        for solver in _installed_solvers():
            if self.structure.robust and solver in _QP_ONLY:
                continue
            last = solver
            # cvxpy warns "Solution may be inaccurate..." on stderr: caught here, and an
            # inaccurate status counts as a failed attempt (the next solver is tried).
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                try:
                    problem.solve(solver=solver, **_SOLVER_OPTIONS[solver])
                except (cp.error.SolverError, ValueError, ArithmeticError):
                    continue
            self.n_solves += 1
            if problem.status == cp.OPTIMAL:
                return "optimal", solver
            if problem.status == cp.INFEASIBLE:
                return "infeasible", solver
        return "failed", last

    def solve_main(self) -> tuple[str, str]:
        return self._run(self._main)

    def solve_closest(self) -> tuple[str, str, np.ndarray, np.ndarray, np.ndarray | None,
                                     float | None]:
        """Lexicographic closest overlay, two solves: least total excess over the targets and
        bands first, then least objective with the excess held at that minimum.

        Returns (outcome, solver, neutral excess, keep excess, h, objective value or None
        when the second stage did not solve and h is the first stage's).
        """
        first, second, h1, h2 = self._closest_programs()
        outcome, solver = self._run(first)
        if outcome != "optimal":
            return outcome, solver, np.array([]), np.array([]), None, None
        s_n = np.maximum(np.asarray(self._closest_slack[0].value, dtype=float), 0.0)
        s_k = np.maximum(np.asarray(self._closest_slack[1].value, dtype=float), 0.0)
        h, value = np.asarray(h1.value, dtype=float), None
        # a hair of room above the minimum so the second program keeps a strict interior
        self.params["smax"].value = float(s_n.sum() + s_k.sum()) * (1 + 1e-8) + 1e-10
        outcome2, solver2 = self._run(second)
        if outcome2 == "optimal":
            h, solver, value = np.asarray(h2.value, dtype=float), solver2, float(second.value)
        return outcome, solver, s_n, s_k, h, value

    @property
    def main_value(self) -> float:
        return float(self._main.value)

    @property
    def main_solution(self) -> np.ndarray:
        return np.asarray(self.h.value, dtype=float)



def _structure(active: list[str], spec: HedgeSpec, lo: np.ndarray, hi: np.ndarray) -> _Structure:
    return _Structure(
        instruments=tuple(active),
        neutral=tuple(spec.neutralise),
        equality=tuple(spec.tolerance_for(f) == 0.0 and not spec.robust for f in spec.neutralise),
        keep=tuple(spec.keep),
        keep_lower=tuple(bool(np.isfinite(spec.keep[f][0])) for f in spec.keep),
        keep_upper=tuple(bool(np.isfinite(spec.keep[f][1])) for f in spec.keep),
        lower=tuple(int(i) for i in np.flatnonzero(np.isfinite(lo))),
        upper=tuple(int(i) for i in np.flatnonzero(np.isfinite(hi))),
        has_cap=spec.max_gross is not None,
        robust=spec.robust,
    )


def _risk_factor(sigma: np.ndarray) -> np.ndarray:
    """F with F'F = Sigma: Cholesky (L') when positive definite, else the eigen square root.

    Raises InputError when Sigma has an eigenvalue below -1e-10 x its largest.
    """
    sym = 0.5 * (sigma + sigma.T)
    if sym.size == 0:
        return sym
    try:
        return np.linalg.cholesky(sym).T
    except np.linalg.LinAlgError:
        w, v = np.linalg.eigh(sym)
    if w.min() < -1e-10 * max(w.max(), 1e-300):
        raise InputError("the instrument covariance is not positive semi-definite.",
                         fix="use a listwise sample or [hedge] covariance = \"ledoit-wolf\".")
    return np.sqrt(np.clip(w, 0.0, None))[:, None] * v.T


_CACHE: OrderedDict[_Structure, OverlayProblem] = OrderedDict()
_CACHE_SIZE = 32


def _cached_problem(structure: _Structure) -> OverlayProblem:
    problem = _CACHE.get(structure)
    if problem is None:
        problem = OverlayProblem(structure)
        _CACHE[structure] = problem
        while len(_CACHE) > _CACHE_SIZE:
            _CACHE.popitem(last=False)
    else:
        _CACHE.move_to_end(structure)
    return problem


# --------------------------------------------------------------------------- result

def _plain(value: float) -> float | None:
    value = float(value)
    return value if math.isfinite(value) else None


def _series_dict(series: pd.Series | None) -> dict[str, float | None] | None:
    if series is None:
        return None
    return {str(k): _plain(v) for k, v in series.items()}


@dataclass(frozen=True, eq=False)
class HedgeResult:
    """The overlay and its ticket.  Weights are fractions of NAV; money in NAV currency.

    ``tracking_error`` = sqrt(h' Sigma_H h) annualised; ``premium_given_up`` =
    -(B_H h)' lambda x periods_per_year, the expected excess return the overlay removes.
    ``robust_gross_ratio`` = gross notional of the robust overlay / the nominal one.

    Two trades and two costs: ``trades``/``cost_unrounded`` are the optimiser's continuous
    trade h - h0 and its cost sum_j c_j |h_j - h0_j| (the objective's cost term);
    ``trades_rounded``/``cost``/``cost_currency`` (and the ticket's ``cost`` column) are the
    whole-contract trade h~ - h0 actually placed and its cost.  ``rounding_breaches``: what
    the whole-contract overlay breaks that h kept (tolerance, band, cap, bounds, or every
    leg rounding to zero contracts); each is also in ``warnings`` and ``message``.
    """

    status: str
    positions: pd.Series
    notional: pd.Series
    contracts: pd.Series
    positions_rounded: pd.Series
    trades: pd.Series
    cost: float
    cost_currency: float
    exposure_before: pd.Series
    exposure_after: pd.Series
    exposure_after_rounded: pd.Series
    exposure_before_se: pd.Series | None
    exposure_after_se: pd.Series | None
    confidence: float
    tracking_error: float
    tracking_error_rounded: float
    premium_given_up: float | None
    premium_given_up_rounded: float | None
    gross: float
    nav: float
    unreachable: tuple[str, ...]
    remaining: pd.Series
    binding: tuple[str, ...]
    message: str
    solver: str
    objective_value: float | None
    objective: str
    total_risk_before: float | None
    total_risk_after: float | None
    robust_gross_ratio: float | None
    ticket: pd.DataFrame
    warnings: tuple[str, ...] = ()
    cautions: tuple[str, ...] = CAUTIONS
    trades_rounded: pd.Series | None = None
    cost_unrounded: float | None = None
    cost_unrounded_currency: float | None = None
    gross_rounded: float | None = None
    rounding_breaches: tuple[str, ...] = ()

    def _interval(self, centre: pd.Series, se: pd.Series | None) -> dict[str, list] | None:
        if se is None:
            return None
        z = float(stats.norm.ppf(0.5 + self.confidence / 2))
        return {str(f): [_plain(centre[f] - z * se[f]), _plain(centre[f] + z * se[f])]
                for f in centre.index}

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict with the contract keys of interface.md plus the ticket extras."""
        return {
            "status": self.status,
            "positions": _series_dict(self.positions),
            "contracts": {str(k): int(v) for k, v in self.contracts.items()},
            "notional": _series_dict(self.notional),
            "positions_rounded": _series_dict(self.positions_rounded),
            "trades": _series_dict(self.trades),
            "exposure_before": _series_dict(self.exposure_before),
            "exposure_after": _series_dict(self.exposure_after),
            "exposure_after_rounded": _series_dict(self.exposure_after_rounded),
            "exposure_before_se": _series_dict(self.exposure_before_se),
            "exposure_after_se": _series_dict(self.exposure_after_se),
            "exposure_before_interval": self._interval(self.exposure_before,
                                                       self.exposure_before_se),
            "exposure_after_interval": self._interval(self.exposure_after,
                                                      self.exposure_after_se),
            "confidence": self.confidence,
            "tracking_error": _plain(self.tracking_error),
            "tracking_error_rounded": _plain(self.tracking_error_rounded),
            "cost": _plain(self.cost),
            "cost_currency": _plain(self.cost_currency),
            "cost_unrounded": None if self.cost_unrounded is None
            else _plain(self.cost_unrounded),
            "cost_unrounded_currency": None if self.cost_unrounded_currency is None
            else _plain(self.cost_unrounded_currency),
            "trades_rounded": _series_dict(self.trades_rounded),
            "gross_rounded": None if self.gross_rounded is None else _plain(self.gross_rounded),
            "rounding_breaches": list(self.rounding_breaches),
            "premium_given_up": None if self.premium_given_up is None
            else _plain(self.premium_given_up),
            "premium_given_up_rounded": None if self.premium_given_up_rounded is None
            else _plain(self.premium_given_up_rounded),
            "gross": _plain(self.gross),
            "nav": _plain(self.nav),
            "unreachable": list(self.unreachable),
            "remaining": _series_dict(self.remaining),
            "binding": list(self.binding),
            "message": self.message,
            "solver": self.solver,
            "objective": self.objective,
            "objective_value": None if self.objective_value is None
            else _plain(self.objective_value),
            "total_risk_before": None if self.total_risk_before is None
            else _plain(self.total_risk_before),
            "total_risk_after": None if self.total_risk_after is None
            else _plain(self.total_risk_after),
            "robust_gross_ratio": None if self.robust_gross_ratio is None
            else _plain(self.robust_gross_ratio),
            "ticket": {str(i): {str(c): (int(v) if c == "contracts" else _plain(v))
                                for c, v in row.items()}
                       for i, row in self.ticket.iterrows()},
            "warnings": list(self.warnings),
            "cautions": list(self.cautions),
        }

    def to_frame(self) -> pd.DataFrame:
        """The hedge ticket: one row per instrument."""
        return self.ticket.copy()

    def exposure_table(self) -> pd.DataFrame:
        """By factor: exposure before, after, after rounding, and the confidence bounds
        (b -/+ z se, z the two-sided normal quantile of ``confidence``) when se are known."""
        table = pd.DataFrame({"before": self.exposure_before, "after": self.exposure_after,
                              "after_rounded": self.exposure_after_rounded})
        if self.exposure_before_se is not None and self.exposure_after_se is not None:
            z = float(stats.norm.ppf(0.5 + self.confidence / 2))
            table["before_se"] = self.exposure_before_se
            table["after_se"] = self.exposure_after_se
            table["before_low"] = table["before"] - z * table["before_se"]
            table["before_high"] = table["before"] + z * table["before_se"]
            table["after_low"] = table["after"] - z * table["after_se"]
            table["after_high"] = table["after"] + z * table["after_se"]
        table.index.name = "factor"
        return table


# --------------------------------------------------------------------------- validation

def _quoted(names: list[str] | tuple[str, ...]) -> str:
    """'a', 'b' and 'c' for a message."""
    q = [f"'{n}'" for n in names]
    return q[0] if len(q) == 1 else ", ".join(q[:-1]) + " and " + q[-1]


def _names_error(where: str, kind: str, bad: list[str], valid: list[str]) -> InputError:
    """"[hedge] neutralise names unknown factor 'credit'; valid: mkt, dy, term, def, rf." """
    plural = "s" if len(bad) > 1 else ""
    listed = ", ".join(map(str, valid)) if valid else "none"
    return InputError(f"{where} names unknown {kind}{plural} {_quoted(bad)}; valid: {listed}.",
                      fix=f"spell each {kind} as one of the valid names.")


def _limits(active: list[str], spec: HedgeSpec, sheet: pd.DataFrame
            ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per active instrument: lower, upper bound (inf = none) and cost as a fraction."""
    def column(name: str, override: Mapping[str, float] | None, default: float) -> np.ndarray:
        if override is not None:
            out = np.array([float(override.get(a, np.nan)) for a in active], dtype=float)
        elif name in sheet.columns:
            out = pd.to_numeric(_take(sheet[name], active), errors="coerce").to_numpy(dtype=float)
        else:
            out = np.full(len(active), np.nan)
        return np.where(np.isfinite(out), out, default)

    lo = column("min_weight", spec.min_weight, -np.inf)
    hi = column("max_weight", spec.max_weight, np.inf)
    cost = column("cost_bps", spec.cost_bps, 0.0) / 1e4
    bad = [a for a, lo_j, hi_j in zip(active, lo, hi, strict=True) if lo_j > hi_j]
    if bad:
        raise InputError(f"min_weight is above max_weight for {_quoted(bad)}.",
                         file="instrument sheet", column="min_weight",
                         fix="make min_weight <= max_weight.")
    if np.any(cost < 0):
        bad = [a for a, c in zip(active, cost, strict=True) if c < 0]
        raise InputError(f"cost_bps is negative for {_quoted(bad)}.", file="instrument sheet",
                         column="cost_bps",
                         fix="costs are one-way, in basis points of notional, >= 0.")
    return lo, hi, cost


def _check_names(spec: HedgeSpec, factors: list[str], instruments: list[str]) -> None:
    """Every name in the spec must be a factor / instrument of the inputs (config key named)."""
    for key, names in (("neutralise", spec.neutralise), ("keep", list(spec.keep)),
                       ("targets", list(spec.targets))):
        bad = [n for n in names if n not in factors]
        if bad:
            raise _names_error(f"[hedge] {key}", "factor", bad, factors)
    off = [n for n in spec.targets if n not in spec.neutralise]
    if off:
        raise InputError(f"[hedge] targets names {_quoted(off)}, not in neutralise; valid: "
                         f"{', '.join(spec.neutralise) or 'none'}.",
                         fix="add them to neutralise or drop the targets.")
    if isinstance(spec.tolerance, Mapping):
        bad = [n for n in spec.tolerance if n not in spec.neutralise]
        if bad:
            raise _names_error("[hedge] tolerance", "factor", bad, list(spec.neutralise))
    bad = [n for n in spec.exclude if n not in instruments]
    if bad:
        raise _names_error("[hedge] exclude", "instrument", bad, instruments)
    for name, mapping in (("min_weight", spec.min_weight), ("max_weight", spec.max_weight),
                          ("cost_bps", spec.cost_bps)):
        bad = [n for n in (mapping or {}) if n not in instruments]
        if bad:
            raise _names_error(f"the {name} limits", "instrument", bad, instruments)


def _current_weights(current: pd.Series, instruments: list[str]) -> np.ndarray:
    """Current overlay weights in instrument order (instruments not listed hold 0)."""
    cur = _labels(pd.Series(current))
    bad = [i for i in cur.index if i not in instruments]
    if bad:
        raise _names_error("the current-positions file", "instrument", bad, instruments)
    values = pd.to_numeric(cur, errors="coerce").to_numpy(dtype=float)
    for name, value in zip(cur.index, values, strict=True):
        if not math.isfinite(value):
            raise InputError(f"weight for '{name}' is blank or not finite.",
                             file="current-positions file", column="weight",
                             fix="give every listed instrument a weight (fraction of NAV), "
                                 "or drop its row.")
    return np.nan_to_num(_take(pd.Series(values, index=cur.index), instruments)
                         .to_numpy(dtype=float))


def _labels(obj: pd.Series | pd.DataFrame) -> pd.Series | pd.DataFrame:
    """The object with string labels (a relabelled copy only when some label is not str)."""
    if not all(isinstance(i, str) for i in obj.index):
        obj = obj.set_axis([str(i) for i in obj.index], axis=0)
    if isinstance(obj, pd.DataFrame) and not all(isinstance(c, str) for c in obj.columns):
        obj = obj.set_axis([str(c) for c in obj.columns], axis=1)
    return obj


def _take(obj: pd.Series | pd.DataFrame, rows: list[str], cols: list[str] | None = None
          ) -> pd.Series | pd.DataFrame:
    """obj on exactly these row (and column) labels; no reindexing when already in order."""
    obj = _labels(obj)
    if list(obj.index) != rows:
        obj = obj.reindex(rows)
    if cols is not None and list(obj.columns) != cols:
        obj = obj.reindex(columns=cols)
    return obj


def _numeric(frame: pd.DataFrame | pd.Series, what: str) -> np.ndarray:
    try:
        arr = frame.to_numpy(dtype=float)
    except (TypeError, ValueError):     # text in a numeric field: report it as missing
        values = frame.apply(pd.to_numeric, errors="coerce") \
            if isinstance(frame, pd.DataFrame) else pd.to_numeric(frame, errors="coerce")
        arr = np.asarray(values, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise InputError(f"{what} has missing or non-numeric values.",
                         fix=f"supply a number for every entry of {what}.")
    return arr


# --------------------------------------------------------------------------- the stage

def design_overlay(book_betas: pd.Series, instrument_betas: pd.DataFrame,
                   covariance: pd.DataFrame, sheet: pd.DataFrame, *, nav: float,
                   spec: HedgeSpec, premia: pd.Series | None = None,
                   current: pd.Series | None = None, book_se: pd.Series | None = None,
                   instrument_se: pd.DataFrame | None = None, closest: bool = False,
                   periods_per_year: int = 12, book_variance: float | None = None,
                   book_instrument_cov: pd.Series | None = None,
                   problem: OverlayProblem | None = None) -> HedgeResult:
    """Design the overlay (methods.md section 4) and its ticket in whole contracts.

    ``instrument_betas``: instrument x factor; ``book_betas``: by factor; ``covariance``:
    annualised instrument covariance (:func:`instrument_covariance`); ``sheet``: index
    instrument with multiplier, price, cost_bps, min_weight, max_weight.  ``premia``:
    monthly prices of risk by factor (other labels such as ``const`` are ignored).
    ``current``: the overlay held now, weights of NAV (costs are paid on the change).
    ``objective="total"`` needs ``book_variance`` (annualised) and ``book_instrument_cov``
    (annualised, by instrument).  Unreachable targets give ``status="unreachable"``; with
    ``closest=True`` the positions are the lexicographic closest overlay (least remaining
    exposure, then least tracking variance), otherwise no overlay.
    """
    if not isinstance(instrument_betas, pd.DataFrame) or instrument_betas.empty:
        raise InputError("instrument betas must be a non-empty DataFrame (instrument x factor).",
                         fix="estimate the instruments' exposures first.")
    if not nav > 0 or not math.isfinite(nav):
        raise InputError(f"[portfolio] nav must be a positive number, got {nav}.",
                         fix="set [portfolio] nav to the fund's net asset value.")
    instruments = [str(i) for i in instrument_betas.index]
    factors = [str(f) for f in instrument_betas.columns]
    inst_b = _take(instrument_betas, instruments, factors)
    _check_names(spec, factors, instruments)

    sheet = _sheet_frame(sheet)
    missing = [i for i in instruments if i not in sheet.index]
    if missing:
        raise InputError(f"{_quoted(missing)} {'is' if len(missing) == 1 else 'are'} not in "
                         "the instrument sheet.", file="instrument sheet", column="instrument",
                         fix="add a row with multiplier and price for each instrument.")
    for col in ("multiplier", "price"):
        if col not in sheet.columns:
            raise InputError(f"the instrument sheet has no '{col}' column.",
                             file="instrument sheet",
                             fix=f"columns needed: {', '.join(SHEET_COLUMNS)}.")
    sheet_h = _take(sheet, instruments)
    unit = _numeric(sheet_h["multiplier"], "multiplier") * _numeric(sheet_h["price"], "price")
    if np.any(unit <= 0):
        bad = [i for i, u in zip(instruments, unit, strict=True) if u <= 0]
        raise InputError(f"price x multiplier is not positive for {_quoted(bad)}.",
                         file="instrument sheet", column="price",
                         fix="prices and multipliers must be positive.")

    book_b = _labels(pd.Series(book_betas))
    lost = [f for f in factors if f not in book_b.index]
    if lost:
        raise InputError(f"the book's betas lack {_quoted(lost)}.",
                         fix="estimate the book's exposure on the instruments' factors.")
    b_p = _numeric(_take(book_b, factors), "book betas")
    B_all = _numeric(inst_b, "instrument betas")          # H x K

    cov = _labels(covariance)
    missing = [i for i in instruments if i not in cov.index or i not in cov.columns]
    if missing:
        raise InputError(f"the instrument covariance lacks {_quoted(missing)}.",
                         fix="compute it with instrument_covariance on the same instruments.")
    sigma_all = _numeric(_take(cov, instruments, instruments), "instrument covariance")
    if not np.allclose(sigma_all, sigma_all.T, rtol=1e-8, atol=1e-14):
        raise InputError("the instrument covariance is not symmetric.",
                         fix="compute it with instrument_covariance.")

    h0_all = np.zeros(len(instruments))
    if current is not None:
        h0_all = _current_weights(current, instruments)

    se_p = se_B_all = None
    if book_se is not None or instrument_se is not None:
        if book_se is None or instrument_se is None:
            raise InputError("give both book_se and instrument_se, or neither.",
                             fix="pass the standard errors from the exposures stage.")
        se_p = np.abs(_numeric(_take(_labels(pd.Series(book_se)), factors), "book_se"))
        se_B_all = np.abs(_numeric(_take(_labels(instrument_se), instruments, factors),
                                   "instrument_se"))
    if spec.robust and se_p is None:
        raise InputError("[hedge] robust = true needs the betas' standard errors (book_se and "
                         "instrument_se).", fix="pass them or set robust = false.")

    warnings: list[str] = []
    lam = None
    if premia is not None:
        prem = _labels(pd.Series(premia))
        absent = [f for f in factors if f not in prem.index]
        if absent:
            warnings.append(f"no price of risk for {_quoted(absent)}: their premium counts "
                            "as zero.")
        lam = np.nan_to_num(pd.to_numeric(_take(prem, factors), errors="coerce")
                            .to_numpy(dtype=float))
    if spec.premium_weight > 0 and lam is None:
        raise InputError("[hedge] premium_weight > 0 needs the prices of risk.",
                         fix="pass premia from the Fama-MacBeth stage or set premium_weight = 0.")

    c_pH_all = None
    if spec.objective == "total" and (book_variance is None or book_instrument_cov is None):
        raise InputError("[hedge] objective = \"total\" needs book_variance and "
                         "book_instrument_cov.", fix="pass them or use objective = \"tracking\".")
    if book_variance is not None and book_instrument_cov is not None:
        c_pH_all = _numeric(_take(_labels(pd.Series(book_instrument_cov)), instruments),
                            "book_instrument_cov")

    # ---- active set and numbers for the program
    excluded = set(spec.exclude)
    act = np.array([i not in excluded for i in instruments])
    active = [i for i in instruments if i not in excluded]
    lo_all, hi_all, cost_all = _limits(instruments, spec, sheet)
    lo, hi, cost_frac = lo_all[act], hi_all[act], cost_all[act]
    structure = _structure(active, spec, lo, hi)
    if not active:
        problem = None                      # nothing to optimise over
    elif problem is None:
        problem = _cached_problem(structure)
    elif problem.structure != structure:
        raise InputError("the OverlayProblem passed was built for other instruments or limits.",
                         fix="build it with OverlayProblem.for_inputs on the same spec and sheet.")

    z = float(stats.norm.ppf(0.5 + spec.confidence / 2))
    sigma = sigma_all[np.ix_(act, act)]
    F = _risk_factor(sigma)
    B = B_all[act]                                             # H_act x K
    fidx = {f: k for k, f in enumerate(factors)}
    n_idx = [fidx[f] for f in spec.neutralise]
    k_idx = [fidx[f] for f in spec.keep]
    targets = np.array([spec.targets.get(f, 0.0) for f in spec.neutralise])
    tol = np.array([spec.tolerance_for(f) for f in spec.neutralise])
    lin = np.zeros(len(active))
    if spec.objective == "total" and c_pH_all is not None:
        lin += 2.0 * c_pH_all[act]
    if spec.premium_weight > 0 and lam is not None:
        lin += spec.premium_weight * (-(B @ lam) * periods_per_year)

    def pad(x: np.ndarray, n: int) -> np.ndarray:
        return x if x.size else np.zeros(n)

    n_h = len(active)
    values: dict[str, Any] = {
        "F": F, "lin": lin, "cost": cost_frac, "h0": h0_all[act],
        "Bn": B[:, n_idx].T if n_idx else np.zeros((1, n_h)),
        "off_n": pad(b_p[n_idx] - targets, 1), "tol": pad(tol, 1),
        "Bk": B[:, k_idx].T if k_idx else np.zeros((1, n_h)),
        "bk": pad(b_p[k_idx], 1),
        "lo_k": pad(np.array([spec.keep[f][0] for f in spec.keep]), 1),
        "hi_k": pad(np.array([spec.keep[f][1] for f in spec.keep]), 1),
        "lo": pad(lo[list(structure.lower)], 1), "hi": pad(hi[list(structure.upper)], 1),
        "cap": float(spec.max_gross or 0.0), "smax": 0.0,
        "se_p": z * se_p[n_idx] if se_p is not None and n_idx else np.zeros(max(len(n_idx), 1)),
        "se_B": (z * se_B_all[act][:, n_idx].T) if se_B_all is not None and n_idx
        else np.zeros((max(len(n_idx), 1), n_h)),
    }
    # cvxpy rejects +/-inf in Parameters: infinite band sides are left out of the program.
    for key in ("lo_k", "hi_k"):
        values[key] = np.where(np.isfinite(values[key]), values[key], 0.0)
    if problem is not None:
        problem.set_values(values)

    # ---- reachability before solving: a neutralised factor no instrument loads on
    binding: list[str] = []
    unreachable: list[str] = []
    scale = np.abs(B).max() if B.size else 0.0
    for j, f in enumerate(spec.neutralise):
        row = B[:, fidx[f]] if n_h else np.zeros(0)
        need = abs(b_p[fidx[f]] - targets[j]) + (z * se_p[fidx[f]] if spec.robust else 0.0)
        if (row.size == 0 or np.abs(row).max() <= 1e-12 * max(scale, 1.0)) and need > tol[j]:
            unreachable.append(f)
            binding.append(f"no active instrument carries exposure to '{f}'")
    if spec.robust:
        for j, f in enumerate(spec.neutralise):
            if z * se_p[fidx[f]] > tol[j] and f not in unreachable:
                unreachable.append(f)
                binding.append(f"tolerance {tol[j]:g} on '{f}' is below the book's own "
                               f"{spec.confidence:.0%} half-width {z * se_p[fidx[f]]:.4g}")

    h_act = np.zeros(n_h)
    status, solver, message, objective_value = "optimal", "", "", None
    remaining = pd.Series(0.0, index=pd.Index(list(spec.neutralise) + list(spec.keep),
                                              name="factor"), dtype=float)
    outcome = "infeasible" if unreachable else None
    if n_h == 0 and not unreachable and (spec.neutralise or spec.keep):
        outcome = "infeasible"
    if outcome is None and n_h == 0:
        outcome, solver = "optimal", "none"
        objective_value = 0.0
    elif outcome is None:
        outcome, solver = problem.solve_main()
        if outcome == "optimal":
            h_act = problem.main_solution
            objective_value = problem.main_value
    if outcome == "failed":
        raise OverlaySolveError(f"no solver returned an optimal overlay (last tried {solver})")
    if outcome == "infeasible":
        if n_h == 0:
            o1, h_c, closest_value = "optimal", np.zeros(0), 0.0
            s_n = np.abs(b_p[n_idx] - targets) - tol if n_idx else np.zeros(0)
            keep_b = b_p[k_idx]
            s_k = np.maximum(np.array([spec.keep[f][0] for f in spec.keep]) - keep_b, 0.0) + \
                np.maximum(keep_b - np.array([spec.keep[f][1] for f in spec.keep]), 0.0)
        else:
            o1, solver, s_n, s_k, h_c, closest_value = problem.solve_closest()
        if o1 == "infeasible":
            status = "unreachable"
            unreachable = list(dict.fromkeys(unreachable + list(spec.neutralise) + list(spec.keep)))
            binding.append("instrument weight bounds and the gross cap admit no overlay")
            message = "No overlay satisfies the instrument bounds and the gross cap together."
        elif o1 != "optimal":
            raise OverlaySolveError(f"no solver returned an optimal closest overlay ({solver})")
        else:
            excess = np.concatenate([np.maximum(s_n[:len(n_idx)], 0.0),
                                     np.maximum(s_k[:len(k_idx)], 0.0)])
            remaining = pd.Series(excess, index=remaining.index, dtype=float)
            far = [f for f, e in zip(remaining.index, excess, strict=True) if e > _REACH_TOL]
            if not far and not unreachable:
                # reachable after all (the main program was numerically on the edge)
                if closest_value is None:
                    raise OverlaySolveError("no solver returned an optimal overlay at the "
                                            "edge of the targets")
                h_act = h_c
                objective_value = closest_value
            else:
                status = "unreachable"
                unreachable = list(dict.fromkeys(unreachable + far))
                binding += _active_limits(h_c, active, lo, hi, structure, spec,
                                          b_p[k_idx] + B[:, k_idx].T @ h_c)
                if closest:
                    h_act = h_c
                    objective_value = closest_value
                    message = (f"Targets for {_quoted(unreachable)} cannot be reached; the positions are "
                               "the closest overlay (least remaining exposure, then least "
                               f"{spec.objective} variance).")
                else:
                    message = (f"Targets for {_quoted(unreachable)} cannot be reached with these "
                               "instruments and limits; no overlay proposed: use --closest "
                               "(or [hedge] closest = true) for the closest reachable overlay.")
                if binding:
                    message += " Limiting: " + "; ".join(dict.fromkeys(binding)) + "."
    if status == "optimal":
        binding += _active_limits(h_act, active, lo, hi, structure, spec,
                                  b_p[k_idx] + B[:, k_idx].T @ h_act)
        message = message or "Targets reached at minimum " + (
            "tracking variance." if spec.objective == "tracking" else "total variance.")
    if spec.objective == "total" and objective_value is not None:
        objective_value += float(book_variance)       # the constant the program leaves out

    # ---- robust vs nominal size
    robust_ratio = None
    if spec.robust and status == "optimal":
        nominal = design_overlay(book_b, inst_b, cov, sheet, nav=nav,
                                 spec=replace(spec, robust=False), premia=premia,
                                 current=current, periods_per_year=periods_per_year,
                                 book_variance=book_variance,
                                 book_instrument_cov=book_instrument_cov)
        if nominal.status == "optimal" and nominal.gross > 1e-12:
            robust_ratio = float(np.abs(h_act).sum() / nominal.gross)

    return _ticket(status=status, instruments=instruments, act=act, h_act=h_act, h0=h0_all,
                   unit=unit, nav=nav, B_all=B_all, b_p=b_p, factors=factors, sigma=sigma_all,
                   cost_all=cost_all, lo_all=lo_all, hi_all=hi_all,
                   se_p=se_p, se_B=se_B_all, lam=lam, ppy=periods_per_year, spec=spec,
                   unreachable=tuple(unreachable), remaining=remaining,
                   binding=tuple(dict.fromkeys(binding)), message=message, solver=solver,
                   objective_value=objective_value, book_variance=book_variance,
                   c_pH=c_pH_all, robust_ratio=robust_ratio, warnings=tuple(warnings))


def _active_limits(h: np.ndarray, active: list[str], lo: np.ndarray, hi: np.ndarray,
                   structure: _Structure, spec: HedgeSpec, keep_after: np.ndarray) -> list[str]:
    """Human-readable limits the overlay sits on (within a small tolerance)."""
    out = []
    near = _ACTIVE_TOL
    for j, name in enumerate(active):
        if np.isfinite(hi[j]) and h[j] >= hi[j] - near * max(1.0, abs(hi[j])):
            out.append(f"{name} at max_weight {hi[j]:g}")
        if np.isfinite(lo[j]) and h[j] <= lo[j] + near * max(1.0, abs(lo[j])):
            out.append(f"{name} at min_weight {lo[j]:g}")
    for f, (band_lo, band_hi), value in zip(spec.keep, spec.keep.values(), keep_after,
                                            strict=True):
        if np.isfinite(band_lo) and value <= band_lo + near * max(1.0, abs(band_lo)):
            out.append(f"'{f}' at the lower edge {band_lo:g} of its keep band")
        if np.isfinite(band_hi) and value >= band_hi - near * max(1.0, abs(band_hi)):
            out.append(f"'{f}' at the upper edge {band_hi:g} of its keep band")
    if structure.has_cap and spec.max_gross is not None and \
            np.abs(h).sum() >= spec.max_gross - near * max(1.0, spec.max_gross):
        out.append(f"gross notional at its cap {spec.max_gross:g}")
    return out


def _ticket(*, status: str, instruments: list[str], act: np.ndarray, h_act: np.ndarray,
            h0: np.ndarray, unit: np.ndarray, nav: float, B_all: np.ndarray, b_p: np.ndarray,
            factors: list[str], sigma: np.ndarray, cost_all: np.ndarray,
            lo_all: np.ndarray, hi_all: np.ndarray, se_p: np.ndarray | None, se_B: np.ndarray | None, lam: np.ndarray | None,
            ppy: int, spec: HedgeSpec, unreachable: tuple[str, ...], remaining: pd.Series,
            binding: tuple[str, ...], message: str, solver: str,
            objective_value: float | None, book_variance: float | None,
            c_pH: np.ndarray | None, robust_ratio: float | None,
            warnings: tuple[str, ...]) -> HedgeResult:
    """Round to contracts and compute exposures, risk, premium and cost of the overlay.

    Costs are paid on the whole-contract trade, sum_j c_j |h~_j - h0_j| with h~ the rounded
    weights; the unrounded trade's cost (what the program minimised) is kept alongside.
    """
    h = np.zeros(len(instruments))
    h[act] = h_act
    h[np.abs(h) < 1e-8] = 0.0               # solver dust (1e-8 of NAV), not a position
    notional = h * nav
    contracts = np.rint(notional / unit).astype(np.int64)
    h_round = contracts * unit / nav
    trades = h - h0
    trades_round = h_round - h0
    cost_unrounded = float(cost_all @ np.abs(trades))
    cost_frac = float(cost_all @ np.abs(trades_round))

    after = b_p + B_all.T @ h
    after_round = b_p + B_all.T @ h_round
    breaches = _rounding_breaches(
        status=status, instruments=instruments, h=h, h_round=h_round, contracts=contracts,
        unit=unit, nav=nav, B_all=B_all, after_round=after_round, factors=factors,
        lo_all=lo_all, hi_all=hi_all, spec=spec)
    if breaches:
        warnings = warnings + tuple(f"Rounding to whole contracts: {b}." for b in breaches)
        if status == "optimal":
            message = (message.rstrip(".") + " before rounding, but rounding to whole "
                       "contracts breaks the overlay: " + "; ".join(breaches) + ".")
        else:
            message += " After rounding to whole contracts: " + "; ".join(breaches) + "."
    te = math.sqrt(max(float(h @ sigma @ h), 0.0))
    te_round = math.sqrt(max(float(h_round @ sigma @ h_round), 0.0))
    premium = None if lam is None else float(-(B_all.T @ h) @ lam * ppy)
    premium_round = None if lam is None else float(-(B_all.T @ h_round) @ lam * ppy)
    se_before = se_after = None
    fac = pd.Index(factors, name="factor")
    if se_p is not None and se_B is not None:
        se_before = pd.Series(se_p, index=fac)
        se_after = pd.Series(np.sqrt(se_p ** 2 + (se_B ** 2).T @ (h ** 2)), index=fac)
    risk_before = risk_after = None
    if c_pH is not None and book_variance is not None:
        risk_before = math.sqrt(max(float(book_variance), 0.0))
        risk_after = math.sqrt(max(float(book_variance) + 2 * float(c_pH @ h)
                                   + float(h @ sigma @ h), 0.0))
    idx = pd.Index(instruments, name="instrument")
    ticket = pd.DataFrame({
        "weight": h, "notional": notional, "contracts": contracts,
        "contract_value": unit, "weight_rounded": h_round, "current": h0, "trade": trades,
        "trade_rounded": trades_round, "cost": np.abs(trades_round) * cost_all * nav,
        "cost_unrounded": np.abs(trades) * cost_all * nav, "excluded": ~act,
    }, index=idx)
    ticket["excluded"] = ticket["excluded"].astype(float)
    return HedgeResult(
        status=status,
        positions=pd.Series(h, index=idx, name="weight"),
        notional=pd.Series(notional, index=idx, name="notional"),
        contracts=pd.Series(contracts, index=idx, name="contracts"),
        positions_rounded=pd.Series(h_round, index=idx, name="weight_rounded"),
        trades=pd.Series(trades, index=idx, name="trade"),
        cost=cost_frac, cost_currency=cost_frac * nav,
        exposure_before=pd.Series(b_p, index=fac, name="before"),
        exposure_after=pd.Series(after, index=fac, name="after"),
        exposure_after_rounded=pd.Series(after_round, index=fac, name="after_rounded"),
        exposure_before_se=se_before, exposure_after_se=se_after,
        confidence=spec.confidence, tracking_error=te, tracking_error_rounded=te_round,
        premium_given_up=premium, premium_given_up_rounded=premium_round,
        gross=float(np.abs(h).sum()), nav=float(nav), unreachable=unreachable,
        remaining=remaining, binding=binding, message=message, solver=solver,
        objective_value=objective_value, objective=spec.objective,
        total_risk_before=risk_before, total_risk_after=risk_after,
        robust_gross_ratio=robust_ratio, ticket=ticket, warnings=warnings,
        trades_rounded=pd.Series(trades_round, index=idx, name="trade_rounded"),
        cost_unrounded=cost_unrounded, cost_unrounded_currency=cost_unrounded * nav,
        gross_rounded=float(np.abs(h_round).sum()), rounding_breaches=breaches,
    )


def _rounding_breaches(*, status: str, instruments: list[str], h: np.ndarray,
                       h_round: np.ndarray, contracts: np.ndarray, unit: np.ndarray,
                       nav: float, B_all: np.ndarray, after_round: np.ndarray,
                       factors: list[str], lo_all: np.ndarray, hi_all: np.ndarray,
                       spec: HedgeSpec) -> tuple[str, ...]:
    """What the whole-contract overlay h~ breaks that the optimiser's h kept, in words.

    Neutralised f: |b~_f - t_f| > tol_f + rounding_slack; kept g: b~_g outside
    [lo_g - slack, hi_g + slack]; limits: |h~|_1 > cap, h~_j outside [lo_j, hi_j] (beyond
    1e-9).  Factor checks apply to an "optimal" overlay only (an unreachable one already
    names its factors).
    """
    if not np.any(h != 0):
        return ()
    out: list[str] = []
    share = unit / nav

    def size(j: int) -> str:
        of_nav = f"{share[j]:.1%} of" if share[j] < 1 else f"{share[j]:,.0f} times"
        return f"one {instruments[j]} contract is {of_nav} the NAV of {nav:,.0f}"

    all_zero = bool(np.all(contracts == 0))
    if all_zero:
        j = int(np.argmin(np.where(h != 0, share, np.inf)))
        out.append("every position rounds to zero contracts, so no trade would be placed: "
                   f"the NAV is too small for these contract sizes ({size(j)})")
    if status == "optimal":
        fidx = {f: k for k, f in enumerate(factors)}
        shift = B_all * (h_round - h)[:, None]              # H x K: each leg's rounding
        slack = spec.rounding_slack
        missed: list[int] = []
        for f in spec.neutralise:
            k = fidx[f]
            target, tol = spec.targets.get(f, 0.0), spec.tolerance_for(f)
            miss = abs(after_round[k] - target) - tol
            if miss > slack:
                missed.append(k)
                out.append(f"'{f}' is {after_round[k]:.3f} after rounding, {miss:.3f} outside "
                           f"its tolerance {tol:g} around the target {target:g}")
        if missed and not all_zero:
            j = int(np.argmax(np.abs(shift[:, missed]).max(axis=1)))
            out[-1] += (" (the NAV is small relative to contract sizes: "
                        f"{size(j)})")
        for g, (band_lo, band_hi) in spec.keep.items():
            value = after_round[fidx[g]]
            miss = max(band_lo - value, value - band_hi)
            if miss > slack:
                out.append(f"kept '{g}' is {value:.3f} after rounding, {miss:.3f} outside its "
                           f"band [{band_lo:g}, {band_hi:g}]")
    gross = float(np.abs(h_round).sum())
    if spec.max_gross is not None and gross > spec.max_gross + 1e-9 * max(1.0, spec.max_gross):
        out.append(f"the rounded gross notional {gross:.2%} of NAV is above the cap "
                   f"max_gross = {spec.max_gross:g} ({spec.max_gross:.2%})")
    for j, name in enumerate(instruments):
        if np.isfinite(hi_all[j]) and h_round[j] > hi_all[j] + 1e-9 * max(1.0, abs(hi_all[j])):
            out.append(f"{name}'s rounded weight {h_round[j]:.2%} is above its max_weight "
                       f"{hi_all[j]:g}")
        if np.isfinite(lo_all[j]) and h_round[j] < lo_all[j] - 1e-9 * max(1.0, abs(lo_all[j])):
            out.append(f"{name}'s rounded weight {h_round[j]:.2%} is below its min_weight "
                       f"{lo_all[j]:g}")
    return tuple(out)
