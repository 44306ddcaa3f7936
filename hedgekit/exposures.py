"""Exposures: time-series betas of returns on the factors, full-sample and rolling.

Model (methods.md section 2): R_{i,t} = a_i + b_i' f_t + e_{i,t}, estimated by OLS for
each series on its own valid months (unbalanced panels are normal).

* Full-sample betas with OLS and Newey-West HAC standard errors (Bartlett kernel, Newey
  and West 1987, Econometrica; default lag floor(4 (T/100)^(2/9)), Newey and West 1994,
  REStud).  The HAC covariance has no small-sample correction, like statsmodels'
  ``OLS.fit(cov_type="HAC")`` with its default ``use_correction=False``.  Lags are counted
  in calendar months: a missing month contributes a zero score, so for a series with only
  leading or trailing gaps the result equals statsmodels on the dropped sample.
* Rolling betas on windows ending at t (months t-window+1..t), from trailing window
  means of the cross-products (one running-sum filter along time for all moments), with
  the factors centred first so the intercept drops out of a K x K system solved by a
  vectorised Cholesky factorisation across all windows and series at once.  Five-year windows follow Fama
  and MacBeth 1973 (JPE); a minimum of 36 valid months is common practice.
* The book: holdings-based b_p = sum_i w_i b_i (exact for OLS on a common sample) and
  the direct regression of the portfolio's own return series, with their gap.
"""

from __future__ import annotations

import math
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .errors import InputError
from .jsonable import jsonable
from .windows import window_moments

__all__ = [
    "BetaEstimates",
    "ExposureResult",
    "RollingBetas",
    "estimate_exposures",
    "exposure_impacts",
    "newey_west_lags",
    "pnl_from_shocks",
    "rolling_betas",
    "time_series_betas",
]

# Series per block in the rolling computation: the block's moments (T x CHUNK x Q floats,
# Q = 27 with five factors, 4 MB for 600 months) stay in cache, and memory is bounded
# whatever N is.
_CHUNK = 64
_THREADS = min(2, os.cpu_count() or 1)


# --------------------------------------------------------------------------- helpers


def newey_west_lags(n_obs: int) -> int:
    """Default Newey-West lag floor(4 (T/100)^(2/9)) (Newey and West 1994, REStud)."""
    if n_obs <= 0:
        return 0
    return int(math.floor(4.0 * (n_obs / 100.0) ** (2.0 / 9.0)))


def _resolve_lags(hac_lags: int | str, n_obs: int, name: str = "hac_lags") -> int:
    if isinstance(hac_lags, str):
        if hac_lags != "auto":
            raise InputError(f"{name} must be 'auto' or a non-negative integer, not {hac_lags!r}.",
                             column=name, fix="Use 'auto' or an integer such as 4.")
        return newey_west_lags(n_obs)
    if isinstance(hac_lags, bool) or not isinstance(hac_lags, int | np.integer) or hac_lags < 0:
        raise InputError(f"{name} must be 'auto' or a non-negative integer, not {hac_lags!r}.",
                         column=name, fix="Use 'auto' or an integer such as 4.")
    return int(hac_lags)


def _as_frame(data: pd.DataFrame | pd.Series, what: str) -> pd.DataFrame:
    """Check a time-indexed table and return it as a float DataFrame."""
    if isinstance(data, pd.Series):
        data = data.to_frame(name=data.name if data.name is not None else what)
    if not isinstance(data, pd.DataFrame):
        raise InputError(f"{what} must be a pandas DataFrame indexed by date, got {type(data).__name__}.",
                         file=what)
    if not isinstance(data.index, pd.PeriodIndex):
        raise InputError(f"{what} must have a monthly or quarterly PeriodIndex named 'date'.",
                         file=what, fix="Convert the index with DataFrame.to_period('M').")
    if data.columns.has_duplicates:
        dup = str(data.columns[data.columns.duplicated()][0])
        raise InputError(f"{what} has the column '{dup}' twice.", file=what, column=dup,
                         fix="Give every series a unique name.")
    if data.index.has_duplicates:
        dup = str(data.index[data.index.duplicated()][0])
        raise InputError(f"{what} has the date {dup} twice.", file=what, row=dup,
                         fix="Keep one row per period.")
    try:
        out = data.astype(float)
    except (TypeError, ValueError) as exc:
        bad = next((str(c) for c in data.columns
                    if not pd.api.types.is_numeric_dtype(data[c])), None)
        raise InputError(f"{what} has non-numeric values ({exc}).", file=what, column=bad,
                         fix="Returns must be decimals; leave missing cells blank.") from exc
    return out


