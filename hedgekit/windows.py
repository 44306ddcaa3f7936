"""Running-window moments: the one routine behind every rolling or expanding estimator.

Rolling betas (:func:`hedgekit.exposures.rolling_betas`), real-time VAR innovations
(:func:`hedgekit.states.realtime_innovations`) and the walk-forward re-estimation all need,
for every date, sums over the rows of a window of cross-products of the data, counting only
the rows that are present.  They are all built here from running (cumulative) sums along
time: the sum over rows s..e-1 is C[e] - C[s] with C the cumulative sum with a leading zero
row.  Nothing in a window's sums depends on a row after
the window: with ``window`` trailing windows the estimate at a date uses no later data.

Two entry points:

* :func:`window_sums` -- sums of any array along axis 0 over trailing windows of a fixed
  length, expanding windows, or explicit ``[start, end)`` row ranges.
* :func:`window_moments` -- the masked moments of a regression of ``y`` on ``x`` over those
  windows: counts, sum x, sum y, sum x x', sum x y', sum y y'.

Masks come in two shapes.  A row mask ``(T,)`` drops whole rows from every moment (listwise,
e.g. a covariance on the rows where every column is present).  A series mask ``(T, N)`` with
``y`` of shape ``(T, N)`` treats each column of ``y`` as its own regression on the shared
``x`` over that column's own valid rows (an unbalanced panel of returns).

Typical calls::

    # rolling betas of a panel on [1, f] over 60-month windows, each series on its own months
    mom = window_moments(f, r, mask=np.isfinite(r), window=60)
    # a VAR's normal equations through every date (expanding)
    mom = window_moments(x_lagged, y)
    # walk-forward fits on rows [start, end) for every date, and a listwise covariance
    s, e = window_bounds(len(z), 120, first=119)
    mom = window_moments(z, mask=np.isfinite(z).all(axis=1), starts=s, ends=e)
    cov = (mom.centred_xx() / (mom.count - 1)[:, None, None])
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["WindowMoments", "window_bounds", "window_moments", "window_sums"]


def window_bounds(n_rows: int, window: int | None = None, *, first: int = 0
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Row ranges ``[start, end)`` of the windows ending at rows ``first .. n_rows-1``.

    ``window=None`` gives expanding windows (start 0); an integer gives trailing windows of
    at most ``window`` rows (the first ones shorter).  Feed them to :func:`window_sums`.
    """
    ends = np.arange(first, n_rows, dtype=np.int64) + 1
    if window is None:
        starts = np.zeros_like(ends)
    else:
        _check_window(window)
        starts = np.maximum(ends - int(window), 0)
    return starts, ends


def _check_window(window: int) -> None:
    if isinstance(window, bool) or not isinstance(window, int | np.integer) or window < 1:
        raise ValueError(f"window must be a positive integer or None, not {window!r}.")


