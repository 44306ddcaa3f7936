"""The wiring: factors-file mode, quarterly data, book from returns only, --as-of."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from hedgekit import pipeline
from hedgekit.config import load_config
from hedgekit.errors import InputError
from hedgekit.inputs import load_dataset

from .helpers import demo_copy


def _write(frame: pd.DataFrame, path) -> None:
    out = frame.copy()
    out.index = out.index.astype(str)
    out.index.name = "date"
    out.to_csv(path)


def test_factors_file_mode_skips_the_var_and_matches(tmp_path):
    cfg = demo_copy(tmp_path)
    config = load_config(cfg)
    base = pipeline.run_all(config)
    factors = base.factor_set.factors.rename(columns=lambda c: c if c == "mkt" else f"f_{c}")
    _write(factors, cfg.parent / "factors.csv")
    text = cfg.read_text().replace('states = "states.csv"', 'factors = "factors.csv"')
    text = text.replace('neutralise = ["term", "def"]', 'neutralise = ["f_term", "f_def"]')
    text = text.replace('order = ["mkt", "dy", "term", "def", "rf"]\n', "")
    text = text.replace('nw_lags = "auto"', 'nw_lags = "auto"\ntraded = ["mkt", "f_dy", "f_term", "f_def", "f_rf"]')
    cfg.write_text(text)
    run = pipeline.run_all(load_config(cfg))
    assert run.premia.grs is not None and 0 <= run.premia.grs["pvalue"] <= 1  # every factor declared traded
    assert run.factor_set.source == "factors file" and run.factor_set.states is None
    np.testing.assert_allclose(run.exposures.book.to_numpy(), base.exposures.book.to_numpy(), atol=1e-8)
    assert abs(run.hedge.exposure_after["f_term"]) < 1e-6
    assert run.to_dict()["states"] is None


def _quarterly(cfg) -> None:
    folder = cfg.parent
    for name in ("assets", "instruments", "portfolio_returns"):
        frame = pd.read_csv(folder / f"{name}.csv", index_col=0)
        frame.index = pd.PeriodIndex(frame.index, freq="M")
        q = (1 + frame).groupby(frame.index.asfreq("Q")).prod(min_count=3) - 1
        _write(q, folder / f"{name}.csv")
    states = pd.read_csv(folder / "states.csv", index_col=0)
    states.index = pd.PeriodIndex(states.index, freq="M")
    grouped = states.groupby(states.index.asfreq("Q"))
    q = grouped.last()
    q["mkt"] = grouped["mkt"].apply(lambda r: np.prod(1 + r.to_numpy()) - 1 if r.notna().all() else np.nan)
    _write(q, folder / "states.csv")
    text = cfg.read_text().replace("[data]\n", '[data]\nfrequency = "quarterly"\n')
    text = text.replace("window = 60\nmin_obs = 36", "window = 20\nmin_obs = 12")
    cfg.write_text(text)


def test_quarterly_data_run_the_whole_job(tmp_path):
    cfg = demo_copy(tmp_path)
    _quarterly(cfg)
    config = load_config(cfg)
    data = load_dataset(config)
    assert data.periods_per_year == 4 and str(data.states.index[-1]) == "2025Q4"
    run = pipeline.run_all(config)
    assert run.hedge.status == "optimal"
    assert abs(run.hedge.exposure_after["term"]) < 1e-6
    # quarterly betas of the book stay close to the monthly ones (same process, aggregated)
    assert abs(run.exposures.book["def"] - (-0.26)) < 0.08
    d = run.to_dict()
    assert d["meta"]["frequency"] == "quarterly"


def test_book_from_portfolio_returns_only(tmp_path):
    cfg = demo_copy(tmp_path)
    cfg.write_text(cfg.read_text().replace('holdings = "holdings.csv"\n', ""))
    run = pipeline.run_all(load_config(cfg))
    assert run.exposures.book_source != "holdings"
    assert abs(run.exposures.book["def"] - (-0.26)) < 0.03


def test_no_book_is_a_clear_error(tmp_path):
    cfg = demo_copy(tmp_path)
    text = cfg.read_text().replace('holdings = "holdings.csv"\n', "").replace(
        'portfolio_returns = "portfolio_returns.csv"\n', "")
    cfg.write_text(text)
    with pytest.raises(InputError, match="holdings"):
        pipeline.run_all(load_config(cfg))


def test_as_of_ignores_later_data(tmp_path):
    cfg = demo_copy(tmp_path)
    config = load_config(cfg)
    first = pipeline.run_all(config, data=load_dataset(config).as_of("2015-12"))
    # change every value after the cut: the earlier run must not move
    for name in ("assets", "instruments", "states"):
        path = cfg.parent / f"{name}.csv"
        frame = pd.read_csv(path, index_col=0)
        late = frame.index > "2015-12"
        frame.loc[late] = frame.loc[late] * 1.5
        frame.to_csv(path)
    again = pipeline.run_all(config, data=load_dataset(config).as_of("2015-12"))
    pd.testing.assert_series_equal(first.hedge.positions, again.hedge.positions)
    assert first.meta["sample_end"] == "2015-12"


def test_surprise_impacts_equal_b_m_s(tmp_path):
    """Natural-unit readings: isolated = b' M s; with co-moves s_j = Σ_jk / Σ_kk s_k (methods.md §1)."""
    config = load_config(demo_copy(tmp_path))
    data = load_dataset(config)
    st = pipeline.run_stages(config, data, "exposures")
    fs = st.factor_set
    table = pipeline.surprise_impacts(st.exposures, fs, 1e6)
    b = st.exposures.book.reindex(fs.factors.columns).to_numpy()
    m, sigma = fs.transform.to_numpy(), fs.sigma_u.to_numpy()
    for k, var in enumerate(fs.transform.index):
        s = np.zeros(len(b))
        s[k] = 0.01
        assert table.loc[var, "isolated_return"] == pytest.approx(b @ m @ s, abs=1e-12)
        co = sigma[:, k] / sigma[k, k] * 0.01
        assert table.loc[var, "comove_return"] == pytest.approx(b @ m @ co, abs=1e-12)
        assert table.loc[var, "comove_pnl"] == pytest.approx(1e6 * b @ m @ co, rel=1e-12)