def _align(returns: pd.DataFrame | pd.Series, factors: pd.DataFrame,
           what: str = "returns") -> tuple[pd.PeriodIndex, np.ndarray, np.ndarray, list[str], list[str]]:
    """Inner join on dates; factors must be complete on every date with a return."""
    ret = _as_frame(returns, what)
    fac = _as_frame(factors, "factors")
    if fac.shape[1] == 0:
        raise InputError("factors has no columns.", file="factors", fix="Give at least one factor.")
    if ret.index.freqstr != fac.index.freqstr:
        raise InputError(f"{what} is at frequency {ret.index.freqstr} but factors at {fac.index.freqstr}.",
                         file=what, fix="Use one frequency for every input.")
    dates = ret.index.intersection(fac.index).sort_values()
    ret = ret.loc[dates]
    fac = fac.loc[dates]
    # Months without any return and with blank factors carry no information: drop them.
    # Months without returns but with factors stay, so windows and HAC lags keep
    # counting calendar months.
    keep = (ret.notna().any(axis=1) | fac.notna().all(axis=1)).to_numpy()
    dates = dates[keep]
    ret = ret.loc[dates]
    fac = fac.loc[dates]
    if len(dates) == 0 or not ret.notna().any().any():
        raise InputError(f"{what} and factors share no date with a return.", file=what,
                         fix="Check that both files cover the same months.")
    missing = fac.isna().to_numpy()
    if missing.any():
        t, k = np.argwhere(missing)[0]
        raise InputError("factor value missing on a date with returns.", file="factors",
                         row=str(dates[t]), column=str(fac.columns[k]),
                         fix="Fill the factor or drop that month from the returns.")
    dates = pd.PeriodIndex(dates, name="date")
    return (dates, ret.to_numpy(dtype=float), fac.to_numpy(dtype=float),
            [str(c) for c in ret.columns], [str(c) for c in fac.columns])


