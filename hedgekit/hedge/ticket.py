"""Whole contracts that honour the targets: an integer program over contract counts.

Decision: n_j contracts of instrument j (integer), so weights w_j = n_j s_j with
s_j = price_j x multiplier_j / NAV.  Two stages, each a mixed-integer linear program solved
by HiGHS through :func:`scipy.optimize.milp` (Huangfu and Hall 2018, *Mathematical
Programming Computation*, "Parallelizing the dual revised simplex method", for the solver):

1. **Targets first.**  Minimise M(n) = sum_f m_f, the linearised L1 miss of every neutralised
   exposure beyond its band, m_f >= |b_f + (B'w)_f - t_f| - tol_f - rounding_slack, and of
   every kept exposure beyond its band widened by rounding_slack (each factor weighs
   equally, in beta units), subject to lo_j <= w_j <= hi_j and sum_j |w_j| <= max_gross.
2. **Then tracking and cost.**  Among vectors with M(n) <= M* + rounding_stage_slack (M*
   the stage-1 optimum), minimise ||R (w - h)||_1 + sum_j c_j |w_j - h0_j|, where h is the
   continuous optimum and R'R = Sigma_H (Cholesky factor, or the factor form's rows): the L1
   proxy of the distance to h in the risk metric, which is what the exact objective
   (tracking variance, quadratic) would measure; HiGHS takes no quadratic objective with
   integers, hence the proxy.  Trading cost is exact (linear).

Ties in stage 2 are broken by HiGHS's deterministic branch and bound (the same inputs give
the same vector).  Each count is searched within its weight bounds and within
max(SEARCH_MIN, |n*_j|) contracts of the continuous count n*_j (a box, so the search is
finite when a bound is infinite).  Rows are scaled to micro-beta (``SCALE``) so HiGHS's
feasibility (1e-7) and gap (1e-6) tolerances stand for 1e-13 and 1e-12 beta.  A stage that
hits ``TIME_LIMIT`` keeps its best vector found (the method then says so); no feasible
integer vector at all (bounds and cap admit none) falls back to nearest rounding, with
warnings naming what it breaks.  Contract counts beyond ``MAX_CONTRACTS`` (1e12, far inside
int64 and the range where doubles hold integers exactly) are an InputError.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from .inputs import OverlayInputs
from .spec import HedgeSpec, quoted

SCALE = 1e6
SEARCH_MIN = 20
TIME_LIMIT = 10.0
MAX_CONTRACTS = 1e12
INTEGER_PROGRAM = "integer program (HiGHS): least miss beyond tolerance, then least " \
                  "tracking distance and cost"


@dataclass(frozen=True, eq=False)
class WholeContracts:
    """The contract vector chosen and what it means: counts, weights, method, warnings."""

    contracts: np.ndarray          # int64, per instrument
    weights: np.ndarray            # n_j s_j, fractions of NAV
    method: str                    # "integer program (...)", "nearest rounding (...)", "none"
    breaches: tuple[str, ...]      # what the whole-contract overlay misses, in words
    zero_legs: tuple[str, ...]     # legs with a continuous weight and 0 contracts


def whole_contracts(inp: OverlayInputs, spec: HedgeSpec, h: np.ndarray, *,
                    status: str) -> WholeContracts:
    """Choose the contract vector for the continuous overlay ``h`` (see the module text)."""
    step = inp.unit / inp.nav
    if not np.any(h != 0):
        n = np.zeros(len(h), dtype=np.int64)
        return WholeContracts(n, n * step, "none (no overlay)", (), ())
    _check_counts(inp, h / step)
    n, method = None, "nearest rounding"  # item 1: the integer program is wired in next
    if n is None:
        n = np.rint(h / step).astype(np.int64)
    w = n * step
    zero = tuple(i for i, hj, nj in zip(inp.instruments, h, n, strict=True) if hj != 0 and nj == 0)
    breaches = _breaches(inp, spec, h, n, w, status)
    return WholeContracts(n, w, method, breaches, zero)


def _check_counts(inp: OverlayInputs, counts: np.ndarray) -> None:
    j = int(np.argmax(np.abs(counts)))
    if abs(counts[j]) * 2 + SEARCH_MIN > MAX_CONTRACTS:
        raise InputError(f"the overlay needs about {abs(counts[j]):.3g} contracts of "
                         f"'{inp.instruments[j]}' at a NAV of {inp.nav:.6g}, beyond the "
                         f"{MAX_CONTRACTS:.0e} contracts hedgekit counts exactly.",
                         fix="check [portfolio] nav (in currency units, e.g. 250_000_000) and "
                             "the sheet's price and multiplier.")


def _box(inp: OverlayInputs, n_star: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    step = inp.unit / inp.nav
    reach = np.maximum(SEARCH_MIN, np.ceil(np.abs(n_star)))
    lo = np.floor(n_star) - reach
    hi = np.ceil(n_star) + reach
    with np.errstate(invalid="ignore"):
        lo = np.maximum(lo, np.where(np.isfinite(inp.lo), np.ceil(inp.lo / step - 1e-9), -np.inf))
        hi = np.minimum(hi, np.where(np.isfinite(inp.hi), np.floor(inp.hi / step + 1e-9), np.inf))
    lo[~inp.active] = 0.0
    hi[~inp.active] = 0.0
    return lo, hi


def _risk_rows(inp: OverlayInputs) -> np.ndarray:
    """R with R'R = Sigma_H over all instruments (excluded ones hold 0 anyway)."""
    if inp.risk is not None:
        return np.vstack([inp.risk[0], np.diag(inp.risk[1])])
    from .program import risk_factor
    return risk_factor(inp.sigma)


