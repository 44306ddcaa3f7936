"""State variables and their innovations: VAR(p), Gram-Schmidt, real-time innovations.

The state vector z_t (market excess return first, then state-variable levels, in the
orthogonalisation order) follows a VAR(p) estimated equation by equation by OLS,

    z_t = c + A_1 z_{t-1} + ... + A_p z_{t-p} + u_t

(Hamilton 1994, *Time Series Analysis*, ch. 11; Lütkepohl 2005, *New Introduction to
Multiple Time Series Analysis*, ch. 3).  The raw innovations u_t are orthogonalised in
the given order by Gram-Schmidt on the sample series and scaled to the market
innovation's standard deviation: ũ_t = M u_t, M = D L^{-1}, L = chol(cov(u)),
D = L[0, 0] I.  A positive innovation is an upward surprise in that variable.

Real-time innovations (for backtests) come from an expanding or rolling VAR whose
cross-product sums are accumulated over time and solved for every date at once.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy.linalg import solve_triangular

from .errors import InputError
from .jsonable import jsonable
from .windows import window_moments

__all__ = [
    "LagSelection",
    "RealtimeInnovations",
    "StateResult",
    "comove_surprise",
    "estimate_states",
    "orthogonalise",
    "realtime_innovations",
    "select_lags",
    "surprise_to_shocks",
]

#: Residual degrees of freedom a VAR must keep beyond its K*p + 1 coefficients per
#: equation (common practice: enough for a positive-definite residual covariance and a
#: usable standard error).
MIN_DF_RESID = 10
_CRITERIA = {"aic": "aic", "bic": "bic", "hq": "hqic", "hqic": "hqic", "fpe": "fpe"}
_READINGS = ("isolated", "comove")
#: Relative size below which a QR pivot or Cholesky pivot counts as zero (common practice).
_RANK_TOL = 1e-10


# ----------------------------------------------------------------------------- helpers



def _series_dict(frame: pd.DataFrame) -> dict[str, list]:
    return {str(c): jsonable(frame[c].to_numpy(dtype=float)) for c in frame.columns}


def _regressor_names(variables: tuple[str, ...], lags: int) -> list[str]:
    return [f"{v}.L{k}" for k in range(1, lags + 1) for v in variables]


def _prepare(data: pd.DataFrame) -> pd.DataFrame:
    """Validate the state frame; drop leading rows with a NaN; float columns."""
    if not isinstance(data, pd.DataFrame):
        raise InputError("state data must be a DataFrame with one column per state variable.",
                         fix="pass a DataFrame indexed by a PeriodIndex named 'date'.")
    if not isinstance(data.index, pd.PeriodIndex):
        raise InputError("state data must be indexed by a monthly or quarterly PeriodIndex.",
                         fix="convert the index with DataFrame.to_period('M').")
    if data.shape[1] == 0:
        raise InputError("state data has no columns.", fix="list the market and state columns.")
    names = [str(c) for c in data.columns]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"state variables appear twice: {', '.join(dup)}.", column=dup[0],
                         fix="list every state variable once in the order.")
    try:
        values = np.array(data.to_numpy(dtype=float, na_value=np.nan), dtype=float, copy=True)
    except (TypeError, ValueError) as exc:
        bad = [c for c in names if not pd.api.types.is_numeric_dtype(data[c])]
        raise InputError("state data has non-numeric values.", column=bad[0] if bad else None,
                         fix="state levels and returns must be decimals.") from exc
    idx = data.index
    if idx.has_duplicates:
        d = idx[idx.duplicated()][0]
        raise InputError("a date appears twice in the state data.", row=str(d),
                         fix="keep one row per period.")
    if len(idx) > 1:
        steps = np.diff(idx.asi8)
        if (steps != 1).any():
            j = int(np.flatnonzero(steps != 1)[0]) + 1
            what = "dates are not in order" if steps[j - 1] < 1 else "a period is missing before"
            raise InputError(f"state data {what} {idx[j]}.", row=str(idx[j]),
                             fix="sort the rows and fill or remove the gap (every period needs a row).")
    values[~np.isfinite(values)] = np.nan
    bad_row = np.isnan(values).any(axis=1)
    start = int(np.argmin(bad_row)) if not bad_row.all() else len(bad_row)
    if start == len(bad_row):
        raise InputError("every row of the state data has a missing value.",
                         fix="check the file: each state variable needs values.")
    rest = np.isnan(values[start:])
    if rest.any():
        r, c = np.argwhere(rest)[0]
        raise InputError("missing value inside the state sample.", row=str(idx[start + r]),
                         column=names[c], fix="fill the gap or shorten the sample.")
    out = pd.DataFrame(values[start:], index=idx[start:], columns=names)
    out.index.name = "date"
    _check_variation(out)
    return out


def _check_variation(clean: pd.DataFrame) -> None:
    """No constant state, no two identical or perfectly collinear states."""
    z = clean.to_numpy()
    names = list(clean.columns)
    sd = z.std(axis=0)
    scale = np.maximum(np.abs(z).max(axis=0), 1e-300)
    flat = [n for n, s, m in zip(names, sd, scale, strict=True) if s <= 1e-12 * m]
    if flat:
        raise InputError(f"state variable(s) with no variation: {', '.join(flat)}.",
                         column=flat[0], fix="drop the variable from the order or fix its data.")
    for j in range(1, len(names)):
        same = [names[i] for i in range(j) if np.array_equal(z[:, i], z[:, j])]
        if same:
            raise InputError(f"state variables '{same[0]}' and '{names[j]}' are identical.",
                             column=names[j], fix="drop one of them from the order.")
    if len(names) > 1 and z.shape[0] > len(names):
        zs = (z - z.mean(axis=0)) / sd
        r = np.abs(np.diag(np.linalg.qr(zs, mode="r")))
        rel = r / np.sqrt(z.shape[0])
        for j in np.flatnonzero(rel < 1e-8):
            if j == 0:
                continue
            raise InputError(
                f"state variable '{names[j]}' is a linear combination of "
                f"{', '.join(names[:j])} (perfectly collinear).",
                column=names[j], fix="drop one of the collinear variables from the order.")


def _lagged(z: np.ndarray, lags: int) -> tuple[np.ndarray, np.ndarray]:
    """Regressors X = [1, z_{t-1}, ..., z_{t-p}] and targets Y = z_t for t = p..T-1."""
    t = z.shape[0]
    parts = [np.ones((t - lags, 1))] + [z[lags - k:t - k] for k in range(1, lags + 1)]
    return np.hstack(parts), z[lags:]


def _min_obs(k: int, lags: int) -> int:
    return k * lags + 1 + max(MIN_DF_RESID, k)


def _check_length(n_rows: int, k: int, lags: int, variables) -> None:
    need = _min_obs(k, lags) + lags
    if n_rows < need:
        raise InputError(
            f"too few periods for a VAR({lags}) of {k} variables ({', '.join(variables)}): "
            f"{n_rows} usable rows, need at least {need} (K*p + 1 coefficients per equation "
            f"plus {max(MIN_DF_RESID, k)} residual degrees of freedom and {lags} pre-sample rows).",
            fix="use fewer lags or state variables, or a longer sample.")


def _ols(x: np.ndarray, y: np.ndarray, regressors: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """OLS by QR: B = R^{-1} Q'Y and (X'X)^{-1} = R^{-1} R^{-T}; singular X -> InputError."""
    q, r = np.linalg.qr(x)
    d = np.abs(np.diag(r))
    colnorm = np.linalg.norm(x, axis=0)
    weak = np.flatnonzero(d <= _RANK_TOL * np.maximum(colnorm, 1e-300))
    if weak.size:
        names = [regressors[i] for i in weak]
        raise InputError(
            f"singular VAR system: regressor(s) {', '.join(names)} are linear combinations "
            "of the earlier regressors (e.g. one state is a lag or a sum of others).",
            column=names[0].split(".L")[0] if names[0] != "const" else None,
            fix="drop the redundant state variable or use fewer lags.")
    b = solve_triangular(r, q.T @ y)
    rinv = solve_triangular(r, np.eye(r.shape[0]))
    return b, rinv @ rinv.T


def _chol_transform(cov: np.ndarray, variables) -> np.ndarray:
    """M = L00 * L^{-1}, L = chol(cov): the scaled Gram-Schmidt map (lower triangular)."""
    k = cov.shape[0]
    # the pivot test: each conditional variance relative to its own variance
    try:
        chol = np.linalg.cholesky(cov)
    except np.linalg.LinAlgError:
        chol = None
    diag = np.diag(cov)
    if chol is None or (np.diag(chol) ** 2 <= _RANK_TOL * diag).any():
        if chol is None:
            j = next((i for i in range(1, k + 1)
                      if np.linalg.eigvalsh(cov[:i, :i]).min() <= _RANK_TOL * diag[:i].max()), k)
            j -= 1
        else:
            j = int(np.flatnonzero(np.diag(chol) ** 2 <= _RANK_TOL * diag)[0])
        raise InputError(
            f"singular innovation covariance: the innovation of '{variables[j]}' is a linear "
            f"combination of those of {', '.join(variables[:j]) or 'none'}.",
            column=str(variables[j]), fix="drop the redundant state variable.")
    m = np.tril(solve_triangular(chol, np.eye(k), lower=True) * chol[0, 0])
    m[0, 0] = 1.0      # exactly: the first innovation stays as it is
    return m


def _frame(values: np.ndarray, index, columns) -> pd.DataFrame:
    out = pd.DataFrame(values, index=index, columns=list(columns))
    if isinstance(out.index, pd.PeriodIndex):
        out.index.name = "date"
    return out


def _factor_frame(data: pd.DataFrame, orthogonal: pd.DataFrame, use: str) -> pd.DataFrame:
    if use not in ("return", "innovation"):
        raise InputError(f"unknown factor choice '{use}'.", fix="use 'return' or 'innovation'.")
    out = orthogonal.copy()
    if use == "return":
        first = orthogonal.columns[0]
        market = data[first].reindex(orthogonal.index).to_numpy(dtype=float).copy()
        market[orthogonal.isna().all(axis=1).to_numpy()] = np.nan
        out[first] = market
    return out


def _market_arg(market_data, use: str) -> tuple[Any, str]:
    # Accept factors("innovation") as well as factors(use="innovation").
    if isinstance(market_data, str):
        return None, market_data
    return market_data, use


def _with_market(data: pd.DataFrame, market_data) -> pd.DataFrame:
    if market_data is None:
        return data
    first = data.columns[0]
    series = market_data.iloc[:, 0] if isinstance(market_data, pd.DataFrame) else market_data
    out = data.copy()
    out[first] = pd.Series(series, dtype=float).reindex(data.index).to_numpy()
    return out


# --------------------------------------------------------------------------- lag choice


@dataclass(frozen=True)
class LagSelection:
    """Information criteria for VAR(0..max_lags) on the common sample T - max_lags.

    Lütkepohl 2005, ch. 4.3: AIC = ln|Σ_ML| + 2 n / T, BIC (SC) = ln|Σ_ML| + ln(T) n / T,
    HQ = ln|Σ_ML| + 2 ln(ln T) n / T, n = p K² + K free parameters; FPE as in statsmodels.
    """

    criterion: str
    selected: int
    max_lags: int
    nobs: int
    values: pd.DataFrame          # index lag order 0..max_lags, columns aic, bic, hqic, fpe
    selected_by: dict[str, int]

    def to_dict(self) -> dict[str, Any]:
        return jsonable({
            "criterion": self.criterion, "selected": self.selected, "max_lags": self.max_lags,
            "nobs": self.nobs, "selected_by": dict(self.selected_by),
            "values": {c: self.values[c].tolist() for c in self.values.columns},
            "lags_tried": self.values.index.tolist(),
        })

    def to_frame(self) -> pd.DataFrame:
        return self.values.copy()


def _criteria_table(z: np.ndarray, max_lags: int) -> tuple[pd.DataFrame, int]:
    t, k = z.shape
    nobs = t - max_lags
    rows = {}
    for p in range(0, max_lags + 1):
        x, y = _lagged(z[max_lags - p:], p)
        b, *_ = np.linalg.lstsq(x, y, rcond=None)
        u = y - x @ b
        sign, ld = np.linalg.slogdet(u.T @ u / nobs)
        ld = ld if sign > 0 else -np.inf
        free = p * k * k + k
        df_model = k * p + 1
        df_resid = nobs - df_model
        rows[p] = {
            "aic": ld + 2.0 / nobs * free,
            "bic": ld + np.log(nobs) / nobs * free,
            "hqic": ld + 2.0 * np.log(np.log(nobs)) / nobs * free,
            "fpe": ((nobs + df_model) / df_resid) ** k * np.exp(ld) if df_resid else np.inf,
        }
    table = pd.DataFrame.from_dict(rows, orient="index")
    table.index.name = "lags"
    return table, nobs


def select_lags(data: pd.DataFrame, max_lags: int = 8, criterion: str = "bic") -> LagSelection:
    """Choose the VAR order by AIC, BIC (SC), HQ or FPE, as statsmodels ``VAR.select_order``.

    Every order 0..max_lags is fitted (constant included) on the same effective sample of
    T - max_lags periods; the order with the smallest criterion wins (Lütkepohl 2005, 4.3).
    """
    key = _CRITERIA.get(str(criterion).lower())
    if key is None:
        raise InputError(f"unknown lag criterion '{criterion}'.",
                         fix="use an integer or one of 'aic', 'bic', 'hq'.")
    clean = _prepare(data)
    z = clean.to_numpy()
    t, k = z.shape
    if not isinstance(max_lags, (int, np.integer)) or max_lags < 1:
        raise InputError(f"max_lags must be a positive integer, got {max_lags!r}.",
                         fix="set max_lags to e.g. 8.")
    max_estimable = (t - k - 1) // (1 + k)
    if max_lags > max_estimable:
        raise InputError(
            f"max_lags = {max_lags} is too large for {t} periods of {k} variables "
            f"({', '.join(clean.columns)}); at most {max_estimable} can be estimated.",
            fix="lower max_lags.")
    table, nobs = _criteria_table(z, int(max_lags))
    by = {c: int(table[c].to_numpy().argmin()) for c in table.columns}
    return LagSelection(criterion=key, selected=by[key], max_lags=int(max_lags), nobs=nobs,
                        values=table, selected_by=by)


# ------------------------------------------------------------------------ orthogonalise


def orthogonalise(raw: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Gram-Schmidt in column order, scaled to the first column's standard deviation.

    ũ = M u with M = D L^{-1}, L = chol(cov(u)) (sample covariance of the demeaned series),
    D = L[0, 0] I: the first series stays, each later one loses its projection on the
    earlier orthogonalised ones (Golub and Van Loan 2013, *Matrix Computations*, 5.2;
    the Cholesky and QR factorisations give the same map).  Returns (orthogonal, M) with
    orthogonal = raw @ M.T and M a DataFrame (row variable × column variable).
    """
    if not isinstance(raw, pd.DataFrame):
        raise InputError("innovations must be a DataFrame.", fix="pass one column per variable.")
    u = raw.to_numpy(dtype=float, na_value=np.nan)
    names = [str(c) for c in raw.columns]
    if np.isnan(u).any():
        r, c = np.argwhere(np.isnan(u))[0]
        raise InputError("missing innovation.", row=str(raw.index[r]), column=names[c],
                         fix="drop incomplete rows before orthogonalising.")
    if u.shape[0] <= u.shape[1]:
        raise InputError(f"{u.shape[0]} innovations are too few for {u.shape[1]} variables.",
                         fix="use a longer sample.")
    centred = u - u.mean(axis=0)
    cov = centred.T @ centred / (u.shape[0] - 1)
    flat = [n for n, v in zip(names, np.diag(cov), strict=True) if not v > 0]
    if flat:
        raise InputError(f"innovation(s) with no variation: {', '.join(flat)}.", column=flat[0],
                         fix="drop the variable.")
    m = _chol_transform(cov, names)
    mframe = pd.DataFrame(m, index=names, columns=names)
    return _frame(u @ m.T, raw.index, names), mframe