def _spd_solve(a: list[list[np.ndarray]], b: list[np.ndarray],
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


_clean = jsonable  # JSON-ready plain python (NaN -> None), shared with every stage


def _series_dict(s: pd.Series | None) -> dict | None:
    if s is None:
        return None
    return {str(k): _clean(v) for k, v in s.items()}


def _frame_dict(df: pd.DataFrame | None) -> dict | None:
    """{row: {column: x}}."""
    if df is None:
        return None
    return {str(r): {str(c): _clean(v) for c, v in zip(df.columns, row, strict=True)}
            for r, row in zip(df.index, df.to_numpy(), strict=True)}


# --------------------------------------------------------------------------- full sample


@dataclass(frozen=True)
class BetaEstimates:
    """Full-sample OLS betas of each series on [1, f].

    ``betas``, ``se_ols``, ``se_hac``, ``t_hac``: series x factor; ``alpha`` with
    ``alpha_se_ols``/``alpha_se_hac``; ``n_obs``, ``r2``, ``resid_var`` (SSR/(n-K-1));
    ``residuals`` T x N (NaN where missing); ``hac_lags``; ``cov_hac`` (N, K+1, K+1) over
    [alpha, factors].
    """

    betas: pd.DataFrame
    alpha: pd.Series
    se_ols: pd.DataFrame
    se_hac: pd.DataFrame
    t_hac: pd.DataFrame
    n_obs: pd.Series
    r2: pd.Series
    resid_var: pd.Series
    residuals: pd.DataFrame
    hac_lags: int
    alpha_se_ols: pd.Series
    alpha_se_hac: pd.Series
    cov_hac: np.ndarray = field(repr=False)
    warnings: tuple[str, ...] = ()

    @property
    def factors(self) -> tuple[str, ...]:
        return tuple(str(c) for c in self.betas.columns)

    def to_dict(self) -> dict:
        return {
            "factors": list(self.factors),
            "betas": _frame_dict(self.betas),
            "alpha": _series_dict(self.alpha),
            "se_ols": _frame_dict(self.se_ols),
            "se_hac": _frame_dict(self.se_hac),
            "t_hac": _frame_dict(self.t_hac),
            "alpha_se_hac": _series_dict(self.alpha_se_hac),
            "n_obs": {str(k): int(v) for k, v in self.n_obs.items()},
            "r2": _series_dict(self.r2),
            "resid_var": _series_dict(self.resid_var),
            "hac_lags": int(self.hac_lags),
            "warnings": list(self.warnings),
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per series: alpha, betas, HAC standard errors, n_obs, R²."""
        se = self.se_hac.add_prefix("se_hac.")
        out = pd.concat([self.alpha.rename("alpha"), self.betas, se,
                         self.n_obs.rename("n_obs"), self.r2.rename("r2")], axis=1)
        out.index.name = "series"
        return out


def _hac_meat(x: np.ndarray, e0: np.ndarray, lags: int) -> np.ndarray:
    """Bartlett-weighted sum of score cross-products per series, shape (N, P, P).

    S_i = sum_t e_ti^2 x_t x_t' + sum_{l=1}^{L} (1 - l/(L+1)) (G_l + G_l'),
    G_l = sum_t e_ti e_{t-l,i} x_t x_{t-l}'  (Newey and West 1987).
    """
    t, p = x.shape
    outer0 = np.einsum("tk,tl->tkl", x, x).reshape(t, p * p)
    meat = ((e0 * e0).T @ outer0).reshape(-1, p, p)
    for lag in range(1, min(lags, t - 1) + 1):
        w = 1.0 - lag / (lags + 1.0)
        outer = np.einsum("tk,tl->tkl", x[lag:], x[:-lag]).reshape(t - lag, p * p)
        g = ((e0[lag:] * e0[:-lag]).T @ outer).reshape(-1, p, p)
        meat += w * (g + g.transpose(0, 2, 1))
    return meat


def time_series_betas(returns: pd.DataFrame | pd.Series, factors: pd.DataFrame, *,
                      hac_lags: int | str = "auto") -> BetaEstimates:
    """OLS of each series on [1, f] over its own valid months, with OLS and HAC errors.

    b_i = (X_i'X_i)^{-1} X_i'y_i; Var_OLS = s² (X_i'X_i)^{-1}, s² = SSR/(n_i - K - 1);
    Var_HAC = (X'X)^{-1} S (X'X)^{-1} with the Bartlett meat S (Newey and West 1987).
    ``hac_lags="auto"`` uses floor(4 (T/100)^(2/9)) with T the longest series' months.
    Vectorised over series: the normal equations are masked matrix products.
    """
    dates, y, f, names, fnames = _align(returns, factors)
    t, n = y.shape
    k = f.shape[1]
    p = k + 1
    mask = np.isfinite(y)
    m = mask.astype(float)
    y0 = np.where(mask, y, 0.0)
    x = np.column_stack([np.ones(t), f])
    n_obs = mask.sum(axis=0)
    lags = _resolve_lags(hac_lags, int(n_obs.max()) if n else 0)

    outer = np.einsum("tk,tl->tkl", x, x).reshape(t, p * p)
    xtx = (m.T @ outer).reshape(n, p, p)
    xty = y0.T @ x
    notes: list[str] = []
    ok = n_obs >= k + 2
    if ok.any():
        # Rank check on the scaled normal matrix: a factor constant over a series' months.
        scale = np.sqrt(np.einsum("nii->ni", xtx))
        scale[scale == 0] = 1.0
        corr = xtx / scale[:, :, None] / scale[:, None, :]
        eig = np.linalg.eigvalsh(np.where(ok[:, None, None], corr, np.eye(p)))
        ok &= eig[:, 0] > 1e-12 * eig[:, -1]
    for i in np.flatnonzero(~ok):
        notes.append(f"{names[i]}: {int(n_obs[i])} valid months (or a rank-deficient design);"
                     f" at least {k + 2} needed, betas left blank.")
    safe = np.where(ok[:, None, None], xtx, np.eye(p))
    inv = np.linalg.inv(safe)
    coef = np.einsum("nkl,nl->nk", inv, xty)
    coef[~ok] = np.nan
    fitted = x @ coef.T
    resid = np.where(mask, y - fitted, np.nan)
    resid[:, ~ok] = np.nan
    e0 = np.where(np.isfinite(resid), resid, 0.0)
    ssr = (e0 * e0).sum(axis=0)
    dof = n_obs - p
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = np.where(ok, ssr / dof, np.nan)
        ybar = y0.sum(axis=0) / n_obs
        sst = (np.where(mask, y - ybar, 0.0) ** 2).sum(axis=0)
        r2 = np.where(ok, 1.0 - ssr / sst, np.nan)
    diag_inv = np.einsum("nii->ni", inv)
    se_ols = np.sqrt(s2[:, None] * diag_inv)
    cov_hac = inv @ _hac_meat(x, e0, lags) @ inv
    cov_hac[~ok] = np.nan
    se_hac = np.sqrt(np.einsum("nii->ni", cov_hac))

    idx = pd.Index(names, name="series")
    cols = pd.Index(fnames, name="factor")
    with np.errstate(invalid="ignore", divide="ignore"):
        t_hac = coef[:, 1:] / se_hac[:, 1:]
    return BetaEstimates(
        betas=pd.DataFrame(coef[:, 1:], index=idx, columns=cols),
        alpha=pd.Series(coef[:, 0], index=idx, name="alpha"),
        se_ols=pd.DataFrame(se_ols[:, 1:], index=idx, columns=cols),
        se_hac=pd.DataFrame(se_hac[:, 1:], index=idx, columns=cols),
        t_hac=pd.DataFrame(t_hac, index=idx, columns=cols),
        n_obs=pd.Series(n_obs.astype(int), index=idx, name="n_obs"),
        r2=pd.Series(r2, index=idx, name="r2"),
        resid_var=pd.Series(s2, index=idx, name="resid_var"),
        residuals=pd.DataFrame(resid, index=dates, columns=pd.Index(names)),
        hac_lags=lags,
        alpha_se_ols=pd.Series(se_ols[:, 0], index=idx, name="alpha_se_ols"),
        alpha_se_hac=pd.Series(se_hac[:, 0], index=idx, name="alpha_se_hac"),
        cov_hac=cov_hac,
        warnings=tuple(notes),
    )


# --------------------------------------------------------------------------- rolling


@dataclass(frozen=True)
class RollingBetas:
    """Rolling betas: ``values[t, i, k]`` from the window ending at ``dates[t]``.

    Row t uses months t-window+1..t (``lagged=False``) or t-window..t-1 (after
    :meth:`lagged`); NaN where a window has fewer than ``min_obs`` valid months.
    """

    values: np.ndarray = field(repr=False)
    dates: pd.PeriodIndex
    series: tuple[str, ...]
    factors: tuple[str, ...]
    n_obs: np.ndarray = field(repr=False)
    window: int = 60
    min_obs: int = 36
    is_lagged: bool = False

    def lagged(self) -> RollingBetas:
        """Shift one period: row t then uses months t-window..t-1 only (no look-ahead)."""
        vals = np.full_like(self.values, np.nan)
        vals[1:] = self.values[:-1]
        obs = np.zeros_like(self.n_obs)
        obs[1:] = self.n_obs[:-1]
        return RollingBetas(vals, self.dates, self.series, self.factors, obs,
                            self.window, self.min_obs, True)

    def frame(self, series_name: str) -> pd.DataFrame:
        """dates x factors for one series."""
        try:
            i = self.series.index(series_name)
        except ValueError as exc:
            raise InputError(f"no rolling betas for '{series_name}'.", column=series_name,
                             fix=f"Use one of: {', '.join(self.series[:10])}.") from exc
        return pd.DataFrame(self.values[:, i, :], index=self.dates,
                            columns=pd.Index(self.factors, name="factor"))

    def to_frame(self) -> pd.DataFrame:
        """Long table: (date, series) x factors."""
        t, n, k = self.values.shape
        idx = pd.MultiIndex.from_product([self.dates, list(self.series)], names=["date", "series"])
        return pd.DataFrame(self.values.reshape(t * n, k), index=idx,
                            columns=pd.Index(self.factors, name="factor"))

    def to_dict(self) -> dict:
        return {
            "dates": [str(d) for d in self.dates],
            "factors": list(self.factors),
            "window": self.window,
            "min_obs": self.min_obs,
            "lagged": self.is_lagged,
            "series": {s: {f: _clean(self.values[:, i, j]) for j, f in enumerate(self.factors)}
                       for i, s in enumerate(self.series)},
        }


def _rolling_block(y: np.ndarray, fc: np.ndarray, window: int, min_obs: int, *,
                   out: np.ndarray, counts: np.ndarray) -> None:
    """Rolling betas of one block of series on centred factors into ``out`` (n, T, K) and
    their valid-month counts into ``counts`` (n, T).

    Window moments S_ff - s_f s_f'/n and S_fy - s_f s_y/n (each series over its own valid
    months, :func:`hedgekit.windows.window_moments`) give the slope of the OLS on [1, f]
    (the intercept partialled out, Frisch-Waugh-Lovell), solved by a batched Cholesky.
    """
    k = fc.shape[1]
    mom = window_moments(fc, y, mask=np.isfinite(y), window=window)
    # (n, T) views, contiguous along time in the moments' own buffer, centred in place.
    with np.errstate(invalid="ignore", divide="ignore"):
        inv_n = 1.0 / mom.count.T
        s_f = [mom.sx[..., j].T for j in range(k)]
        mean_f = [sf * inv_n for sf in s_f]
        # Uncentred second moments: the yardstick for a pivot lost to cancellation.
        raw_diag = [mom.xx(j, j).T.copy() for j in range(k)]
        tmp = np.empty_like(inv_n)
        a: list[list[np.ndarray]] = [[None] * k for _ in range(k)]  # type: ignore[list-item]
        for i in range(k):
            for j in range(i + 1):
                a[i][j] = mom.xx(i, j).T
                a[i][j] -= np.multiply(s_f[i], mean_f[j], out=tmp)
        b = []
        for j in range(k):
            s_fy = mom.sxy[..., j].T
            s_fy -= np.multiply(mean_f[j], mom.sy.T, out=tmp)
            b.append(s_fy)
    x = _spd_solve(a, b, raw_diag)
    np.stack(x, axis=-1, out=out)
    counts[:] = mom.count.T
    out[counts < max(min_obs, k + 2)] = np.nan


def rolling_betas(returns: pd.DataFrame | pd.Series, factors: pd.DataFrame, *,
                  window: int = 60, min_obs: int = 36) -> RollingBetas:
    """Rolling OLS slopes of each series on [1, f] over windows ending at each month.

    Each series and window uses its own valid months; NaN with fewer than ``min_obs``
    (and never fewer than K+2).  Vectorised over series and windows (running window sums
    of cross-products, a batched Cholesky solve); series are processed in blocks of 64,
    on two threads, so memory stays bounded and the blocks stay in cache.  The first
    rows (t < window-1) use the months available so far when there are ``min_obs``.
    """
    if isinstance(window, bool) or not isinstance(window, int | np.integer) or window < 2:
        raise InputError(f"window must be an integer of at least 2 months, not {window!r}.",
                         column="window", fix="Use 60 (five years) or 'full' in the configuration.")
    if isinstance(min_obs, bool) or not isinstance(min_obs, int | np.integer) or min_obs < 1:
        raise InputError(f"min_obs must be a positive integer, not {min_obs!r}.", column="min_obs",
                         fix="Use 36.")
    if min_obs > window:
        raise InputError(f"min_obs ({min_obs}) is larger than the window ({window}).",
                         column="min_obs", fix="Make min_obs at most the window length.")
    dates, y, f, names, fnames = _align(returns, factors)
    t, n = y.shape
    k = f.shape[1]
    fc = f - f.mean(axis=0)
    # Series-major storage so each block writes one contiguous slab; exposed as (T, N, K).
    store = np.empty((n, t, k))
    counts_store = np.empty((n, t), dtype=np.int64)

    def run(start: int) -> None:
        stop = min(start + _CHUNK, n)
        _rolling_block(y[:, start:stop], fc, int(window), int(min_obs),
                       out=store[start:stop], counts=counts_store[start:stop])

    # Blocks of series bound the memory and stay in cache; numpy releases the GIL inside
    # each block, so two threads use two cores.  Results do not depend on the threading.
    starts = range(0, n, _CHUNK)
    if len(starts) >= 4 and _THREADS > 1:
        with ThreadPoolExecutor(max_workers=_THREADS) as pool:
            list(pool.map(run, starts))
    else:
        for start in starts:
            run(start)
    return RollingBetas(store.transpose(1, 0, 2), dates, tuple(names), tuple(fnames), counts_store.T,
                        int(window), int(min_obs))


# --------------------------------------------------------------------------- the book


@dataclass(frozen=True)
class ExposureResult:
    """Exposures of test assets, instruments and the book.

    ``book`` is the holdings-based w'b when holdings are given, else the direct
    regression of the portfolio's own return series.  ``book_se`` for holdings-based
    exposures is the HAC standard error of the regression of the weighted return series
    sum_i w_i R_i on the months where every held asset is observed (exact sampling
    error of w'b on that common sample).  ``book_gap`` = holdings - direct.
    """

    factors: tuple[str, ...]
    assets: BetaEstimates
    instruments: BetaEstimates | None
    book: pd.Series
    book_se: pd.Series
    book_direct: BetaEstimates | None
    book_gap: pd.Series | None
    rolling_book: pd.DataFrame | None
    rolling_assets: RollingBetas | None
    factor_sd: pd.Series
    holdings: pd.Series
    book_source: str = "holdings"
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        rolling = None
        if self.rolling_book is not None:
            rolling = {"dates": [str(d) for d in self.rolling_book.index],
                       "portfolio": {str(c): _clean(self.rolling_book[c].to_numpy())
                                     for c in self.rolling_book.columns}}
        direct = self.book_direct
        return {
            "factors": list(self.factors),
            "portfolio": _series_dict(self.book),
            "portfolio_se": _series_dict(self.book_se),
            "portfolio_hac_se": _series_dict(self.book_se),
            "portfolio_source": self.book_source,
            "assets": _frame_dict(self.assets.betas),
            "instruments": _frame_dict(self.instruments.betas) if self.instruments is not None else {},
            "rolling": rolling,
            "portfolio_direct": (_series_dict(direct.betas.iloc[0]) if direct is not None else None),
            "portfolio_direct_se": (_series_dict(direct.se_hac.iloc[0]) if direct is not None else None),
            "gap": _series_dict(self.book_gap),
            "holdings": _series_dict(self.holdings),
            "factor_sd": _series_dict(self.factor_sd),
            "assets_se_hac": _frame_dict(self.assets.se_hac),
            "assets_alpha": _series_dict(self.assets.alpha),
            "assets_n_obs": {str(k): int(v) for k, v in self.assets.n_obs.items()},
            "assets_r2": _series_dict(self.assets.r2),
            "instruments_se_hac": (_frame_dict(self.instruments.se_hac)
                                   if self.instruments is not None else {}),
            "hac_lags": int(self.assets.hac_lags),
            "warnings": list(self.warnings),
        }

    def impacts(self, nav: float) -> pd.DataFrame:
        """The book's return and P&L for a one-standard-deviation move in each factor."""
        return exposure_impacts(self.book, self.factor_sd, nav)

    def pnl(self, shocks: pd.Series | dict, nav: float) -> pd.DataFrame:
        """The book's return and P&L for the given factor shocks (see :func:`pnl_from_shocks`)."""
        return pnl_from_shocks(self.book, shocks, nav)

    def to_frame(self) -> pd.DataFrame:
        """The book's exposure table: factor x [beta, se, direct, gap, factor_sd]."""
        out = pd.DataFrame({"beta": self.book, "se": self.book_se})
        if self.book_direct is not None:
            out["direct"] = self.book_direct.betas.iloc[0]
            out["direct_se"] = self.book_direct.se_hac.iloc[0]
        if self.book_gap is not None:
            out["gap"] = self.book_gap
        out["factor_sd"] = self.factor_sd
        out.index.name = "factor"
        return out


def _holdings_series(holdings: pd.Series | pd.DataFrame | dict) -> pd.Series:
    if isinstance(holdings, dict):
        holdings = pd.Series(holdings, dtype=float)
    if isinstance(holdings, pd.DataFrame):
        if {"asset", "weight"} <= set(holdings.columns):
            holdings = holdings.set_index("asset")["weight"]
        elif holdings.shape[1] == 1:
            holdings = holdings.iloc[:, 0]
        else:
            raise InputError("holdings must have the columns asset,weight.", file="holdings",
                             fix="Write one row per asset: asset,weight.")
    w = pd.to_numeric(holdings, errors="coerce")
    w.index = w.index.map(str)
    if w.isna().any():
        bad = str(w.index[w.isna().to_numpy()][0])
        raise InputError("weight is blank or not a number.", file="holdings", row=bad,
                         column="weight", fix="Give every holding a decimal weight of NAV.")
    if w.index.has_duplicates:
        bad = str(w.index[w.index.duplicated()][0])
        raise InputError("asset listed twice.", file="holdings", row=bad, column="asset",
                         fix="Merge the rows into one weight.")
    return w.astype(float).rename("weight")


def estimate_exposures(factors: pd.DataFrame, assets: pd.DataFrame, *,
                       instruments: pd.DataFrame | None = None,
                       holdings: pd.Series | pd.DataFrame | dict | None = None,
                       portfolio_returns: pd.DataFrame | pd.Series | None = None,
                       window: int | None = 60, min_obs: int = 36,
                       hac_lags: int | str = "auto") -> ExposureResult:
    """Exposures of the test assets, the instruments and the book on the factors.

    Book exposure b_p = sum_i w_i b_i from holdings (weights of NAV; they need not sum to
    one, the rest is cash or leverage) and, when the portfolio's own returns are given,
    the direct regression with the gap between the two.  ``window=None`` skips rolling.
    """
    if holdings is None and portfolio_returns is None:
        raise InputError("the book needs holdings or the portfolio's own returns.",
                         file="configuration", column="data",
                         fix="Set data.holdings and/or data.portfolio_returns.")
    notes: list[str] = []
    asset_est = time_series_betas(assets, factors, hac_lags=hac_lags)
    notes.extend(asset_est.warnings)
    fnames = asset_est.factors
    inst_est = None
    if instruments is not None:
        inst_est = time_series_betas(instruments, factors, hac_lags=hac_lags)
        notes.extend(f"instrument {w}" for w in inst_est.warnings)

    weights = pd.Series(dtype=float, name="weight")
    book_hold = book_hold_se = None
    if holdings is not None:
        weights = _holdings_series(holdings)
        unknown = [a for a in weights.index if a not in asset_est.betas.index]
        if unknown:
            raise InputError(f"held asset '{unknown[0]}' is not a column of the assets file.",
                             file="holdings", row=unknown[0], column="asset",
                             fix="Add its returns to assets or remove the holding.")
        held = asset_est.betas.loc[weights.index]
        blank = held.index[held.isna().any(axis=1)]
        if len(blank):
            raise InputError(f"held asset '{blank[0]}' has too few valid months for betas.",
                             file="assets", column=str(blank[0]),
                             fix="Supply a longer return history or drop the holding.")
        book_hold = pd.Series(weights.to_numpy() @ held.to_numpy(), index=held.columns, name="beta")
        ret = _as_frame(assets, "assets")[list(weights.index)]
        complete = ret.notna().all(axis=1)
        weighted = (ret[complete] @ weights).rename("book").to_frame()
        if len(weighted) < len(fnames) + 2:
            raise InputError("held assets share too few complete months for a book standard error.",
                             file="assets", fix="Check the held assets' histories overlap.")
        wreg = time_series_betas(weighted, factors, hac_lags=hac_lags)
        book_hold_se = wreg.se_hac.iloc[0].rename("se")
        if (ret.notna().sum(axis=0) > complete.sum()).any():
            notes.append("held assets have different valid months: w'b uses each asset's own "
                         "months; its standard error uses the months where all are observed.")

    direct = None
    if portfolio_returns is not None:
        pr = _as_frame(portfolio_returns, "portfolio_returns")
        if pr.shape[1] != 1:
            raise InputError(f"portfolio_returns must have one return column, found {pr.shape[1]}.",
                             file="portfolio_returns", fix="Keep date and one return column.")
        direct = time_series_betas(pr, factors, hac_lags=hac_lags)
        notes.extend(f"portfolio {w}" for w in direct.warnings)

    if book_hold is not None:
        book, book_se, source = book_hold, book_hold_se, "holdings"
        gap = (book_hold - direct.betas.iloc[0]).rename("gap") if direct is not None else None
    else:
        book = direct.betas.iloc[0].rename("beta")
        book_se = direct.se_hac.iloc[0].rename("se")
        source, gap = "direct", None

    rolling_assets = rolling_book = None
    if window is not None:
        rolling_assets = rolling_betas(assets, factors, window=window, min_obs=min_obs)
        if book_hold is not None:
            pos = [rolling_assets.series.index(a) for a in weights.index]
            vals = np.einsum("tnk,n->tk", rolling_assets.values[:, pos, :], weights.to_numpy())
            rolling_book = pd.DataFrame(vals, index=rolling_assets.dates, columns=list(fnames))
        else:
            rb = rolling_betas(portfolio_returns, factors, window=window, min_obs=min_obs)
            rolling_book = pd.DataFrame(rb.values[:, 0, :], index=rb.dates, columns=list(fnames))
        rolling_book.index.name = "date"

    dates = asset_est.residuals.index
    fac = _as_frame(factors, "factors").loc[dates]
    factor_sd = fac.std(ddof=1).rename("factor_sd")
    return ExposureResult(
        factors=fnames, assets=asset_est, instruments=inst_est, book=book, book_se=book_se,
        book_direct=direct, book_gap=gap, rolling_book=rolling_book, rolling_assets=rolling_assets,
        factor_sd=factor_sd, holdings=weights, book_source=source, warnings=tuple(notes))


# --------------------------------------------------------------------------- readings


def exposure_impacts(book_betas: pd.Series, factor_sd: pd.Series, nav: float) -> pd.DataFrame:
    """Return and currency P&L of a one-standard-deviation move in each factor.

    return_1sd_k = b_k sd(f_k); pnl_1sd_k = return_1sd_k x NAV.
    """
    b = pd.Series(book_betas, dtype=float)
    sd = pd.Series(factor_sd, dtype=float)
    missing = [f for f in b.index if f not in sd.index]
    if missing:
        raise InputError(f"no standard deviation for factor '{missing[0]}'.", column=str(missing[0]),
                         fix="Pass factor_sd for every factor of the betas.")
    sd = sd.loc[b.index]
    out = pd.DataFrame({"beta": b, "factor_sd": sd, "return_1sd": b * sd,
                        "pnl_1sd": b * sd * float(nav)})
    out.index.name = "factor"
    return out


def pnl_from_shocks(betas: pd.Series | pd.DataFrame, shocks: pd.Series | dict,
                    nav: float) -> pd.DataFrame:
    """Return and P&L from factor shocks: r = b's, P&L = r x NAV.

    A Series of betas (one book) gives a table by factor plus a ``total`` row with
    columns shock, beta, return, pnl.  A DataFrame (series x factor) gives one row per
    series with columns return, pnl.  Factors without a shock count as zero.
    """
    s = pd.Series(shocks, dtype=float)
    if isinstance(betas, pd.DataFrame):
        unknown = [f for f in s.index if f not in betas.columns]
        if unknown:
            raise InputError(f"shock on unknown factor '{unknown[0]}'.", column=str(unknown[0]),
                             fix=f"Use one of: {', '.join(map(str, betas.columns))}.")
        s = s.reindex(betas.columns, fill_value=0.0)
        r = betas.to_numpy(dtype=float) @ s.to_numpy()
        out = pd.DataFrame({"return": r, "pnl": r * float(nav)}, index=betas.index)
        return out
    b = pd.Series(betas, dtype=float)
    unknown = [f for f in s.index if f not in b.index]
    if unknown:
        raise InputError(f"shock on unknown factor '{unknown[0]}'.", column=str(unknown[0]),
                         fix=f"Use one of: {', '.join(map(str, b.index))}.")
    s = s.reindex(b.index, fill_value=0.0)
    out = pd.DataFrame({"shock": s, "beta": b, "return": b * s})
    out["pnl"] = out["return"] * float(nav)
    total = pd.DataFrame({"shock": [np.nan], "beta": [np.nan], "return": [out["return"].sum()],
                          "pnl": [out["pnl"].sum()]}, index=["total"])
    out = pd.concat([out, total])
    out.index.name = "factor"
    return out