def _exposure_rows(inp: OverlayInputs, spec: HedgeSpec):
    """Rows (A, u) of A n - m <= u for each miss m (scaled): two per neutralised factor,
    one per finite keep-band side; returns (A, u, owner index of m for each row, #misses)."""
    step = inp.unit / inp.nav
    a_rows, u_rows, owner = [], [], []
    for i, f in enumerate(spec.neutralise):
        k = inp.factors.index(f)
        coef = SCALE * inp.B[:, k] * step
        off = inp.b[k] - spec.target_for(f)
        band = spec.tolerance_for(f) + spec.rounding_slack
        a_rows += [coef, -coef]
        u_rows += [SCALE * (band - off), SCALE * (band + off)]
        owner += [i, i]
    for i, g in enumerate(spec.keep, start=len(spec.neutralise)):
        k = inp.factors.index(g)
        coef = SCALE * inp.B[:, k] * step
        lo, hi = spec.keep[g]
        if np.isfinite(hi):
            a_rows.append(coef)
            u_rows.append(SCALE * (hi + spec.rounding_slack - inp.b[k]))
            owner.append(i)
        if np.isfinite(lo):
            a_rows.append(-coef)
            u_rows.append(SCALE * (inp.b[k] - lo + spec.rounding_slack))
            owner.append(i)
    n_m = len(spec.neutralise) + len(spec.keep)
    return np.array(a_rows).reshape(-1, len(step)), np.array(u_rows), owner, n_m


def _integer_program(inp: OverlayInputs, spec: HedgeSpec, h: np.ndarray
                     ) -> tuple[np.ndarray | None, str]:
    """The two stages; (None, reason) when no integer vector is feasible."""
    from scipy import sparse
    from scipy.optimize import Bounds, LinearConstraint, milp

    step = inp.unit / inp.nav
    n_h = len(h)
    lo_n, hi_n = _box(inp, h / step)
    if np.any(lo_n > hi_n):
        return None, "nearest rounding (no whole contract count lies within a leg's weight bounds)"
    A_e, u_e, owner, n_m = _exposure_rows(inp, spec)
    R = _risk_rows(inp)
    n_r = R.shape[0]
    # x = [n (H), m (n_m), a (H: |w|), t (n_r: |R(w - h)|), q (H: |w - h0|)]
    sizes = [n_h, n_m, n_h, n_r, n_h]
    cut = np.cumsum([0] + sizes)
    n_x = int(cut[-1])

    def block(rows: int, parts: dict[int, np.ndarray]) -> sparse.csr_matrix:
        return sparse.hstack([sparse.csr_matrix(parts[i]) if i in parts
                              else sparse.csr_matrix((rows, sizes[i])) for i in range(5)])

    eye, d_step = np.eye(n_h), np.diag(step)
    own = np.zeros((len(owner), n_m))
    own[np.arange(len(owner)), owner] = -1.0
    rows = [(block(len(owner), {0: A_e, 1: own}), -np.inf, u_e),
            (block(n_h, {0: SCALE * d_step, 2: -SCALE * eye}), -np.inf, 0.0),    # w <= a
            (block(n_h, {0: -SCALE * d_step, 2: -SCALE * eye}), -np.inf, 0.0)]   # -w <= a
    if spec.max_gross is not None:
        rows.append((block(1, {2: np.full((1, n_h), SCALE)}), -np.inf, SCALE * spec.max_gross))
    base = [LinearConstraint(a, lb, ub) for a, lb, ub in rows if a.shape[0]]
    integrality = np.zeros(n_x)
    integrality[:n_h] = 1
    lb = np.concatenate([lo_n, np.zeros(n_x - n_h)])
    ub = np.concatenate([hi_n, np.full(n_x - n_h, np.inf)])
    bounds = Bounds(lb, ub)
    options = {"time_limit": TIME_LIMIT, "mip_rel_gap": 0.0}

    c1 = np.zeros(n_x)
    c1[cut[1]:cut[2]] = 1.0
    first = milp(c1, integrality=integrality, bounds=bounds, constraints=base, options=options)
    if first.x is None:
        return None, "nearest rounding (no whole-contract overlay satisfies the weight bounds " \
                     "and the gross cap)"
    limited = first.status == 1
    best = float(c1 @ first.x)
    Rs = R @ d_step
    tracking = [(block(n_r, {0: Rs, 3: -np.eye(n_r)}), -np.inf, R @ h),      # R(w - h) <= t
                (block(n_r, {0: -Rs, 3: -np.eye(n_r)}), -np.inf, -(R @ h)),
                (block(n_h, {0: d_step, 4: -eye}), -np.inf, inp.h0),         # w - h0 <= q
                (block(n_h, {0: -d_step, 4: -eye}), -np.inf, -inp.h0),
                (block(1, {1: np.ones((1, n_m))}) if n_m else None, -np.inf,
                 best + SCALE * spec.rounding_stage_slack)]
    second_cons = base + [LinearConstraint(a, lb_, ub_) for a, lb_, ub_ in tracking
                          if a is not None]
    c2 = np.zeros(n_x)
    c2[cut[3]:cut[4]] = SCALE
    c2[cut[4]:cut[5]] = SCALE * inp.cost
    second = milp(c2, integrality=integrality, bounds=bounds, constraints=second_cons,
                  options=options)
    x = first.x if second.x is None else second.x
    limited = limited or second.status == 1 or second.x is None
    n = np.rint(x[:n_h]).astype(np.int64)
    return n, INTEGER_PROGRAM + (" (time limit reached: best vector found)" if limited else "")