def comove_surprise(sigma_u: pd.DataFrame, surprise: dict[str, float]) -> pd.Series:
    """Full raw surprise with unspecified variables at their conditional mean.

    s̃_J = s_J (the specified ones) and s̃_{-J} = Σ_{-J,J} Σ_{JJ}^{-1} s_J, the mean of a
    jointly normal vector given part of it (Anderson 2003, *An Introduction to
    Multivariate Statistical Analysis*, thm. 2.5.1).
    """
    names, s = _surprise_vector(sigma_u.index, surprise)
    cov = sigma_u.loc[names, names].to_numpy(dtype=float)
    j = np.flatnonzero([n in surprise for n in names])
    full = cov[:, j] @ np.linalg.solve(cov[np.ix_(j, j)], s[j])
    full[j] = s[j]
    return pd.Series(full, index=names, name="surprise")


def _surprise_vector(index, surprise: dict[str, float]) -> tuple[list[str], np.ndarray]:
    names = [str(v) for v in index]
    if not isinstance(surprise, dict) or not surprise:
        raise InputError("a surprise needs at least one variable.",
                         fix=f"give e.g. {{'{names[-1]}': 0.01}}; valid: {', '.join(names)}.")
    unknown = [str(k) for k in surprise if str(k) not in names]
    if unknown:
        raise InputError(f"unknown state variable(s) in the surprise: {', '.join(unknown)}.",
                         column=unknown[0], fix=f"valid variables: {', '.join(names)}.")
    s = np.zeros(len(names))
    for k, v in surprise.items():
        try:
            s[names.index(str(k))] = float(v)
        except (TypeError, ValueError) as exc:
            raise InputError(f"surprise for '{k}' is not a number: {v!r}.", column=str(k),
                             fix="give surprises in natural units, e.g. 0.01 for +100bp.") from exc
    return names, s


