"""The running-window moments routine against a direct computation on every window.

Reference: the definition itself (sums over the rows of each window, only rows the mask
keeps), computed window by window with numpy; and an OLS on each window (numpy lstsq).
"""

from __future__ import annotations

import numpy as np
import pytest

from hedgekit.windows import window_bounds, window_moments, window_sums


def _direct_sums(a: np.ndarray, starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    return np.stack([a[s:e].sum(axis=0) for s, e in zip(starts, ends, strict=True)])


@pytest.mark.parametrize("window", [None, 1, 7, 40, 500])
def test_window_sums_match_direct_sums(window) -> None:
    """Trailing, expanding and explicit-range sums equal the sum over each window's rows
    (definition), along a leading and a trailing axis."""
    rng = np.random.default_rng(3)
    a = rng.standard_normal((50, 4, 3))
    starts, ends = window_bounds(50, window)
    ref = _direct_sums(a, starts, ends)
    np.testing.assert_allclose(window_sums(a, window), ref, rtol=1e-12, atol=1e-12)
    last = np.moveaxis(a, 0, -1).copy()
    np.testing.assert_allclose(np.moveaxis(window_sums(last, window, axis=-1), -1, 0), ref,
                               rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(window_sums(a, starts=starts, ends=ends), ref, rtol=1e-12, atol=1e-12)
    pick = np.array([3, 10, 49])
    np.testing.assert_allclose(window_sums(a, starts=starts[pick], ends=ends[pick]), ref[pick],
                               rtol=1e-12, atol=1e-12)


def test_window_bounds() -> None:
    """Trailing windows [max(0, t-w+1), t+1) and expanding ones [0, t+1) (definition)."""
    s, e = window_bounds(6, 3, first=2)
    assert s.tolist() == [0, 1, 2, 3] and e.tolist() == [3, 4, 5, 6]
    s, e = window_bounds(4)
    assert s.tolist() == [0, 0, 0, 0] and e.tolist() == [1, 2, 3, 4]
    with pytest.raises(ValueError):
        window_sums(np.ones(3), 0)
    with pytest.raises(ValueError):
        window_sums(np.ones(3), starts=np.array([0]))


@pytest.mark.parametrize("window", [None, 12])
def test_series_mask_moments_match_each_window(window) -> None:
    """Per-series moments over each series' own valid rows of each window (definition)."""
    rng = np.random.default_rng(5)
    t, n, p = 40, 6, 3
    x = rng.standard_normal((t, p))
    y = rng.standard_normal((t, n))
    mask = rng.random((t, n)) > 0.25
    y[~mask] = np.nan
    mom = window_moments(x, y, mask=mask, window=window)
    starts, ends = window_bounds(t, window)
    for d, (s, e) in enumerate(zip(starts, ends, strict=True)):
        for i in range(n):
            rows = np.arange(s, e)[mask[s:e, i]]
            xi, yi = x[rows], y[rows, i]
            assert mom.count[d, i] == len(rows)
            np.testing.assert_allclose(mom.sx[d, i], xi.sum(axis=0), atol=1e-12)
            np.testing.assert_allclose(mom.sxx[d, i], xi.T @ xi, atol=1e-12)
            np.testing.assert_allclose(mom.sy[d, i], yi.sum(), atol=1e-12)
            np.testing.assert_allclose(mom.sxy[d, i], xi.T @ yi, atol=1e-12)
            np.testing.assert_allclose(mom.syy[d, i], yi @ yi, atol=1e-12)
            np.testing.assert_allclose(mom.xx(2, 1)[d, i], xi[:, 2] @ xi[:, 1], atol=1e-12)
            if len(rows) > 1:
                xc = xi - xi.mean(axis=0)
                np.testing.assert_allclose(mom.centred_xx()[d, i], xc.T @ xc, atol=1e-11)


def test_row_mask_moments_and_ranges() -> None:
    """A row mask drops whole rows (listwise); explicit ranges give the same sums as the
    matching trailing windows (definition)."""
    rng = np.random.default_rng(8)
    t = 30
    x = rng.standard_normal((t, 2))
    y = rng.standard_normal((t, 3))
    rows = rng.random(t) > 0.2
    x[~rows, 0] = np.nan
    starts, ends = window_bounds(t, 10, first=9)
    mom = window_moments(x, y, mask=rows, starts=starts, ends=ends)
    for d, (s, e) in enumerate(zip(starts, ends, strict=True)):
        keep = np.arange(s, e)[rows[s:e]]
        assert mom.count[d] == len(keep)
        np.testing.assert_allclose(mom.sxx[d], x[keep].T @ x[keep], atol=1e-12)
        np.testing.assert_allclose(mom.sxy[d], x[keep].T @ y[keep], atol=1e-12)
        np.testing.assert_allclose(mom.syy[d], y[keep].T @ y[keep], atol=1e-12)
    # unmasked trailing windows with no y
    plain = window_moments(x[:, 1:], window=5)
    assert plain.sy is None and plain.count[-1] == 5 and plain.count[2] == 3
    np.testing.assert_allclose(plain.sxx[-1, 0, 0], (x[-5:, 1] ** 2).sum(), atol=1e-12)


def test_window_ols_slopes_match_lstsq() -> None:
    """Slopes from the centred window moments equal numpy lstsq on [1, x] over each series'
    valid rows of each window (OLS normal equations, Frisch-Waugh-Lovell)."""
    rng = np.random.default_rng(11)
    t, n, p = 80, 4, 2
    x = rng.standard_normal((t, p))
    y = x @ rng.standard_normal((p, n)) + 0.3 * rng.standard_normal((t, n))
    mask = rng.random((t, n)) > 0.1
    y[~mask] = np.nan
    mom = window_moments(x, y, mask=mask, window=24)
    with np.errstate(invalid="ignore", divide="ignore"):
        sxy_c = mom.sxy - mom.sx * (mom.sy / mom.count)[..., None]
    slopes = np.linalg.solve(mom.centred_xx()[23:], sxy_c[23:, ..., None])[..., 0]
    for d in (0, 20, 56):
        for i in range(n):
            rows = np.arange(d, d + 24)[mask[d:d + 24, i]]
            xi = np.column_stack([np.ones(len(rows)), x[rows]])
            ref = np.linalg.lstsq(xi, y[rows, i], rcond=None)[0][1:]
            np.testing.assert_allclose(slopes[d, i], ref, rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("window", [None, 9])
def test_no_look_ahead_to_the_bit(window) -> None:
    """Changing rows after τ leaves every window sum up to τ bit-identical (causality,
    required by the walk-forward and the real-time innovations)."""
    rng = np.random.default_rng(2)
    x = rng.standard_normal((60, 2))
    y = rng.standard_normal((60, 5))
    mask = rng.random((60, 5)) > 0.2
    base = window_moments(x, y, mask=mask, window=window)
    x2, y2 = x.copy(), y.copy()
    x2[31:] *= 3.0
    y2[31:] += 1.0
    new = window_moments(x2, y2, mask=mask, window=window)
    for name in ("count", "sx", "sy", "sxy", "syy", "xx_packed"):
        np.testing.assert_array_equal(getattr(new, name)[:31], getattr(base, name)[:31])
