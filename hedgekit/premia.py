"""Prices of risk: Fama-MacBeth cross-sections with Newey-West and Shanken errors.

For each month t, R_{.,t} = X_t gamma_t + alpha_t across assets, X_t = [1, beta] (option:
no intercept); lambda = mean_t gamma_t (Fama and MacBeth 1973, JPE; Cochrane 2005,
*Asset Pricing*, rev. ed., ch. 12).  Months with fewer than K+2 usable assets or a rank
deficient design are skipped and counted.

* Plain Fama-MacBeth: Var(lambda) = S/T, S the sample covariance (divisor T-1) of the
  gamma_t.  Newey-West: (Gamma_0 + sum_l (1 - l/(L+1))(Gamma_l + Gamma_l'))/(T(T-1)) on
  the deviations gamma_t - lambda, equal to S/T at L = 0 (the same scaling as
  linearmodels' ``FamaMacBeth`` kernel covariance with ``debiased=True``).
* Shanken 1992 (RFS), Cochrane 2005 eq. 12.19, with full-sample betas:
  Var(lambda) = [(X'X)^{-1} X' Sigma X (X'X)^{-1} (1 + c) + Sigma~_f] / T,
  c = lambda_f' Sigma_f^{-1} lambda_f, Sigma~_f = blockdiag(0, Sigma_f).  Sigma is the
  residual covariance of the time-series regressions, sum over common months divided by
  sqrt(n_i n_j) (e'e/T on a balanced panel, positive semi-definite otherwise); Sigma_f
  the factor covariance with divisor T (both maximum likelihood, as in Shanken 1992),
  over the months used.  With rolling betas the multiplier form
  (1 + c)(V_FM - Sigma~_f/T) + Sigma~_f/T, labelled approximate.
* Cross-sectional R² = 1 - var(alpha-bar)/var(R-bar) (Jagannathan and Wang 1996, JF);
  pricing-error test alpha-bar' cov(alpha-bar)^+ alpha-bar ~ chi²(N - K - 1) with
  cov(alpha-bar) = sum_t (alpha_t - alpha-bar)(alpha_t - alpha-bar)' / T² (pairwise
  n_i n_j with missing returns; df = rank when there are more assets than months),
  plain and divided by (1 + c).
* Traded factors (``traded``) are priced by their own mean: gamma_t = f_t, so lambda is the
  factor's mean over the months used with the plain and Newey-West se of a mean, and the
  factor joins the test assets (Lewellen, Nagel and Shanken 2010, JFE; Cochrane 2005
  ch. 12); the cross-section prices the other factors from R_t - B_tr f_tr,t.
  ``lambda_route`` records which route each factor took.  The pricing-error quadratic form
  is a Cholesky solve in the N x N or T x T space with the known null space added
  (see ``_pinv_quadratic``), the eigenvalue route only near rank deficiency.
* Headline: the Shanken se where available for every price (full betas with factors),
  else Newey-West (``headline_se``); annual figures, intervals at ``confidence``, p-values
  and marks from hedgekit.inference.
* GRS (Gibbons, Ross and Shanken 1989, Econometrica) when every factor is traded:
  (T/N)((T-N-K)/(T-K-1)) alpha' Sigma^{-1} alpha / (1 + mu' Omega^{-1} mu) ~ F(N, T-N-K),
  Sigma with divisor T-K-1 and Omega with divisor T (this equals Cochrane 2005 eq. 12.6
  written with maximum-likelihood Sigma), on the months where every asset is observed.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from scipy.special import chdtrc, fdtrc

from . import inference
from .errors import InputError
from .exposures import RollingBetas, as_frame, frame_dict, sample_dict, series_dict
from .jsonable import jsonable
from .linalg import bartlett_long_run, resolve_lags

__all__ = ["PremiaResult", "book_premium", "fama_macbeth"]

CONST = "const"


@dataclass(frozen=True)
class PremiaResult:
    """Fama-MacBeth prices of risk (monthly, per unit of factor) and their tests."""

    factors: tuple[str, ...]
    lambda_: pd.Series
    se_fm: pd.Series
    se_nw: pd.Series
    se_shanken: pd.Series
    t_fm: pd.Series
    t_nw: pd.Series
    t_shanken: pd.Series
    shanken_approximate: bool
    r2_cs: float
    n_periods: int
    n_skipped: int
    gamma: pd.DataFrame = field(repr=False)
    pricing_errors: pd.Series = field(repr=False)
    pricing_error_test: dict = field(default_factory=dict)
    pricing_error_test_shanken: dict = field(default_factory=dict)
    grs: dict | None = None
    nw_lags: int = 0
    betas_used: str = "full"
    cov_fm: pd.DataFrame | None = field(default=None, repr=False)
    cov_nw: pd.DataFrame | None = field(default=None, repr=False)
    cov_shanken: pd.DataFrame | None = field(default=None, repr=False)
    shanken_c: float = float("nan")
    n_assets: int = 0
    intercept: bool = True
    warnings: tuple[str, ...] = ()
    periods_per_year: int = 12
    confidence: float = inference.DEFAULT_CONFIDENCE
    book_premia: pd.DataFrame | None = field(default=None, repr=False)
    lambda_route: dict = field(default_factory=dict)

    @property
    def headline_se(self) -> str:
        """Which standard error the headline uses: "shanken" where it is available for every
        price of risk (full-sample betas with factors), else "nw" (Newey-West)."""
        if self.cov_shanken is not None and np.isfinite(self.se_shanken.to_numpy()).all():
            return "shanken"
        return "nw"

    @property
    def se(self) -> pd.Series:
        """The headline standard error of each price of risk (per period)."""
        return (self.se_shanken if self.headline_se == "shanken" else self.se_nw).rename("se")

    @property
    def t(self) -> pd.Series:
        """Headline t-statistic (NaN where the se is degenerate)."""
        return inference.t_stat(self.lambda_, self.se).rename("t")

    @property
    def p(self) -> pd.Series:
        """Two-sided normal p-value of the headline t."""
        return inference.p_value(self.t).rename("p")

    @property
    def marks(self) -> pd.Series:
        return inference.marks(self.p).rename("marks")

    @property
    def lambda_annual(self) -> pd.Series:
        return (self.lambda_ * self.periods_per_year).rename("lambda_annual")

    @property
    def lambda_annual_se(self) -> pd.Series:
        return (self.se * self.periods_per_year).rename("lambda_annual_se")

    def conf_int(self, level: float | None = None, *, annual: bool = False) -> pd.DataFrame:
        """Interval of each price of risk at ``level`` (default: the stored confidence) with
        the headline se: factor x [low, high], per period or (``annual=True``) per year."""
        est, se = (self.lambda_annual, self.lambda_annual_se) if annual else (self.lambda_, self.se)
        lo, hi = inference.interval(est, se, self.confidence if level is None else level)
        out = pd.DataFrame({"low": lo, "high": hi})
        out.index.name = "factor"
        return out

    @property
    def sample(self) -> dict:
        """The cross-section months used: {first, last, periods}."""
        return sample_dict(self.gamma.index)

    def _book_dict(self) -> tuple[dict | None, dict | None]:
        if self.book_premia is None:
            return None, None
        bp = self.book_premia
        pairs = inference.interval_pairs(bp["premium_annual"], bp["premium_annual_se"], self.confidence)
        rows = {str(f): {"beta": jsonable(r["beta"]), "premium_annual": jsonable(r["premium_annual"]),
                         "premium_annual_se": jsonable(r["premium_annual_se"]), "t": jsonable(r["t"]),
                         "p": jsonable(r["p"]), "marks": r["marks"], "interval": pairs[str(f)]}
                for f, r in bp.drop(index="total").iterrows()}
        tot = bp.loc["total"]
        total = {"value": jsonable(tot["premium_annual"]), "se": jsonable(tot["premium_annual_se"]),
                 "t": jsonable(tot["t"]), "p": jsonable(tot["p"]), "marks": tot["marks"],
                 "interval": pairs["total"]}
        return rows, total

    def to_dict(self) -> dict:
        book, book_total = self._book_dict()
        return {
            "lambda_route": dict(self.lambda_route),
            "headline_se": self.headline_se,
            "lambda_annual": series_dict(self.lambda_annual),
            "lambda_annual_se": series_dict(self.lambda_annual_se),
            "lambda_interval": inference.interval_pairs(self.lambda_annual, self.lambda_annual_se,
                                                        self.confidence),
            "p": series_dict(self.p),
            "marks": {str(k): v for k, v in self.marks.items()},
            "confidence": float(self.confidence),
            "periods_per_year": int(self.periods_per_year),
            "book_premium": book,
            "book_premium_total": book_total,
            "sample": self.sample,
            "factors": list(self.factors),
            "lambda": series_dict(self.lambda_),
            "se_fm": series_dict(self.se_fm),
            "se_nw": series_dict(self.se_nw),
            "se_shanken": series_dict(self.se_shanken),
            "t_fm": series_dict(self.t_fm),
            "t_nw": series_dict(self.t_nw),
            "t_shanken": series_dict(self.t_shanken),
            "shanken_approximate": bool(self.shanken_approximate),
            "shanken_c": jsonable(self.shanken_c),
            "r2_cs": jsonable(self.r2_cs),
            "n_periods": int(self.n_periods),
            "n_skipped": int(self.n_skipped),
            "n_assets": int(self.n_assets),
            "pricing_errors": series_dict(self.pricing_errors),
            "pricing_error_test": jsonable(self.pricing_error_test),
            "pricing_error_test_shanken": jsonable(self.pricing_error_test_shanken),
            "grs": jsonable(self.grs) if self.grs is not None else None,
            "nw_lags": int(self.nw_lags),
            "betas_used": self.betas_used,
            "intercept": bool(self.intercept),
            "cov_shanken": frame_dict(self.cov_shanken),
            "warnings": list(self.warnings),
        }

    def to_frame(self) -> pd.DataFrame:
        """factor x [lambda, se_fm, se_nw, se_shanken, t_fm, t_nw, t_shanken]."""
        out = pd.DataFrame({"lambda": self.lambda_, "se_fm": self.se_fm, "se_nw": self.se_nw,
                            "se_shanken": self.se_shanken, "t_fm": self.t_fm, "t_nw": self.t_nw,
                            "t_shanken": self.t_shanken})
        out.index.name = "factor"
        return out


def _chi2_test(stat: float, df: int) -> dict:
    p = float(chdtrc(df, stat)) if df > 0 and np.isfinite(stat) else float("nan")
    return {"stat": float(stat), "df": int(df), "pvalue": p}


def _scaled_residuals(y: np.ndarray, b: np.ndarray, f: np.ndarray) -> np.ndarray:
    """Residuals e_ti of R_i - a_i - b_i'f, demeaned on each asset's months, zero where
    missing, and divided by sqrt(n_i), so that Sigma = E'E.

    Sigma_ij = sum over common months of e_ti e_tj / sqrt(n_i n_j): e'e/T (maximum
    likelihood) on a balanced panel, positive semi-definite on an unbalanced one (the
    divisor n_ij need not be), and X' Sigma X = (E X)'(E X) costs O(T N K), not O(T N²).
    """
    mask = np.isfinite(y)
    n_i = np.maximum(mask.sum(axis=0), 1)
    e = np.where(mask, y - f @ b.T, 0.0)
    e = np.where(mask, e - e.sum(axis=0) / n_i, 0.0)
    return e / np.sqrt(n_i)


def _known_null(e: np.ndarray, cand: np.ndarray | None) -> np.ndarray | None:
    """An orthonormal basis of span(cand) when e @ cand vanishes to round-off, else None."""
    if cand is None or cand.shape[1] >= min(e.shape):
        return None
    scale = np.abs(e).max() * np.abs(cand).sum(axis=0).max()
    if np.abs(e @ cand).max() <= 1e-12 * scale:
        return np.linalg.qr(cand)[0]
    return None


def _pinv_quadratic(e: np.ndarray, v: np.ndarray, rtol: float = 1e-10,
                    x: np.ndarray | None = None, f: np.ndarray | None = None) -> tuple[float, int]:
    """v' (E'E)^+ v and the rank of E'E, from a Cholesky solve in the smaller space.

    E (T x N) has columns that sum to zero over time (deviations from each asset's mean),
    so 1'E = 0; with full-sample betas and every return observed, each row is also a
    cross-sectional residual, so E X = 0 for the design X (N x P) and v = alpha-bar is
    orthogonal to X.  A known null space Z (orthonormal) of the Gram with v (or E v) in
    its range gives the pseudo-inverse by a full-rank solve: for any s > 0,
    A^+ r = (A + s Z Z')^{-1} r for r in the range of A.  So:

    * N < T: A = E'E (N x N), Z = the columns of X when E X = 0 (to round-off), else none;
      v'A^+ v = |L^{-1} v|², L the Cholesky factor of A + s Z Z'.
    * N >= T: A = E E' (T x T), Z = 1/sqrt(T), or the span of [1, f] (T x (K+1)) when
      E'[1, f] = 0 (full-sample time-series residuals are orthogonal to the factors);
      v'(E'E)^+ v = |A^+ E v|².

    Forming the Gram costs O(T N min(N, T)) and the solve O(min(N, T)³): no
    eigendecomposition.  When the Cholesky factorisation fails or LAPACK's reciprocal
    condition estimate is below 1e-7 (where the routes could differ beyond 1e-10), the eigenvalue route is used
    instead: eigenvalues below rtol times the largest are zero (numpy's pinv with
    rcond=rtol on E'E).
    """
    from scipy.linalg import cho_solve, lapack

    t, n = e.shape
    if n < t:
        gram, rhs = e.T @ e, v
        null = _known_null(e, x)
    else:
        gram, rhs = e @ e.T, e @ v
        null = _known_null(e.T, None if f is None else np.column_stack([np.ones(t), f]))
        if null is None:
            null = np.full((t, 1), 1.0 / np.sqrt(t))
    size = gram.shape[0]
    rank = size
    if null is not None:
        rhs = rhs - null @ (null.T @ rhs)      # in the range exactly (round-off only)
        gram = gram + (np.trace(gram) / size) * (null @ null.T)
        rank = size - null.shape[1]
    anorm = np.abs(gram).sum(axis=0).max()
    chol, info = lapack.dpotrf(gram, lower=1, clean=1)
    if info == 0:
        rcond, info_c = lapack.dpocon(chol, anorm, uplo="L")
        if info_c == 0 and rcond > 1e-7:
            if n < t:
                z = _lower_solve(chol, rhs)
                return float(z @ z), int(rank)
            w = cho_solve((chol, True), rhs)
            return float(w @ w), int(rank)
    return _pinv_quadratic_eigen(e, v, rtol)


def _lower_solve(low: np.ndarray, b: np.ndarray) -> np.ndarray:
    from scipy.linalg import solve_triangular
    return solve_triangular(low, b, lower=True, check_finite=False)


def _pinv_quadratic_eigen(e: np.ndarray, v: np.ndarray, rtol: float) -> tuple[float, int]:
    """v' (E'E)^+ v by the eigendecomposition of the smaller Gram matrix of E (T x N):
    the fallback for (near) rank-deficient systems."""
    t, n = e.shape
    if n <= t:
        w, u = np.linalg.eigh(e.T @ e)
        keep = w > rtol * w.max()
        z = u[:, keep].T @ v
        return float(z @ (z / w[keep])), int(keep.sum())
    # E'E = V S² V' with V = E'U S^-1 from the T x T Gram E E' = U S² U'.
    w, u = np.linalg.eigh(e @ e.T)
    keep = w > rtol * w.max()
    z = u[:, keep].T @ (e @ v)
    return float(z @ (z / w[keep] ** 2)), int(keep.sum())


def _grs(y: np.ndarray, f: np.ndarray) -> dict | None:
    """GRS F-test on the months where every asset is observed (Gibbons, Ross and Shanken 1989)."""
    rows = np.isfinite(y).all(axis=1)
    y, f = y[rows], f[rows]
    t, n = y.shape
    k = f.shape[1]
    if t - n - k <= 0:
        return None
    x = np.column_stack([np.ones(t), f])
    coef = np.linalg.lstsq(x, y, rcond=None)[0]
    e = y - x @ coef
    alpha = coef[0]
    sigma = e.T @ e / (t - k - 1)
    mu = f.mean(axis=0)
    omega = np.atleast_2d(np.cov(f, rowvar=False, ddof=0))
    quad = float(alpha @ np.linalg.solve(sigma, alpha))
    sharpe = float(mu @ np.linalg.solve(omega, mu))
    stat = (t / n) * ((t - n - k) / (t - k - 1)) * quad / (1.0 + sharpe)
    return {"stat": stat, "df1": int(n), "df2": int(t - n - k),
            "pvalue": float(fdtrc(n, t - n - k, stat)), "n_periods": int(t)}


def _full_rank(xtx: np.ndarray) -> np.ndarray:
    """True where a stack of normal matrices is well conditioned (scaled eigenvalue test)."""
    d = np.sqrt(np.einsum("tii->ti", xtx))
    d[~(d > 0)] = 1.0
    corr = xtx / d[:, :, None] / d[:, None, :]
    corr = np.where(np.isfinite(corr), corr, 0.0)
    eig = np.linalg.eigvalsh(corr)
    return eig[:, 0] > 1e-12 * np.maximum(eig[:, -1], 1e-300)


def fama_macbeth(returns: pd.DataFrame, betas: pd.DataFrame | RollingBetas, *,
                 factors: pd.DataFrame | None = None, intercept: bool = True,
                 nw_lags: int | str = "auto", resid_cov: pd.DataFrame | None = None,
                 traded: list[str] | tuple[str, ...] | None = None,
                 book_betas: pd.Series | None = None, book_se: pd.Series | None = None,
                 periods_per_year: int = 12,
                 confidence: float = inference.DEFAULT_CONFIDENCE) -> PremiaResult:
    """Fama-MacBeth prices of risk with plain, Newey-West and Shanken standard errors.

    ``betas``: full-sample betas (assets x factors), or :class:`RollingBetas`, of which
    month t uses the window ending at t-1 (``lagged()`` is applied unless already done).
    ``factors`` (dates x factors) is needed for the Shanken correction, the residual
    covariance (unless ``resid_cov`` is given) and GRS; ``traded`` names the factors that
    are traded excess returns (GRS only when all are).  Vectorised over months: masked
    normal equations solved as one (T, P, P) stack.

    ``periods_per_year`` annualises (12, 4, or 252 for daily data) and ``confidence`` sets
    the level of the reported intervals.  With ``book_betas`` (and their ``book_se``) the
    result carries the book's premium per factor and in total (:func:`book_premium`).
    """
    _check_periods(periods_per_year)
    inference.check_level(confidence)
    ret = as_frame(returns, "returns")
    notes: list[str] = []
    rolling = isinstance(betas, RollingBetas)
    if rolling:
        rb = betas
        fnames = [str(f) for f in rb.factors]
        assets = [str(s) for s in rb.series]
        missing = [a for a in assets if a not in ret.columns]
        if missing:
            raise InputError(f"rolling betas for '{missing[0]}' but no returns for it.",
                             file="assets", column=missing[0], fix="Estimate betas on the same assets.")
        dates = ret.index.intersection(rb.dates).sort_values()
        # Month t takes the window ending at t-1 (what lagged() gives), read in place.
        src = rb.dates.get_indexer(dates) - (0 if rb.is_lagged else 1)
        bvals = rb.values[np.maximum(src, 0)]
        bvals[src < 0] = np.nan
    elif isinstance(betas, pd.DataFrame):
        bframe = betas.astype(float)
        bframe.index = bframe.index.map(str)
        fnames = [str(c) for c in bframe.columns]
        missing = [a for a in bframe.index if a not in ret.columns]
        if missing:
            raise InputError(f"betas for '{missing[0]}' but no returns for it.", file="assets",
                             column=missing[0], fix="Estimate betas on the same assets.")
        blank = bframe.index[bframe.isna().any(axis=1)]
        if len(blank):
            notes.append(f"{len(blank)} asset(s) without betas left out: {', '.join(blank[:5])}.")
            bframe = bframe.drop(index=blank)
        assets = list(bframe.index)
        dates = ret.index.sort_values()
        bvals = None
    else:
        raise InputError(f"betas must be a DataFrame or RollingBetas, not {type(betas).__name__}.",
                         fix="Pass ExposureResult.assets.betas or rolling_assets.")
    k = len(fnames)
    fac = None
    if factors is not None:
        fac = as_frame(factors, "factors")
        absent = [f for f in fnames if f not in fac.columns]
        if absent:
            raise InputError(f"factor '{absent[0]}' of the betas is not in factors.", file="factors",
                             column=absent[0], fix="Pass the factor frame the betas were estimated on.")
        fac = fac[fnames]
        ok_dates = fac.index[fac.notna().all(axis=1)]
        keep = dates.isin(ok_dates)
        if bvals is not None:
            bvals = bvals[keep]
        dates = dates[keep]
    dates = pd.PeriodIndex(dates, name="date")
    y = ret.loc[dates, assets].to_numpy(dtype=float)
    n_orig = y.shape[1]
    p = k + int(intercept)
    names = ([CONST] if intercept else []) + fnames

    # Traded factors price themselves: lambda = their mean, gamma_t = f_t, and they join
    # the test assets with unit betas on themselves (Lewellen, Nagel and Shanken 2010, JFE;
    # Cochrane 2005 ch. 12).  The cross-section prices the rest of R_t - B_tr f_tr,t.
    traded_set = {str(t) for t in (traded or ())}
    unknown = sorted(traded_set - set(fnames))
    if unknown:
        raise InputError(f"traded names '{unknown[0]}', which is not a factor of the betas.",
                         column="traded", fix=f"Use factors among: {', '.join(fnames)}.")
    tr = [j for j, f in enumerate(fnames) if f in traded_set]
    if tr and fac is None:
        notes.append("traded factors need the factor series: priced by the cross-section instead.")
        tr = []
    nt = [j for j in range(k) if j not in tr]
    cs_cols = ([0] if intercept else []) + [int(intercept) + j for j in nt]
    tr_cols = [int(intercept) + j for j in tr]
    p_cs = len(cs_cols)
    route = {f: ("mean" if j in tr else "cross-section") for j, f in enumerate(fnames)}
    f_tr = fac.loc[dates].to_numpy(dtype=float)[:, tr] if tr else np.zeros((len(dates), 0))
    if tr:
        unit = np.eye(k)[tr]
        y = np.column_stack([y, f_tr])
        assets = assets + [f"factor:{fnames[j]}" for j in tr]
        if rolling:
            bvals = np.concatenate([bvals, np.broadcast_to(unit, (len(dates), len(tr), k))], axis=1)
        else:
            bframe = pd.concat([bframe, pd.DataFrame(unit, index=assets[n_orig:], columns=bframe.columns)])
    t_all, n = y.shape

    # Cross-sections, batched over months, on [1, B_nt] with y - B_tr f_tr,t.
    if rolling:
        valid = np.isfinite(y) & np.isfinite(bvals).all(axis=2)
        bm = np.where(valid[..., None], bvals, 0.0)
        y0 = np.where(valid, y, 0.0)
        if tr:
            y0 = y0 - np.einsum("tnk,tk->tn", bm[..., tr], f_tr)
        b_cs = bm[..., nt]
        btb = np.matmul(b_cs.transpose(0, 2, 1), b_cs)
        bty = np.einsum("tnk,tn->tk", b_cs, y0)
        if intercept:
            s_b = b_cs.sum(axis=1)
            xtx = np.empty((t_all, p_cs, p_cs))
            xtx[:, 0, 0] = valid.sum(axis=1)
            xtx[:, 0, 1:] = xtx[:, 1:, 0] = s_b
            xtx[:, 1:, 1:] = btb
            xty = np.column_stack([y0.sum(axis=1), bty])
        else:
            xtx, xty = btb, bty
    else:
        bmat = bframe.to_numpy()
        x = np.column_stack([np.ones(n), bmat]) if intercept else bmat
        x_cs = x[:, cs_cols]
        valid = np.isfinite(y)
        y0 = np.where(valid, y, 0.0)
        if tr:
            y0 = y0 - np.where(valid, f_tr @ bmat[:, tr].T, 0.0)
        outer = np.einsum("nk,nl->nkl", x_cs, x_cs).reshape(n, p_cs * p_cs)
        xtx = (valid.astype(float) @ outer).reshape(t_all, p_cs, p_cs)
        xty = y0 @ x_cs
    count = valid.sum(axis=1)
    used = count >= k + 2
    if used.any() and p_cs:
        used[used] &= _full_rank(xtx[used])
    n_skipped = int((~used).sum())
    t_used = int(used.sum())
    if t_used < 2:
        raise InputError(f"only {t_used} month(s) have {k + 2} or more assets with returns and betas.",
                         file="assets", fix="Supply more test assets or a longer history.")
    gamma = np.empty((t_used, p))
    if p_cs:
        gamma[:, cs_cols] = np.linalg.solve(xtx[used], xty[used][..., None])[..., 0]
    gamma[:, tr_cols] = f_tr[used]
    lam = gamma.mean(axis=0)
    dev = gamma - lam
    cov_fm = dev.T @ dev / (t_used - 1) / t_used
    lags = resolve_lags(nw_lags, t_used, "nw_lags")
    if lags >= t_used:
        raise InputError(f"nw_lags ({lags}) must be below the number of months used ({t_used}).",
                         column="nw_lags", fix="Use 'auto' or a smaller integer.")
    cov_nw = bartlett_long_run(dev, lags) / (t_used * (t_used - 1))

    # Pricing errors on the months used.
    yu, vu = y[used], valid[used]
    if rolling:
        g_f = gamma[:, int(intercept):]
        fitted = np.einsum("tnk,tk->tn", bm[used], g_f)
        if intercept:
            fitted += gamma[:, :1]
    else:
        fitted = gamma @ x.T
    alpha_t = np.where(vu, yu - fitted, np.nan)
    n_i = vu.sum(axis=0)
    live = n_i > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        abar = np.nansum(np.where(vu, alpha_t, 0.0), axis=0) / n_i
        rbar = np.where(vu, yu, 0.0).sum(axis=0) / n_i
    r2_cs = float(1.0 - np.var(abar[live]) / np.var(rbar[live]))
    # cov(alpha-bar)_ij = sum_t d_ti d_tj / (n_i n_j) = (E'E)_ij with E = d / n.
    d = np.where(vu, alpha_t - abar, 0.0)[:, live] / n_i[live]
    stat, rank = _pinv_quadratic(
        d, abar[live], x=None if rolling else x[live],
        f=None if (rolling or fac is None) else fac.loc[dates[used]].to_numpy(dtype=float))
    df = int(live.sum()) - p_cs
    if rank < df:
        notes.append(f"pricing-error covariance has rank {rank} < N - K - 1 = {df} "
                     "(more assets than months): the test uses df = rank.")
        df = rank
    pe_test = _chi2_test(stat, df)

    # Shanken.
    cov_sh = np.full((p, p), np.nan)
    c = float("nan")
    if fac is not None:
        fu = fac.loc[dates[used]].to_numpy(dtype=float)
        sigma_f = np.atleast_2d(np.cov(fu, rowvar=False, ddof=0))
        lam_f = lam[int(intercept):]
        c = float(lam_f @ np.linalg.solve(sigma_f, lam_f))
        tilde = np.zeros((p, p))
        tilde[int(intercept):, int(intercept):] = sigma_f
        if rolling:
            cov_sh = (1.0 + c) * (cov_fm - tilde / t_used) + tilde / t_used
        else:
            # Cross-sectional (errors-in-variables) part for the cross-section's parameters
            # only: a traded factor's gamma_t = f_t carries none (its variance is Sigma_f/T).
            sandwich = np.zeros((p, p))
            if p_cs:
                xtx_inv = np.linalg.inv(x_cs.T @ x_cs)
                if resid_cov is not None:
                    sig = pd.DataFrame(resid_cov).astype(float)
                    sig.index, sig.columns = sig.index.map(str), sig.columns.map(str)
                    try:
                        sig = sig.loc[assets[:n_orig], assets[:n_orig]].to_numpy()
                    except KeyError as exc:
                        raise InputError("resid_cov does not cover every asset.", column="resid_cov",
                                         fix="Pass the residual covariance of the same assets.") from exc
                    # traded factors as test assets have no residual
                    sig = np.pad(sig, (0, n - n_orig))
                    part = xtx_inv @ x_cs.T @ sig @ x_cs @ xtx_inv
                else:
                    ex = _scaled_residuals(y, bmat, fac.loc[dates].to_numpy(dtype=float)) @ x_cs
                    part = xtx_inv @ (ex.T @ ex) @ xtx_inv
                sandwich[np.ix_(cs_cols, cs_cols)] = part
            cov_sh = (sandwich * (1.0 + c) + tilde) / t_used
    else:
        notes.append("no factors given: Shanken errors and GRS not computed.")
    pe_test_sh = _chi2_test(stat / (1.0 + c), df) if np.isfinite(c) else _chi2_test(float("nan"), df)

    grs = None
    if traded is not None:
        if set(fnames) <= traded_set and fac is not None:
            grs = _grs(y[:, :n_orig], fac.loc[dates].to_numpy(dtype=float))
            if grs is None:
                notes.append("GRS not computed: too few months with every asset observed.")
        elif not set(fnames) <= traded_set:
            notes.append("GRS not computed: not every factor is a traded return.")

    idx = pd.Index(names, name="factor")

    def _series(v: np.ndarray, name: str) -> pd.Series:
        return pd.Series(v, index=idx, name=name)

    with np.errstate(invalid="ignore", divide="ignore"):
        se_fm = np.sqrt(np.diag(cov_fm))
        se_nw = np.sqrt(np.diag(cov_nw))
        se_sh = np.sqrt(np.diag(cov_sh))
        t_fm, t_nw, t_sh = lam / se_fm, lam / se_nw, lam / se_sh
    res = PremiaResult(
        factors=tuple(names), lambda_=_series(lam, "lambda"), se_fm=_series(se_fm, "se_fm"),
        se_nw=_series(se_nw, "se_nw"), se_shanken=_series(se_sh, "se_shanken"),
        t_fm=_series(t_fm, "t_fm"), t_nw=_series(t_nw, "t_nw"), t_shanken=_series(t_sh, "t_shanken"),
        shanken_approximate=rolling, r2_cs=r2_cs, n_periods=t_used, n_skipped=n_skipped,
        gamma=pd.DataFrame(gamma, index=dates[used], columns=idx),
        pricing_errors=pd.Series(abar, index=pd.Index(assets, name="asset"), name="pricing_error"),
        pricing_error_test=pe_test, pricing_error_test_shanken=pe_test_sh, grs=grs, nw_lags=lags,
        betas_used="rolling" if rolling else "full",
        cov_fm=pd.DataFrame(cov_fm, index=idx, columns=idx),
        cov_nw=pd.DataFrame(cov_nw, index=idx, columns=idx),
        cov_shanken=pd.DataFrame(cov_sh, index=idx, columns=idx),
        shanken_c=c, n_assets=int(live[:n_orig].sum()), intercept=bool(intercept), warnings=tuple(notes),
        lambda_route=route,
        periods_per_year=int(periods_per_year), confidence=float(confidence))
    if book_betas is not None:
        res = replace(res, book_premia=book_premium(book_betas, res, book_se=book_se,
                                                    periods_per_year=periods_per_year))
    return res


def _check_periods(periods_per_year: int) -> None:
    if periods_per_year not in (12, 4, 52, 252, 1):
        raise InputError(f"periods_per_year must be 12 (monthly), 4 (quarterly) or 252 (daily), "
                         f"not {periods_per_year}.", column="periods_per_year", fix="Pass 12, 4 or 252.")


def book_premium(book_betas: pd.Series, premia: PremiaResult, *, book_se: pd.Series | None = None,
                 periods_per_year: int = 12) -> pd.DataFrame:
    """Expected premium earned through each exposure, b_k lambda_k, with its standard error.

    This is the expected return a hedge of that exposure gives up.  Var(b lambda) by the
    delta method for independent estimates, b² Var(lambda) + lambda² Var(b) + Var(b)Var(lambda)
    (the exact variance of a product of independent estimates); the ``total`` row uses the
    full covariance of lambda, b' V b, plus the beta terms.  V is the Shanken covariance when
    available, else Newey-West.  Annualised by ``periods_per_year`` (12 or 4), passed explicitly.
    """
    _check_periods(periods_per_year)
    b = pd.Series(book_betas, dtype=float)
    fnames = [f for f in premia.lambda_.index if f != CONST]
    unknown = [f for f in b.index if f not in fnames]
    if unknown:
        raise InputError(f"book exposure on '{unknown[0]}', which has no price of risk.",
                         column=str(unknown[0]), fix="Estimate premia on the same factors.")
    b = b.reindex(fnames, fill_value=0.0)
    cov = premia.cov_shanken
    source = "shanken"
    if cov is None or not np.isfinite(cov.to_numpy()).all():
        cov, source = premia.cov_nw, "newey_west"
    v = cov.loc[fnames, fnames].to_numpy()
    lam = premia.lambda_.loc[fnames].to_numpy()
    se_b = (pd.Series(book_se, dtype=float).reindex(fnames).fillna(0.0).to_numpy()
            if book_se is not None else np.zeros(len(fnames)))
    bv = b.to_numpy()
    prem = bv * lam
    var = bv ** 2 * np.diag(v) + lam ** 2 * se_b ** 2 + se_b ** 2 * np.diag(v)
    total_var = float(bv @ v @ bv + np.sum(lam ** 2 * se_b ** 2) + se_b ** 2 @ np.diag(v))
    out = pd.DataFrame({"beta": bv, "price_of_risk": lam, "premium": prem, "premium_se": np.sqrt(var)},
                       index=pd.Index(fnames, name="factor"))
    out.loc["total"] = [np.nan, np.nan, prem.sum(), np.sqrt(total_var)]
    out["premium_annual"] = out["premium"] * periods_per_year
    out["premium_annual_se"] = out["premium_se"] * periods_per_year
    out["t"] = inference.t_stat(out["premium"], out["premium_se"])
    out["p"] = inference.p_value(out["t"])
    out["marks"] = inference.marks(out["p"])
    out.attrs["se_source"] = source
    return out