def surprise_to_shocks(transform: pd.DataFrame, sigma_u: pd.DataFrame,
                       surprise: dict[str, float], reading: str = "isolated") -> pd.Series:
    """Orthogonal shocks ũ = M s of a raw surprise s in natural units.

    ``"isolated"``: unspecified raw surprises are zero.  ``"comove"``: they are set to
    their conditional mean given the specified ones (see :func:`comove_surprise`).
    """
    if reading not in _READINGS:
        raise InputError(f"unknown scenario reading '{reading}'.",
                         fix=f"use one of {', '.join(_READINGS)}.")
    names, s = _surprise_vector(transform.columns, surprise)
    if reading == "comove":
        s = comove_surprise(sigma_u.loc[names, names], surprise).to_numpy()
    m = transform.loc[names, names].to_numpy(dtype=float)
    return pd.Series(m @ s, index=names, name="shock")


# ------------------------------------------------------------------- full-sample VAR


@dataclass(frozen=True)
class StateResult:
    """A VAR(p) of the state vector, its raw and orthogonalised innovations."""

    variables: tuple[str, ...]
    lags: int
    lag_selection: dict | None
    nobs: int
    intercept: pd.Series
    coef: pd.DataFrame            # equation × "<var>.L<k>"
    coef_se: pd.DataFrame
    coef_t: pd.DataFrame
    intercept_se: pd.Series
    intercept_t: pd.Series
    r2: pd.Series
    sigma_u: pd.DataFrame         # divisor T - K p - 1
    sigma_u_ml: pd.DataFrame      # divisor T
    max_eigen_modulus: float
    stable: bool
    raw: pd.DataFrame
    orthogonal: pd.DataFrame
    transform: pd.DataFrame       # M: orthogonal = raw @ M.T
    raw_corr: pd.DataFrame
    orthogonal_corr: pd.DataFrame
    warnings: tuple[str, ...]
    data: pd.DataFrame = field(repr=False)   # the clean input (all rows, pre-sample too)
    eigen_moduli: tuple[float, ...] = ()

    def factors(self, market_data: pd.Series | pd.DataFrame | str | None = None,
                use: str = "return") -> pd.DataFrame:
        """Factor frame f_t = [market excess return, ũ_2, ..., ũ_K] on the effective sample.

        ``use="innovation"`` puts ũ_1 (= u_1) first instead.  ``market_data`` (optional)
        replaces the stored market column.
        """
        market_data, use = _market_arg(market_data, use)
        return _factor_frame(_with_market(self.data, market_data), self.orthogonal, use)

    def fitted(self) -> pd.DataFrame:
        """In-sample one-step forecasts ẑ_t = z_t - u_t."""
        return self.data.loc[self.raw.index] - self.raw

    def to_frame(self) -> pd.DataFrame:
        """Long VAR table: (equation, regressor) × [coef, se, t], ``const`` first."""
        regs = ["const"] + list(self.coef.columns)
        est = pd.concat([self.intercept.rename("const"), self.coef], axis=1)[regs]
        se = pd.concat([self.intercept_se.rename("const"), self.coef_se], axis=1)[regs]
        idx = pd.MultiIndex.from_product([list(self.variables), regs],
                                         names=["equation", "regressor"])
        est_v = est.to_numpy().ravel()
        se_v = se.to_numpy().ravel()
        return pd.DataFrame({"coef": est_v, "se": se_v, "t": est_v / se_v}, index=idx)

    def to_dict(self) -> dict[str, Any]:
        dates = [str(d) for d in self.raw.index]
        return jsonable({
            "variables": list(self.variables),
            "lags": self.lags,
            "lag_selection": self.lag_selection,
            "nobs": self.nobs,
            "sample": {"start": dates[0], "end": dates[-1]},
            "intercept": self.intercept,
            "intercept_se": self.intercept_se,
            "coef": self.coef,
            "coef_se": self.coef_se,
            "coef_t": self.coef_t,
            "r2": self.r2,
            "sigma_u": self.sigma_u,
            "sigma_u_ml": self.sigma_u_ml,
            "max_eigen_modulus": self.max_eigen_modulus,
            "eigen_moduli": list(self.eigen_moduli),
            "stable": self.stable,
            "innovations": {"dates": dates, "raw": _series_dict(self.raw),
                            "orthogonal": _series_dict(self.orthogonal)},
            "innovation_sd": {"raw": self.raw.std(ddof=1), "orthogonal": self.orthogonal.std(ddof=1)},
            "transform": self.transform,
            "raw_corr": self.raw_corr,
            "orthogonal_corr": self.orthogonal_corr,
            "warnings": list(self.warnings),
        })


