"""Many books at once: results equal separate runs, failures stay per book, local pool and Dask agree."""

from __future__ import annotations

import json

import numpy as np
import pytest

from hedgekit import batch, pipeline
from hedgekit.cli import main
from hedgekit.config import load_config

from .helpers import demo_copy


def _books(tmp_path, navs=(250_000_000, 40_000_000)):
    cfg = demo_copy(tmp_path)
    text = cfg.read_text()
    paths = []
    for i, nav in enumerate(navs, 1):
        p = cfg.parent / f"book{i}.toml"
        body = text.replace('name = "Larkspur Balanced Equity Fund"', f'name = "Book {i}"')
        body = body.replace("nav = 250_000_000", f"nav = {nav}")
        body = body.replace('output = "hedgekit_output"', f'output = "out_{i}"')
        p.write_text(body)
        paths.append(p)
    return paths


NAV_SCALE = 250_000_000


def _close(a, b, path=""):
    """Every number of two run dictionaries equal to 1e-10 (timestamps and paths aside)."""
    if isinstance(a, dict):
        keys = set(a) - {"run_at", "report", "run_id", "history", "config"}
        assert keys == set(b) - {"run_at", "report", "run_id", "history", "config"}, path
        for k in keys:
            _close(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, list):
        assert len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            _close(x, y, f"{path}[{i}]")
    elif isinstance(a, float) and isinstance(b, float):
        # currency amounts are compared in units of NAV (1e-10 of NAV), everything else absolutely
        money = any(w in path for w in ("ccy", "currency", "notional", "cost_currency"))
        assert np.isclose(a, b, rtol=1e-10, atol=1e-10 * (NAV_SCALE if money else 1.0)), (path, a, b)
    else:
        assert a == b, (path, a, b)


def test_batch_equals_separate_runs_and_groups_shared_inputs(tmp_path):
    """Two books on one universe: one group, and each book's JSON equals its own `run_all` to 1e-10."""
    paths = _books(tmp_path)
    res = batch.run_batch(paths, workers=1, backtest=False, store=False)
    assert res.groups == 1 and res.exit_code == 0
    out = res.to_dict()
    assert set(out["books"]) == {"Book 1", "Book 2"} and out["failed"] == {}
    for i, p in enumerate(paths, 1):
        alone = json.loads(json.dumps(pipeline.run_all(load_config(p), backtest=False).to_dict(), default=str))
        _close(json.loads(json.dumps(out["books"][f"Book {i}"], default=str)), alone)
        assert (p.parent / f"out_{i}" / "report.html").exists()


def test_failing_book_is_listed_and_others_run(tmp_path, capsys):
    """Bad holdings in one book: exit 2, its message under `failed`, the other book's result complete."""
    paths = _books(tmp_path)
    (paths[0].parent / "bad_holdings.csv").write_text("asset,weight\nnosuch,1.0\n")
    paths[1].write_text(paths[1].read_text().replace('holdings = "holdings.csv"', 'holdings = "bad_holdings.csv"'))
    code = main(["batch", *map(str, paths), "--json", "--no-backtest", "--no-store", "--workers", "1"])
    out = json.loads(capsys.readouterr().out)
    assert code == 2
    assert "Book 1" in out["books"] and out["books"]["Book 1"]["hedge"]["status"] == "optimal"
    assert "nosuch" in out["failed"]["Book 2"] and "bad_holdings.csv" in out["failed"]["Book 2"]


def test_folder_and_glob_expand_to_configs(tmp_path):
    paths = _books(tmp_path, navs=(1e8, 2e8, 3e8))
    folder = paths[0].parent
    assert set(batch.expand_configs([str(folder / "book*.toml")])) == {p.resolve() for p in paths}
    assert {p.resolve() for p in paths} <= set(batch.expand_configs([str(folder)]))


def test_local_pool_and_dask_cluster_agree(tmp_path):
    """A Dask scheduler and worker on loopback, started inside the test: same books as the local pool."""
    distributed = pytest.importorskip("distributed")
    paths = _books(tmp_path)
    local = batch.run_batch(paths, workers=2, backtest=False, store=False)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        remote = batch.run_batch(paths, scheduler=cluster.scheduler_address, backtest=False, store=False)
    assert remote.engine == "dask" and local.engine == "local"
    a, b = local.to_dict(), remote.to_dict()
    assert set(a["books"]) == set(b["books"]) == {"Book 1", "Book 2"}
    for name in a["books"]:
        _close(json.loads(json.dumps(a["books"][name], default=str)),
               json.loads(json.dumps(b["books"][name], default=str)))
