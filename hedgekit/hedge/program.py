"""The overlay program, compiled once with cvxpy Parameters (DPP) and re-solved.

Over overlay weights h (fractions of NAV, + = long)::

    minimise   h' Sigma_H h + lin' h + sum_j c_j |h_j - h0_j|
    subject to |(b_p + B_H h)_f - t_f| <= tol_f     f in neutralise
               lo_g <= (b_p + B_H h)_g <= hi_g       g in keep
               lo_j <= h_j <= hi_j,  sum_j |h_j| <= gross cap.

h' Sigma_H h is written ``||F h||^2`` with F'F = Sigma_H (dense form, an H x H Parameter) or
``||G h||^2 + ||g * h||^2`` when the covariance is in factor form (G = R B', K x H, and g the
residual volatilities: :func:`hedgekit.hedge.covariance.factor_risk_matrix`), which keeps
the program's size linear in H.  The robust option replaces each neutralised constraint by
the second-order cone |e_f| + z sqrt(se_p,f^2 + sum_j se_jf^2 h_j^2) <= tol_f (Ben-Tal and
Nemirovski 1999, *Operations Research Letters*).

This is the only module that imports cvxpy, and only when a program is built.
"""

from __future__ import annotations

import warnings as _warnings
from collections import OrderedDict
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ..errors import HedgekitError, InputError
from .spec import HedgeSpec, limits, sheet_frame

SOLVERS = ("CLARABEL", "OSQP", "SCS")
_SOLVER_OPTIONS: dict[str, dict[str, Any]] = {
    "CLARABEL": {"tol_gap_abs": 1e-10, "tol_gap_rel": 1e-10, "tol_feas": 1e-10},
    "OSQP": {"eps_abs": 1e-9, "eps_rel": 1e-9, "polish": True, "max_iter": 200_000},
    "SCS": {"eps_abs": 1e-8, "eps_rel": 1e-8, "max_iters": 200_000},
}
_QP_ONLY = {"OSQP"}              # cannot take second-order cones (robust option)
_INSTALLED: list[tuple[str, ...]] = []


class OverlaySolveError(HedgekitError):
    """No installed solver returned an optimal solution (exit code 1)."""

    exit_code = 1


def _cvxpy():
    import cvxpy
    return cvxpy


def _installed_solvers() -> tuple[str, ...]:
    """SOLVERS that are installed, looked up once (cvxpy's check imports every solver)."""
    if not _INSTALLED:
        have = set(_cvxpy().installed_solvers())
        if "OSQP" in have:
            import osqp  # option renamed in OSQP 1.0

            if int(str(osqp.__version__).split(".")[0]) >= 1:
                _SOLVER_OPTIONS["OSQP"]["polishing"] = _SOLVER_OPTIONS["OSQP"].pop("polish")
        _INSTALLED.append(tuple(name for name in SOLVERS if name in have))
    return _INSTALLED[0]


@dataclass(frozen=True)
class Structure:
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
    factor_rows: int | None = None    # K when the covariance is in factor form, else dense


def structure_for(active: list[str], spec: HedgeSpec, lo: np.ndarray, hi: np.ndarray,
                  factor_rows: int | None = None) -> Structure:
    return Structure(
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
        factor_rows=factor_rows,
    )


class OverlayProblem:
    """The overlay program compiled once with cvxpy Parameters (DPP); re-solve via values.

    Build with :meth:`for_inputs` (or let ``design_overlay`` use its cache) and pass it as
    ``problem=`` on every re-solve: only Parameter values change, so cvxpy reuses the
    canonicalised program.  ``n_solves`` counts solves; ``structure`` is the cache key.
    The "closest reachable" pair of programs (remaining exposure first, tracking variance
    second) is compiled on first use and kept as well.
    """

    def __init__(self, structure: Structure) -> None:
        cp = _cvxpy()
        self.structure = s = structure
        n_h, n_n, n_k = len(s.instruments), len(s.neutral), len(s.keep)
        self.n_solves = 0
        self.h = cp.Variable(n_h, name="overlay")
        risk = {"F": cp.Parameter((n_h, n_h), name="risk_factor")} if s.factor_rows is None \
            else {"G": cp.Parameter((s.factor_rows, n_h), name="factor_risk"),
                  "g": cp.Parameter(n_h, nonneg=True, name="residual_vol")}
        self.params = {
            **risk,
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
        self._closest: tuple[Any, Any, Any, Any] | None = None
        self._closest_slack: tuple[Any, Any] | None = None

    @classmethod
    def for_inputs(cls, instruments: pd.Index | list[str], spec: HedgeSpec,
                   sheet: pd.DataFrame, *, factor_rows: int | None = None) -> OverlayProblem:
        """Compile the program for these instruments (index order), spec and sheet limits;
        ``factor_rows``: the number of factors when the covariance is in factor form."""
        sheet = sheet_frame(sheet)
        active = [str(i) for i in instruments if str(i) not in set(spec.exclude)]
        lo, hi, _ = limits(active, spec, sheet)
        return cls(structure_for(active, spec, lo, hi, factor_rows))

    # -- construction
    def _objective(self, h, trade):
        cp, p = _cvxpy(), self.params
        risk = cp.sum_squares(p["F"] @ h) if "F" in p else \
            cp.sum_squares(p["G"] @ h) + cp.sum_squares(cp.multiply(p["g"], h))
        return risk + p["lin"] @ h + p["cost"] @ cp.abs(trade)

    def _constraints(self, h, slack) -> list:
        cp, s, p = _cvxpy(), self.structure, self.params
        cons: list = []
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

    def _build(self, h, slack):
        cp = _cvxpy()
        trade = cp.Variable(h.shape[0], name="trade")
        cons = self._constraints(h, slack) + [trade == h - self.params["h0"]]
        if slack is not None:
            cons += [slack[0] >= 0, slack[1] >= 0,
                     cp.sum(slack[0]) + cp.sum(slack[1]) <= self.params["smax"]]
        return cp.Problem(cp.Minimize(self._objective(h, trade)), cons)

    def _closest_programs(self):
        if self._closest is None:
            cp = _cvxpy()
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

    def _run(self, problem) -> tuple[str, str]:
        """Solve with CLARABEL, then the other solvers; return (outcome, solver name)."""
        cp = _cvxpy()
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


def risk_factor(sigma: np.ndarray) -> np.ndarray:
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


_CACHE: OrderedDict[Structure, OverlayProblem] = OrderedDict()
_CACHE_SIZE = 32


def cached_problem(structure: Structure) -> OverlayProblem:
    problem = _CACHE.get(structure)
    if problem is None:
        problem = OverlayProblem(structure)
        _CACHE[structure] = problem
        while len(_CACHE) > _CACHE_SIZE:
            _CACHE.popitem(last=False)
    else:
        _CACHE.move_to_end(structure)
    return problem