def _companion_moduli(a: np.ndarray, k: int, lags: int) -> np.ndarray:
    """|eigenvalues| of the companion matrix [[A_1 ... A_p], [I 0]] (Lütkepohl 2005, 2.1)."""
    comp = np.zeros((k * lags, k * lags))
    comp[:k] = a
    if lags > 1:
        comp[k:, :-k] = np.eye(k * (lags - 1))
    return np.sort(np.abs(np.linalg.eigvals(comp)))[::-1]


def estimate_states(data: pd.DataFrame, *, lags: int | str = 1, max_lags: int = 8) -> StateResult:
    """VAR(p) by OLS, innovations and their Gram-Schmidt orthogonalisation.

    z_t = c + Σ_k A_k z_{t-k} + u_t, equation by equation OLS; Var(vec B) =
    (X'X)^{-1} ⊗ Σ_u with Σ_u = U'U / (T - K p - 1) (Lütkepohl 2005, 3.2).  ``lags`` is an
    integer or ``"aic"``, ``"bic"``, ``"hq"`` (see :func:`select_lags`).
    """
    clean = _prepare(data)
    variables = tuple(clean.columns)
    k = len(variables)
    notes: list[str] = []
    selection = None
    if isinstance(lags, str):
        sel = select_lags(clean, max_lags=max_lags, criterion=lags)
        selection = sel.to_dict()
        p = sel.selected
        if p == 0:
            notes.append(f"{lags.upper()} picks 0 lags (no predictability); a VAR(1) is used so "
                         "that persistent state levels still have innovations.")
            p = 1
    elif isinstance(lags, (int, np.integer)) and not isinstance(lags, bool) and lags >= 1:
        p = int(lags)
    else:
        raise InputError(f"lags must be a positive integer or 'aic', 'bic', 'hq'; got {lags!r}.",
                         fix="set states.lags = 1 (or 'bic').")
    z = clean.to_numpy()
    _check_length(z.shape[0], k, p, variables)
    regs = _regressor_names(variables, p)
    x, y = _lagged(z, p)
    b, xtx_inv = _ols(x, y, ["const"] + regs)
    u = y - x @ b
    t_eff = x.shape[0]
    df_resid = t_eff - (k * p + 1)
    sse = u.T @ u
    sigma = sse / df_resid
    sigma_ml = sse / t_eff
    se = np.sqrt(np.outer(np.diag(xtx_inv), np.diag(sigma)))   # (1+Kp) × K
    yc = y - y.mean(axis=0)
    r2 = 1.0 - np.diag(sse) / np.einsum("ij,ij->j", yc, yc)
    exact = [v for v, r in zip(variables, r2, strict=True) if 1.0 - r <= _RANK_TOL]
    if exact:
        raise InputError(
            f"singular innovation covariance: the innovation of '{exact[0]}' is zero (it is an "
            "exact function of the lagged states, R² = 1).",
            column=exact[0], fix="drop the redundant state variable.")
    moduli = _companion_moduli(b[1:].T, k, p)
    top = float(moduli[0])
    stable = bool(top < 1.0)
    if not stable:
        notes.insert(0, f"WARNING: the VAR is not stationary: the largest companion eigenvalue "
                        f"modulus is {top:.4f} >= 1. Innovations, scenario maps and any "
                        "long-horizon reading are unreliable; consider differencing the "
                        "trending state variable(s) or a shorter sample.")
    elif top > 0.995:
        notes.append(f"the VAR is close to a unit root (largest eigenvalue modulus {top:.4f}).")
    dates = clean.index[p:]
    raw = _frame(u, dates, variables)
    orth, m = orthogonalise(raw)
    eq = list(variables)
    return StateResult(
        variables=variables, lags=p, lag_selection=selection, nobs=t_eff,
        intercept=pd.Series(b[0], index=eq, name="const"),
        coef=pd.DataFrame(b[1:].T, index=eq, columns=regs),
        coef_se=pd.DataFrame(se[1:].T, index=eq, columns=regs),
        coef_t=pd.DataFrame(b[1:].T / se[1:].T, index=eq, columns=regs),
        intercept_se=pd.Series(se[0], index=eq, name="const"),
        intercept_t=pd.Series(b[0] / se[0], index=eq, name="const"),
        r2=pd.Series(r2, index=eq, name="r2"),
        sigma_u=pd.DataFrame(sigma, index=eq, columns=eq),
        sigma_u_ml=pd.DataFrame(sigma_ml, index=eq, columns=eq),
        max_eigen_modulus=top, stable=stable,
        raw=raw, orthogonal=orth, transform=m,
        raw_corr=raw.corr(), orthogonal_corr=orth.corr(),
        warnings=tuple(notes), data=clean, eigen_moduli=tuple(float(v) for v in moduli),
    )


