"""The hedge stage: :func:`design_overlay` = check inputs, solve the program, whole contracts.

The program (:mod:`hedgekit.hedge.program`, docs/methods.md section 4) minimises tracking
variance plus trading cost (plus a weight on the premium given up) subject to the targets,
bands, bounds and cap.  With equality targets and no bounds the solution is the KKT one,
h* = Sigma^-1 C'(C Sigma^-1 C')^-1 d (Boyd and Vandenberghe 2004, *Convex Optimization*,
section 10.1).  The whole-contract overlay is then chosen by an integer program
(:mod:`hedgekit.hedge.ticket`).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd

from .. import inference
from ..errors import InputError
from .inputs import OverlayInputs, prepare
from .program import (
    OverlayProblem,
    OverlaySolveError,
    Structure,
    cached_problem,
    risk_factor,
    structure_for,
)
from .result import HedgeResult, build_result
from .spec import HedgeSpec, quoted
from .ticket import whole_contracts

_ACTIVE_TOL = 1e-6              # a limit "binds" when the solution sits this close to it
_REACH_TOL = 1e-7               # slack below this (beta units) counts as reached


@dataclass(frozen=True)
class Solved:
    """The continuous overlay over the active instruments and what the solve said about it."""

    status: str
    h: np.ndarray
    objective_value: float | None
    solver: str
    message: str
    unreachable: tuple[str, ...]
    remaining: pd.Series
    binding: tuple[str, ...]


def design_overlay(book_betas: pd.Series, instrument_betas: pd.DataFrame,
                   covariance: pd.DataFrame, sheet: pd.DataFrame, *, nav: float,
                   spec: HedgeSpec, premia: pd.Series | None = None,
                   current: pd.Series | None = None, book_se: pd.Series | None = None,
                   instrument_se: pd.DataFrame | None = None, closest: bool = False,
                   periods_per_year: int = 12, book_variance: float | None = None,
                   book_instrument_cov: pd.Series | None = None,
                   problem: OverlayProblem | None = None,
                   premia_cov: pd.DataFrame | None = None,
                   confidence: float | None = None) -> HedgeResult:
    """Design the overlay (docs/methods.md section 4) and its ticket in whole contracts.

    ``instrument_betas``: instrument x factor; ``book_betas``: by factor; ``covariance``:
    annualised instrument covariance (:func:`instrument_covariance`; its factor form is kept
    when it carries one); ``sheet``: index instrument with multiplier, price, cost_bps,
    min_weight, max_weight.  ``premia``: per-period prices of risk by factor (other labels
    such as ``const`` are ignored) and ``premia_cov`` their per-period covariance (e.g.
    ``PremiaResult.cov_shanken``) for the premium's standard error.  ``current``: the
    overlay held now, weights of NAV (costs are paid on the change).
    ``objective="total"`` needs ``book_variance`` (annualised) and ``book_instrument_cov``
    (annualised, by instrument).  Unreachable targets give ``status="unreachable"``; with
    ``closest=True`` the positions are the lexicographic closest overlay (least remaining
    exposure, then least tracking variance), otherwise no overlay.  ``confidence``: the level
    of every interval (None: ``spec.confidence``).
    """
    if confidence is not None and float(confidence) != spec.confidence:
        spec = replace(spec, confidence=float(confidence))
    inp = prepare(book_betas, instrument_betas, covariance, sheet, nav=nav, spec=spec,
                  premia=premia, premia_cov=premia_cov, current=current, book_se=book_se,
                  instrument_se=instrument_se, book_variance=book_variance,
                  book_instrument_cov=book_instrument_cov)
    structure = _structure(inp, spec)
    problem = _program(structure, problem)
    values = _values(inp, spec, structure, periods_per_year)
    solved = _solve(inp, spec, problem, values, closest)
    h = np.zeros(len(inp.instruments))
    h[inp.active] = solved.h
    h[np.abs(h) < 1e-8] = 0.0               # solver dust (1e-8 of NAV), not a position
    ratio = _robust_ratio(inp, spec, values, h) if spec.robust and solved.status == "optimal" \
        else None
    contracts = whole_contracts(inp, spec, h, status=solved.status)
    return build_result(inp, spec, solved, h, contracts, robust_ratio=ratio,
                        periods_per_year=periods_per_year)


def _structure(inp: OverlayInputs, spec: HedgeSpec) -> Structure:
    act = inp.active
    rows = None if inp.risk is None else inp.risk[0].shape[0]
    return structure_for(inp.names_active, spec, inp.lo[act], inp.hi[act], rows)


def _program(structure: Structure, problem: OverlayProblem | None) -> OverlayProblem | None:
    if not structure.instruments:
        return None                         # nothing to optimise over
    if problem is None:
        return cached_problem(structure)
    if problem.structure != structure:
        raise InputError("the OverlayProblem passed was built for other instruments or limits.",
                         fix="build it with OverlayProblem.for_inputs on the same spec and sheet.")
    return problem


def _values(inp: OverlayInputs, spec: HedgeSpec, structure: Structure,
            periods_per_year: int) -> dict[str, Any]:
    """The program's Parameter values: risk factor, linear term, targets, limits, se."""
    act = inp.active
    B = inp.B[act]
    n_h = B.shape[0]
    fidx = {f: k for k, f in enumerate(inp.factors)}
    n_idx = [fidx[f] for f in spec.neutralise]
    k_idx = [fidx[f] for f in spec.keep]
    z = inference.z_value(spec.confidence)
    lin = np.zeros(n_h)
    if spec.objective == "total" and inp.c_pH is not None:
        lin += 2.0 * inp.c_pH[act]
    if spec.premium_weight > 0 and inp.lam is not None:
        lin += spec.premium_weight * (-(B @ inp.lam) * periods_per_year)

    def pad(x: np.ndarray, n: int = 1) -> np.ndarray:
        return x if x.size else np.zeros(n)

    if inp.risk is None:
        risk = {"F": risk_factor(inp.sigma[np.ix_(act, act)])}
    else:
        risk = {"G": inp.risk[0][:, act], "g": inp.risk[1][act]}
    keep_lo = np.array([spec.keep[f][0] for f in spec.keep])
    keep_hi = np.array([spec.keep[f][1] for f in spec.keep])
    se_p, se_B = inp.se_b, inp.se_B
    return {
        **risk, "lin": lin, "cost": inp.cost[act], "h0": inp.h0[act],
        "Bn": B[:, n_idx].T if n_idx else np.zeros((1, n_h)),
        "off_n": pad(inp.b[n_idx] - np.array([spec.target_for(f) for f in spec.neutralise])),
        "tol": pad(np.array([spec.tolerance_for(f) for f in spec.neutralise])),
        "Bk": B[:, k_idx].T if k_idx else np.zeros((1, n_h)),
        "bk": pad(inp.b[k_idx]),
        # cvxpy rejects +/-inf in Parameters: infinite band sides are left out of the program
        "lo_k": pad(np.where(np.isfinite(keep_lo), keep_lo, 0.0)),
        "hi_k": pad(np.where(np.isfinite(keep_hi), keep_hi, 0.0)),
        "lo": pad(inp.lo[act][list(structure.lower)]),
        "hi": pad(inp.hi[act][list(structure.upper)]),
        "cap": float(spec.max_gross or 0.0), "smax": 0.0,
        "se_p": z * se_p[n_idx] if se_p is not None and n_idx else np.zeros(max(len(n_idx), 1)),
        "se_B": (z * se_B[act][:, n_idx].T) if se_B is not None and n_idx
        else np.zeros((max(len(n_idx), 1), n_h)),
    }