def test_user_scenario_from_config(tmp_path):
    """A [[stress.scenarios]] table reaches the stress stage: P&L = b' M s (methods.md §1)."""
    cfg = demo_copy(tmp_path)
    cfg.write_text(cfg.read_text() + '\n[[stress.scenarios]]\nname = "bear_flattener"\n'
                   'shocks = { term = -0.005, rf = 0.0075 }\nreading = "isolated"\n')
    run = pipeline.run_all(load_config(cfg))
    row = run.stress.table.set_index("scenario").loc["bear_flattener"]
    fs = run.factor_set
    s = pd.Series(0.0, index=fs.transform.index)
    s["term"], s["rf"] = -0.005, 0.0075
    expected = float(run.exposures.book.reindex(s.index).to_numpy() @ fs.transform.to_numpy() @ s.to_numpy())
    assert row["unhedged"] == pytest.approx(expected, abs=1e-12)
    assert row["unhedged_ccy"] == pytest.approx(expected * 250_000_000, rel=1e-9)


def _blank_after(cfg, column: str, last: str) -> None:
    path = cfg.parent / "assets.csv"
    frame = pd.read_csv(path, index_col=0)
    frame.loc[frame.index > last, column] = np.nan
    frame.to_csv(path)


def test_held_asset_with_stale_or_short_history_is_flagged(tmp_path):
    cfg = demo_copy(tmp_path)
    _blank_after(cfg, "banks", "2017-12")
    config = load_config(cfg)
    ex = pipeline.run_stages(config, load_dataset(config), "exposures").exposures
    assert any("'banks' has no returns after 2017-12" in w for w in ex.warnings)
    cfg2 = demo_copy(tmp_path / "b")
    path = cfg2.parent / "assets.csv"
    frame = pd.read_csv(path, index_col=0)
    frame.loc[frame.index < "2025-01", "banks"] = np.nan
    frame.to_csv(path)
    config = load_config(cfg2)
    ex = pipeline.run_stages(config, load_dataset(config), "exposures").exposures
    assert any("'banks' has 12 valid months, fewer than [exposures] min_obs = 36" in w for w in ex.warnings)


@pytest.mark.parametrize("old, new, needle", [
    ("min_obs = 36", "min_obs = 36\nhac_lags = 500", "hac_lags = 500"),
    ("window = 60\nmin_obs = 36", "window = 5\nmin_obs = 5", "too short"),
])
def test_exposure_settings_that_cannot_work(tmp_path, old, new, needle):
    cfg = demo_copy(tmp_path)
    cfg.write_text(cfg.read_text().replace(old, new))
    config = load_config(cfg)
    with pytest.raises(InputError, match=needle):
        pipeline.run_stages(config, load_dataset(config), "exposures")