# ------------------------------------------------------------------ real-time version


@dataclass(frozen=True)
class RealtimeInnovations:
    """One-step forecast errors of a VAR re-estimated at every date on past data only.

    Row τ+1 of ``raw`` is z_{τ+1} - ẑ_{τ+1|τ} from the VAR fitted on the regression rows
    dated ≤ τ (expanding from ``min_window`` rows, or the last ``window`` rows); row τ+1
    of ``orthogonal`` is M_τ times it, M_τ from that fit's residuals.  ``fit_dates`` gives
    τ for each row (NaT before the first fit).  ``transform_path[i]`` and
    ``sigma_u_path[i]`` are M and Σ_u (divisor n - K p - 1) of the fit through date i.
    """

    variables: tuple[str, ...]
    lags: int
    min_window: int
    window: int | None
    raw: pd.DataFrame
    orthogonal: pd.DataFrame
    fit_dates: pd.Series
    n_obs: pd.Series                  # regression rows in the fit through each date
    transform_path: np.ndarray = field(repr=False)   # (n, K, K), NaN before the first fit
    sigma_u_path: np.ndarray = field(repr=False)
    coef_path: np.ndarray = field(repr=False)        # (n, 1 + K p, K): [c; A_1'; ...]
    data: pd.DataFrame = field(repr=False)
    warnings: tuple[str, ...] = ()

    def factors(self, market_data: pd.Series | pd.DataFrame | str | None = None,
                use: str = "return") -> pd.DataFrame:
        """f_t = [market excess return, ũ_2, ..., ũ_K] in real time; NaN rows before the first fit."""
        market_data, use = _market_arg(market_data, use)
        return _factor_frame(_with_market(self.data, market_data), self.orthogonal, use)

    def transform_at(self, date: pd.Period | str) -> pd.DataFrame:
        """M of the fit through ``date`` (row variable × column variable)."""
        i = self.raw.index.get_loc(pd.Period(date, freq=self.raw.index.freq))
        v = list(self.variables)
        return pd.DataFrame(self.transform_path[i], index=v, columns=v)

    def sigma_u_at(self, date: pd.Period | str) -> pd.DataFrame:
        """Σ_u of the fit through ``date``."""
        i = self.raw.index.get_loc(pd.Period(date, freq=self.raw.index.freq))
        v = list(self.variables)
        return pd.DataFrame(self.sigma_u_path[i], index=v, columns=v)

    def to_frame(self) -> pd.DataFrame:
        """Raw and orthogonal innovations side by side (columns raw.<var>, orthogonal.<var>)."""
        return pd.concat([self.raw.add_prefix("raw."), self.orthogonal.add_prefix("orthogonal.")],
                         axis=1)

    def to_dict(self) -> dict[str, Any]:
        return jsonable({
            "variables": list(self.variables), "lags": self.lags,
            "min_window": self.min_window, "window": self.window,
            "innovations": {"dates": [str(d) for d in self.raw.index],
                            "fit_dates": [None if pd.isna(d) else str(d) for d in self.fit_dates],
                            "raw": _series_dict(self.raw),
                            "orthogonal": _series_dict(self.orthogonal)},
            "warnings": list(self.warnings),
        })