def _out_of_reach(inp: OverlayInputs, spec: HedgeSpec) -> tuple[list[str], list[str]]:
    """Neutralised factors no active instrument loads on (and, robust, whose own book
    half-width already exceeds the tolerance), with the reason for each."""
    B = inp.B[inp.active]
    z = inference.z_value(spec.confidence)
    scale = np.abs(B).max() if B.size else 0.0
    unreachable, binding = [], []
    for f in spec.neutralise:
        k = inp.factors.index(f)
        tol = spec.tolerance_for(f)
        half = z * inp.se_b[k] if spec.robust else 0.0
        row = B[:, k]
        need = abs(inp.b[k] - spec.target_for(f)) + half
        if (row.size == 0 or np.abs(row).max() <= 1e-12 * max(scale, 1.0)) and need > tol:
            unreachable.append(f)
            binding.append(f"no active instrument carries exposure to '{f}'")
    if spec.robust:
        for f in spec.neutralise:
            half, tol = z * inp.se_b[inp.factors.index(f)], spec.tolerance_for(f)
            if half > tol and f not in unreachable:
                unreachable.append(f)
                binding.append(f"tolerance {tol:g} on '{f}' is below the book's own "
                               f"{spec.confidence:.0%} half-width {half:.4g}")
    return unreachable, binding


def _solve(inp: OverlayInputs, spec: HedgeSpec, problem: OverlayProblem | None,
           values: dict[str, Any], closest: bool) -> Solved:
    """Main program; when infeasible, the lexicographic closest overlay names what is out of
    reach (and supplies the positions when ``closest``)."""
    if problem is not None:
        problem.set_values(values)
    unreachable, binding = _out_of_reach(inp, spec)
    n_h = int(inp.active.sum())
    targets = pd.Index(list(spec.neutralise) + list(spec.keep), name="factor")
    remaining = pd.Series(0.0, index=targets, dtype=float)
    if unreachable or (n_h == 0 and (spec.neutralise or spec.keep)):
        outcome, solver = "infeasible", ""
    elif n_h == 0:
        return Solved("optimal", np.zeros(0), 0.0, "none", _reached(spec), (), remaining, ())
    else:
        outcome, solver = problem.solve_main()
    if outcome == "failed":
        raise OverlaySolveError(f"no solver returned an optimal overlay (last tried {solver})")
    if outcome == "optimal":
        h = problem.main_solution
        value = problem.main_value
        return Solved("optimal", h, _with_constant(value, spec, inp), solver, _reached(spec), (),
                      remaining, tuple(dict.fromkeys(binding + _active_limits(h, inp, spec))))
    return _closest(inp, spec, problem, closest, solver, unreachable, binding, remaining)