def window_sums(a: np.ndarray, window: int | None = None, *,
                starts: np.ndarray | None = None, ends: np.ndarray | None = None,
                axis: int = 0, overwrite: bool = False) -> np.ndarray:
    """Sums of ``a`` along ``axis`` over a window for every date.

    * ``window=None`` and no ranges: expanding sums, ``out[t] = a[0] + ... + a[t]``.
    * ``window=w``: trailing sums, ``out[t] = a[max(0, t-w+1)] + ... + a[t]`` (the first
      ``w-1`` rows sum what is available so far).
    * ``starts``/``ends`` (integer arrays of equal length D): ``out[d]`` is the sum of
      rows ``starts[d] .. ends[d]-1`` (any set of row ranges, e.g. a walk-forward's fits).

    The output has the shape of ``a`` (length D along ``axis`` with ranges).  Expanding sums,
    ranges and trailing sums along a leading axis come from one cumulative sum (trailing:
    its differences ``C[t] - C[t-w]``); trailing sums along the last axis of a 2-D or larger
    array (time contiguous in memory, the fast layout for panels) from one running-sum
    pass (``scipy.ndimage.uniform_filter1d`` shifted to end at each row), which differs
    from the differences only by round-off.  Every route is causal: a row's sum never
    depends on a later row, to the bit.  ``overwrite=True`` lets that running pass reuse
    ``a``'s memory (a float64 array).
    """
    a = np.asarray(a, dtype=float)
    if starts is not None or ends is not None:
        if starts is None or ends is None:
            raise ValueError("give both starts and ends, or neither.")
        if window is not None:
            raise ValueError("give either window or starts/ends, not both.")
        moved = np.moveaxis(a, axis, 0)
        c = np.zeros((moved.shape[0] + 1, *moved.shape[1:]))
        np.cumsum(moved, axis=0, out=c[1:])
        st = np.asarray(starts, dtype=np.int64)
        en = np.asarray(ends, dtype=np.int64)
        return np.moveaxis(c[en] - c[st], 0, axis)
    if window is None:
        return np.cumsum(a, axis=axis)
    _check_window(window)
    w = min(int(window), a.shape[axis])
    if axis % a.ndim != a.ndim - 1 or a.ndim == 1:
        c = np.cumsum(a, axis=axis)
        if w == a.shape[axis]:
            return c
        moved = np.moveaxis(c, axis, 0)
        moved[w:] = moved[w:] - moved[:-w]   # a temporary: the right side reads old values
        return c
    from scipy.ndimage import uniform_filter1d  # 0.1 s to import: only when needed

    # The running mean over w rows, shifted by (w-1)//2 (the largest shift scipy allows)
    # so the window ends at the row, with zeros before the first row; times w for sums.
    out = uniform_filter1d(a, size=w, axis=axis, mode="constant", cval=0.0,
                           origin=(w - 1) // 2, output=a if overwrite else None)
    out *= w
    return out


def _pair(i: int, j: int) -> int:
    """Position of x_i x_j in the packed lower triangle (0,0), (1,0), (1,1), (2,0), ..."""
    i, j = max(i, j), min(i, j)
    return i * (i + 1) // 2 + j


@dataclass(frozen=True)
class WindowMoments:
    """Window sums of a regression's cross-products, one entry per window (axis 0).

    Unmasked or row mask (``x`` (T, P), ``y`` (T, Q)): ``count`` (D,), ``sx`` (D, P),
    ``sy`` (D, Q), ``sxy`` (D, P, Q), ``syy`` (D, Q, Q), ``sxx`` (D, P, P).
    Series mask (``y`` (T, N), mask (T, N)): ``count`` (D, N), ``sx`` (D, N, P), ``sy``
    (D, N), ``sxy`` (D, N, P), ``syy`` (D, N), ``sxx`` (D, N, P, P).
    ``sxx`` is assembled on request from ``xx_packed`` (the lower triangle, last axis in
    the order (0,0), (1,0), (1,1), (2,0), ...); :meth:`xx` gives one entry without a copy.
    Fields not asked for (``y`` absent, or ``cross=False``) are ``None``.  ``count`` is
    exact (rounded to integers).
    """

    count: np.ndarray
    sx: np.ndarray
    sy: np.ndarray | None = None
    sxy: np.ndarray | None = None
    syy: np.ndarray | None = None
    xx_packed: np.ndarray | None = field(default=None, repr=False)

    @property
    def n_x(self) -> int:
        return int(self.sx.shape[-1])

    def xx(self, i: int, j: int) -> np.ndarray:
        """Window sums of x_i x_j, shape of ``count`` (a view)."""
        if self.xx_packed is None:
            raise ValueError("cross-products were not computed (cross=False).")
        return self.xx_packed[..., _pair(i, j)]

    @property
    def sxx(self) -> np.ndarray | None:
        """Window sums of x x', (D, [N,] P, P)."""
        if self.xx_packed is None:
            return None
        p = self.n_x
        index = np.array([[_pair(i, j) for j in range(p)] for i in range(p)])
        return self.xx_packed[..., index]

    def centred_xx(self) -> np.ndarray:
        """Window sums of (x - x̄)(x - x̄)': ``sxx - sx sx' / count`` (NaN for empty windows)."""
        n = self.count[..., None, None].astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.sxx - self.sx[..., :, None] * self.sx[..., None, :] / n


def window_moments(x: np.ndarray, y: np.ndarray | None = None, *,
                   mask: np.ndarray | None = None, window: int | None = None,
                   starts: np.ndarray | None = None, ends: np.ndarray | None = None,
                   cross: bool = True) -> WindowMoments:
    """Masked window sums of x, y and their cross-products for every window.

    Parameters
    ----------
    x : (T, P) regressors shared by every series (e.g. ``[1, f_t]``, or a VAR's lags).
    y : optional (T, Q) responses; with a series mask, (T, N) with one series per column.
        Missing cells of ``y`` may be NaN where the mask is False (they are zeroed).
    mask : None (every row counts), a row mask (T,), or a series mask (T, N) (same shape
        as ``y``): True where the row counts.
    window, starts, ends : the windows, as in :func:`window_sums` (expanding by default).
    cross : False skips ``sxx`` and ``syy`` (the counts, sums and ``sxy`` remain); useful
        when X'X is formed elsewhere.

    Returns
    -------
    :class:`WindowMoments` (shapes there).  The rows of a window that the mask drops add
    nothing to any sum, so each series' moments are those of its own valid rows.
    """
    x = np.asarray(x, dtype=float)
    if x.ndim != 2:
        raise ValueError("x must be two-dimensional (T, P).")
    t, p = x.shape
    span = {"window": window, "starts": starts, "ends": ends}
    yv = None if y is None else np.asarray(y, dtype=float)
    if yv is not None and yv.ndim == 1:
        yv = yv[:, None]
    if mask is None or np.ndim(mask) == 1:
        rows = np.ones(t, dtype=bool) if mask is None else np.asarray(mask, dtype=bool)
        if rows.shape != (t,):
            raise ValueError("a row mask must have shape (T,).")
        r = rows.astype(float)
        x0 = np.where(rows[:, None], x, 0.0)
        count = window_sums(r, **span)
        sx = window_sums(x0, **span)
        ii, jj = np.tril_indices(p)
        sxx = window_sums(x0[:, ii] * x0[:, jj], **span) if cross else None
        sy = sxy = syy = None
        if yv is not None:
            y0 = np.where(rows[:, None], yv, 0.0)
            sy = window_sums(y0, **span)
            sxy = window_sums(np.einsum("tp,tq->tpq", x0, y0), **span)
            syy = window_sums(np.einsum("tp,tq->tpq", y0, y0), **span) if cross else None
        return WindowMoments(np.rint(count).astype(np.int64), sx, sy, sxy, syy, sxx)
    m = np.asarray(mask, dtype=bool)
    if yv is None or m.shape != yv.shape or m.shape[0] != t:
        raise ValueError("a series mask needs y of the same shape (T, N).")
    return _series_moments(x, yv, m, span, cross)


def _series_moments(x: np.ndarray, y: np.ndarray, m: np.ndarray, span: dict,
                    cross: bool) -> WindowMoments:
    """Series-mask moments.  Every moment of every series sits in one (N, M, T) array with
    time last and contiguous (a cumulative sum along a contiguous axis is several times
    faster than along a strided one); the fields are returned as (D, N, ...) views."""
    t, p = x.shape
    n = y.shape[1]
    pairs = [(i, j) for i in range(p) for j in range(i + 1)] if cross else []
    # Mask-weighted terms: 1, x_p, x_p x_q; y-weighted terms: 1, x_p; then y^2.
    g_mask = np.vstack([np.ones(t), x.T] + [x[:, i] * x[:, j] for i, j in pairs])
    g_ret = np.vstack([np.ones(t), x.T])
    q1, q2 = g_mask.shape[0], g_ret.shape[0]
    mt = np.ascontiguousarray(m.T)
    y0 = np.where(mt, y.T, 0.0)
    mom = np.empty((n, q1 + q2 + int(cross), t))
    np.multiply(mt[:, None, :], g_mask[None], out=mom[:, :q1])
    np.multiply(y0[:, None, :], g_ret[None], out=mom[:, q1:q1 + q2])
    if cross:
        np.multiply(y0, y0, out=mom[:, -1])
    mom = window_sums(mom, **span, axis=2, overwrite=True)

    def field_(lo: int, hi: int | None = None) -> np.ndarray:
        part = mom[:, lo] if hi is None else mom[:, lo:hi]
        return np.moveaxis(part, -1, 0)

    count = np.rint(field_(0)).astype(np.int64)
    packed = field_(1 + p, q1) if cross else None
    syy = field_(q1 + q2) if cross else None
    return WindowMoments(count, field_(1, 1 + p), field_(q1), field_(q1 + 1, q1 + q2), syy,
                         packed)