def _breaches(inp: OverlayInputs, spec: HedgeSpec, h: np.ndarray, n: np.ndarray,
              w: np.ndarray, status: str) -> tuple[str, ...]:
    """What the whole-contract overlay misses, in words: each neutralised factor beyond its
    tolerance + rounding_slack (with the cause: one contract's size against NAV), each kept
    factor outside its band, the cap and the bounds, and every leg rounding to zero."""
    out: list[str] = []
    step = inp.unit / inp.nav
    after = inp.b + inp.B.T @ w

    def size(j: int) -> str:
        of_nav = f"{step[j]:.1%} of" if step[j] < 1 else f"{step[j]:,.0f} times"
        return f"one {inp.instruments[j]} contract is {of_nav} the NAV of {inp.nav:,.0f}"

    all_zero = bool(np.all(n == 0))
    if all_zero:
        j = int(np.argmin(np.where(h != 0, step, np.inf)))
        out.append("every position rounds to zero contracts, so no trade would be placed: "
                   f"the NAV is too small for these contract sizes ({size(j)})")
    if status == "optimal":
        for f in spec.neutralise:
            k = inp.factors.index(f)
            target, tol = spec.target_for(f), spec.tolerance_for(f)
            miss = abs(after[k] - target) - tol
            if miss > spec.rounding_slack + 1e-12:
                text = (f"'{f}' is {after[k]:.4f} in whole contracts, {miss:.3g} outside its "
                        f"tolerance {tol:g} around the target {target:g}")
                if not all_zero:
                    move = np.where(inp.active & (h != 0), np.abs(inp.B[:, k]) * step, 0.0)
                    j = int(np.argmax(move))
                    text += (f" (the NAV is small relative to contract sizes: {size(j)} and "
                             f"moves '{f}' by {move[j]:.3g})")
                out.append(text)
        for g, (band_lo, band_hi) in spec.keep.items():
            value = after[inp.factors.index(g)]
            miss = max(band_lo - value, value - band_hi)
            if miss > spec.rounding_slack + 1e-12:
                out.append(f"kept '{g}' is {value:.4f} in whole contracts, {miss:.3g} outside "
                           f"its band [{band_lo:g}, {band_hi:g}]")
    gross = float(np.abs(w).sum())
    if spec.max_gross is not None and gross > spec.max_gross + 1e-9 * max(1.0, spec.max_gross):
        out.append(f"the rounded gross notional {gross:.2%} of NAV is above the cap "
                   f"max_gross = {spec.max_gross:g} ({spec.max_gross:.2%})")
    for j, name in enumerate(inp.instruments):
        if np.isfinite(inp.hi[j]) and w[j] > inp.hi[j] + 1e-9 * max(1.0, abs(inp.hi[j])):
            out.append(f"{name}'s rounded weight {w[j]:.2%} is above its max_weight "
                       f"{inp.hi[j]:g}")
        if np.isfinite(inp.lo[j]) and w[j] < inp.lo[j] - 1e-9 * max(1.0, abs(inp.lo[j])):
            out.append(f"{name}'s rounded weight {w[j]:.2%} is below its min_weight "
                       f"{inp.lo[j]:g}")
    zero = [i for i, hj, nj in zip(inp.instruments, h, n, strict=True) if hj != 0 and nj == 0]
    if zero and not all_zero and False:  # item 2
        out.append(f"{quoted(zero)} {'gets' if len(zero) == 1 else 'get'} no whole contract "
                   "though the continuous overlay holds "
                   + ("it" if len(zero) == 1 else "them"))
    return tuple(out)