def _closest(inp, spec, problem, closest, solver, unreachable, binding, remaining) -> Solved:
    n_h = int(inp.active.sum())
    fidx = {f: k for k, f in enumerate(inp.factors)}
    if n_h == 0:
        o1, h_c, value = "optimal", np.zeros(0), 0.0
        s_n = np.array([abs(inp.b[fidx[f]] - spec.target_for(f)) - spec.tolerance_for(f)
                        for f in spec.neutralise])
        keep_b = inp.b[[fidx[g] for g in spec.keep]]
        s_k = np.maximum(np.array([spec.keep[g][0] for g in spec.keep]) - keep_b, 0.0) + \
            np.maximum(keep_b - np.array([spec.keep[g][1] for g in spec.keep]), 0.0)
    else:
        o1, solver, s_n, s_k, h_c, value = problem.solve_closest()
    if o1 == "infeasible":
        unreachable = list(dict.fromkeys(unreachable + list(spec.neutralise) + list(spec.keep)))
        binding = binding + ["instrument weight bounds and the gross cap admit no overlay"]
        return Solved("unreachable", np.zeros(n_h), None, solver,
                      "No overlay satisfies the instrument bounds and the gross cap together.",
                      tuple(unreachable), remaining, tuple(dict.fromkeys(binding)))
    if o1 != "optimal":
        raise OverlaySolveError(f"no solver returned an optimal closest overlay ({solver})")
    excess = np.concatenate([np.maximum(s_n[:len(spec.neutralise)], 0.0),
                             np.maximum(s_k[:len(spec.keep)], 0.0)])
    remaining = pd.Series(excess, index=remaining.index, dtype=float)
    far = [f for f, e in zip(remaining.index, excess, strict=True) if e > _REACH_TOL]
    if not far and not unreachable:
        # reachable after all (the main program was numerically on the edge)
        if value is None:
            raise OverlaySolveError("no solver returned an optimal overlay at the "
                                    "edge of the targets")
        return Solved("optimal", h_c, _with_constant(value, spec, inp), solver, _reached(spec),
                      (), remaining, tuple(dict.fromkeys(binding + _active_limits(h_c, inp, spec))))
    unreachable = list(dict.fromkeys(unreachable + far))
    binding = list(dict.fromkeys(binding + _active_limits(h_c, inp, spec)))
    if closest:
        h, value_out = h_c, _with_constant(value, spec, inp)
        message = (f"Targets for {quoted(unreachable)} cannot be reached; the positions are "
                   "the closest overlay (least remaining exposure, then least "
                   f"{spec.objective} variance).")
    else:
        h, value_out = np.zeros(n_h), None
        message = (f"Targets for {quoted(unreachable)} cannot be reached with these "
                   "instruments and limits; no overlay proposed: use --closest "
                   "(or [hedge] closest = true) for the closest reachable overlay.")
    if binding:
        message += " Limiting: " + "; ".join(binding) + "."
    return Solved("unreachable", h, value_out, solver, message, tuple(unreachable), remaining,
                  tuple(binding))


def _reached(spec: HedgeSpec) -> str:
    return "Targets reached at minimum " + (
        "tracking variance." if spec.objective == "tracking" else "total variance.")


def _with_constant(value: float | None, spec: HedgeSpec, inp: OverlayInputs) -> float | None:
    """Add back the book's own variance the "total" program leaves out."""
    if value is None or spec.objective != "total":
        return value
    return value + float(inp.book_variance)


def _active_limits(h: np.ndarray, inp: OverlayInputs, spec: HedgeSpec) -> list[str]:
    """Human-readable limits the overlay sits on (within a small tolerance)."""
    act = inp.active
    lo, hi = inp.lo[act], inp.hi[act]
    keep_after = inp.b[[inp.factors.index(g) for g in spec.keep]] + \
        inp.B[act][:, [inp.factors.index(g) for g in spec.keep]].T @ h
    out = []
    near = _ACTIVE_TOL
    for j, name in enumerate(inp.names_active):
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
    if spec.max_gross is not None and \
            np.abs(h).sum() >= spec.max_gross - near * max(1.0, spec.max_gross):
        out.append(f"gross notional at its cap {spec.max_gross:g}")
    return out


def _robust_ratio(inp: OverlayInputs, spec: HedgeSpec, values: dict[str, Any],
                  h: np.ndarray) -> float | None:
    """Gross notional of the robust overlay over the nominal one's (same numbers, the
    nominal program without the cones)."""
    nominal_spec = replace(spec, robust=False)
    nominal = cached_problem(_structure(inp, nominal_spec))
    nominal.set_values(values)
    outcome, _ = nominal.solve_main()
    if outcome != "optimal":
        return None
    gross = float(np.abs(nominal.main_solution).sum())
    return float(np.abs(h).sum() / gross) if gross > 1e-12 else None