def realtime_innovations(data: pd.DataFrame, *, lags: int | str = 1, min_window: int = 120,
                         window: int | None = None, max_lags: int = 8) -> RealtimeInnovations:
    """Real-time VAR innovations without look-ahead, for every date at once.

    With cumulative cross-products S_xx(τ) = Σ_{t≤τ} x_t x_t', S_xy, S_yy (rolling: their
    differences over ``window`` rows), B_τ = S_xx^{-1} S_xy for all τ in one batched solve,
    Σ_u(τ) = (S_yy - B_τ' S_xy) / (n_τ - K p - 1), M_τ = L00 L^{-1} from a batched
    Cholesky, and the forecast error e_{τ+1} = y_{τ+1} - B_τ' x_{τ+1}.  ``min_window`` and
    ``window`` count regression rows (months of the effective sample).  A string ``lags``
    is chosen by :func:`select_lags` on the first ``min_window`` rows only.
    """
    clean = _prepare(data)
    variables = tuple(clean.columns)
    k = len(variables)
    notes: list[str] = []
    if window is not None:
        if not isinstance(window, (int, np.integer)) or window < 1:
            raise InputError(f"rolling window must be a positive integer, got {window!r}.",
                             fix="set window to e.g. 120 months, or leave it empty for expanding.")
        first_n = int(window)
    else:
        if not isinstance(min_window, (int, np.integer)) or min_window < 1:
            raise InputError(f"min_window must be a positive integer, got {min_window!r}.",
                             fix="set min_window to e.g. 120 months.")
        first_n = int(min_window)
    if isinstance(lags, str):
        sel = select_lags(clean.iloc[:first_n], max_lags=max_lags, criterion=lags)
        p = max(sel.selected, 1)
        notes.append(f"lags chosen by {lags.upper()} on the first {first_n} periods only: {p}.")
    elif isinstance(lags, (int, np.integer)) and not isinstance(lags, bool) and lags >= 1:
        p = int(lags)
    else:
        raise InputError(f"lags must be a positive integer or 'aic', 'bic', 'hq'; got {lags!r}.",
                         fix="set states.lags = 1.")
    need = _min_obs(k, p)
    if first_n < need:
        raise InputError(
            f"the real-time window of {first_n} periods is too short for a VAR({p}) of {k} "
            f"variables ({', '.join(variables)}); need at least {need}.",
            fix="raise min_window / window, or use fewer lags or variables.")
    z_all = clean.to_numpy()
    n = z_all.shape[0] - p
    if n < first_n + 1:
        raise InputError(
            f"only {n} periods after the {p} pre-sample row(s): too few for a first fit on "
            f"{first_n} periods plus one forecast ({', '.join(variables)}).",
            fix="lower min_window / window or use a longer sample.")
    # Centre on the mean of rows known at the first fit: better conditioned cross-products,
    # identical forecasts and residuals, and nothing from later dates.
    z = z_all - z_all[:first_n + p].mean(axis=0)
    x, y = _lagged(z, p)
    m_dim = x.shape[1]
    # Window sums of x x', x y', y y' through τ (expanding, or the last ``window`` rows).
    mom = window_moments(x, y, window=None if window is None else int(window))
    sxx, sxy, syy = mom.sxx, mom.sxy, mom.syy
    count = mom.count.astype(float)
    fit = np.arange(first_n - 1, n)             # rows τ at which a fit exists
    # Scale to unit diagonal before solving: same solution, smaller condition number.
    a = sxx[fit]
    dscale = 1.0 / np.sqrt(np.einsum("tii->ti", a))
    a_scaled = a * dscale[:, :, None] * dscale[:, None, :]
    rcond = 1.0 / np.linalg.cond(a_scaled)
    bad = np.flatnonzero(~(rcond > 1e-13))
    if bad.size:
        raise InputError(
            f"singular VAR system in the real-time fit through {clean.index[p + fit[bad[0]]]}: "
            f"the regressors of {', '.join(variables)} are collinear on that window.",
            row=str(clean.index[p + fit[bad[0]]]),
            fix="start the real-time window later (raise min_window) or drop a variable.")
    b = np.linalg.solve(a_scaled, sxy[fit] * dscale[:, :, None]) * dscale[:, :, None]
    df = count[fit] - (k * p + 1)
    sse = syy[fit] - np.einsum("tik,tij->tkj", b, sxy[fit])
    sse = 0.5 * (sse + np.transpose(sse, (0, 2, 1)))
    sigma = sse / df[:, None, None]
    try:
        chol = np.linalg.cholesky(sigma)
    except np.linalg.LinAlgError as exc:
        raise InputError(
            f"singular innovation covariance in a real-time fit ({', '.join(variables)}).",
            fix="raise min_window or drop a redundant variable.") from exc
    eye = np.broadcast_to(np.eye(k), chol.shape)
    linv = np.linalg.solve(chol, eye)
    mpath = np.tril(linv * chol[:, :1, :1])
    mpath[:, 0, 0] = 1.0
    # Forecast of row τ+1 from the fit through τ.
    tgt = fit[:-1] + 1
    err = y[tgt] - np.einsum("ti,tij->tj", x[tgt], b[:-1])
    orth = np.einsum("tij,tj->ti", mpath[:-1], err)
    raw_v = np.full((n, k), np.nan)
    orth_v = np.full((n, k), np.nan)
    raw_v[tgt] = err
    orth_v[tgt] = orth
    dates = clean.index[p:]
    fit_d = pd.Series(pd.NaT, index=dates, dtype=dates.dtype, name="fit_date")
    fit_d.iloc[tgt] = dates[fit[:-1]]
    paths = {}
    for name, vals, shape in (("m", mpath, (k, k)), ("s", sigma, (k, k)), ("b", b, (m_dim, k))):
        full = np.full((n, *shape), np.nan)
        full[fit] = vals
        paths[name] = full
    # Undo the centring for the intercepts: c = c~ + μ - Σ_k A_k μ.
    mu = z_all[:first_n + p].mean(axis=0)
    slopes = paths["b"][:, 1:, :]                     # (n, K p, K)
    paths["b"][:, 0, :] += mu - np.einsum("tij,i->tj", slopes, np.tile(mu, p))
    nobs = pd.Series(np.where(np.arange(n) >= first_n - 1, count, 0).astype(int), index=dates,
                     name="n_obs")
    return RealtimeInnovations(
        variables=variables, lags=p, min_window=int(min_window),
        window=None if window is None else int(window),
        raw=_frame(raw_v, dates, variables), orthogonal=_frame(orth_v, dates, variables),
        fit_dates=fit_d, n_obs=nobs, transform_path=paths["m"], sigma_u_path=paths["s"],
        coef_path=paths["b"], data=clean, warnings=tuple(notes),
    )
