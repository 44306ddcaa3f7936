"""Small numerical kernels shared by the estimators (exposures, premia, the walk-forward).

* :func:`spd_solve` -- many symmetric positive definite K x K systems solved at once by a
  Cholesky factorisation written over arrays (one entry per system), looping over K only.
* :func:`newey_west_lags`, :func:`resolve_lags` -- the Newey-West lag rule and its checks.
* :func:`bartlett_long_run` -- the Bartlett-weighted long-run covariance sum of a series.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import InputError

__all__ = ["bartlett_long_run", "newey_west_lags", "resolve_lags", "spd_solve"]


def newey_west_lags(n_obs: int) -> int:
    """Default Newey-West lag floor(4 (T/100)^(2/9)) (Newey and West 1994, REStud)."""
    if n_obs <= 0:
        return 0
    return int(math.floor(4.0 * (n_obs / 100.0) ** (2.0 / 9.0)))


def resolve_lags(hac_lags: int | str, n_obs: int, name: str = "hac_lags") -> int:
    """``"auto"`` -> :func:`newey_west_lags` of ``n_obs``; a non-negative integer as given."""
    if isinstance(hac_lags, str):
        if hac_lags != "auto":
            raise InputError(f"{name} must be 'auto' or a non-negative integer, not {hac_lags!r}.",
                             column=name, fix="Use 'auto' or an integer such as 4.")
        return newey_west_lags(n_obs)
    if isinstance(hac_lags, bool) or not isinstance(hac_lags, int | np.integer) or hac_lags < 0:
        raise InputError(f"{name} must be 'auto' or a non-negative integer, not {hac_lags!r}.",
                         column=name, fix="Use 'auto' or an integer such as 4.")
    return int(hac_lags)


def spd_solve(a: list[list[np.ndarray]], b: list[np.ndarray],
               scale: list[np.ndarray] | None = None) -> list[np.ndarray]:
    """Solve A x = b for many symmetric positive definite K x K systems at once.

    ``a[i][j]`` (i >= j used) and ``b[i]`` are arrays of one common shape, one entry per
    system; Cholesky A = L L' then two triangular solves, looping over K only.  Systems
    that are not positive definite (a pivot below 1e-12 of ``scale``, by default the
    diagonal entry) give NaN.  Works in place: ``a`` and ``b`` are
    overwritten.
    """
    k = len(b)
    low: list[list[np.ndarray | None]] = [[None] * k for _ in range(k)]
    tmp = np.empty_like(b[0])

    def sub_prod(target: np.ndarray, u: np.ndarray, v: np.ndarray) -> None:
        np.multiply(u, v, out=tmp)
        target -= tmp

    # inv[j] = 1 / L_jj: multiplications instead of divisions in the hot loops.
    inv: list[np.ndarray] = []
    with np.errstate(invalid="ignore", divide="ignore"):
        for j in range(k):
            d = a[j][j]
            ref = scale[j] if scale is not None else d.copy()
            for m in range(j):
                sub_prod(d, low[j][m], low[j][m])
            # A pivot that cancels to round-off means a (near) singular design: blank.
            d[~(d > 1e-12 * ref)] = np.nan
            np.sqrt(d, out=d)
            np.divide(1.0, d, out=d)
            inv.append(d)
            for i in range(j + 1, k):
                s = a[i][j]
                for m in range(j):
                    sub_prod(s, low[i][m], low[j][m])
                s *= d
                low[i][j] = s
        z: list[np.ndarray] = []
        for i in range(k):
            s = b[i]
            for m in range(i):
                sub_prod(s, low[i][m], z[m])
            s *= inv[i]
            z.append(s)
        x: list[np.ndarray | None] = [None] * k
        for i in reversed(range(k)):
            s = z[i]
            for m in range(i + 1, k):
                sub_prod(s, low[m][i], x[m])
            s *= inv[i]
            x[i] = s
    return x  # type: ignore[return-value]


def bartlett_long_run(dev: np.ndarray, lags: int) -> np.ndarray:
    """Sum_t d_t d_t' + sum_{l=1}^{L} (1 - l/(L+1)) (G_l + G_l'), G_l = sum_t d_t d_{t-l}'.

    ``dev`` (T, K) are deviations from the mean; divide by T (T - 1) for the Newey-West
    variance of a mean in the Fama-MacBeth scaling (Newey and West 1987, Econometrica).
    """
    s = dev.T @ dev
    for lag in range(1, min(lags, len(dev) - 1) + 1):
        g = dev[lag:].T @ dev[:-lag]
        s += (1.0 - lag / (lags + 1.0)) * (g + g.T)
    return s
