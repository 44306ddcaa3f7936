"""The invented demo scenario: reproducible, consistent with its truth file."""

from __future__ import annotations

import filecmp

import numpy as np

from hedgekit.demo import A, population_transform, simulate, write_scenario

from .helpers import DEMO, truth


def test_generator_reproduces_committed_files(tmp_path):
    write_scenario(tmp_path)
    for f in sorted(DEMO.iterdir()):
        if f.suffix in (".csv", ".json", ".toml"):
            assert filecmp.cmp(f, tmp_path / f.name, shallow=False), f"{f.name} differs from the generator"


def test_truth_is_consistent():
    t = truth()
    sigma = np.array([[t["var"]["sigma_u"][r][c] for c in t["variables"]] for r in t["variables"]])
    m = population_transform(sigma)
    cov = m @ sigma @ m.T
    np.testing.assert_allclose(cov, np.eye(5) * sigma[0, 0], atol=1e-14)  # equal variances, orthogonal
    assert np.allclose(np.triu(m, 1), 0)
    assert np.max(np.abs(np.linalg.eigvals(A))) < 1
    persistence = np.diag(A)[1:]
    assert np.all((persistence >= 0.95) & (persistence <= 0.99))  # common practice, from memory
    w = t["holdings"]
    book = {f: sum(w[a] * t["asset_betas"][a][f] for a in w) for f in t["factors"]}
    for f, b in book.items():
        assert abs(b - t["book_betas"][f]) < 1e-12
    assert book["term"] > 0.05 and book["def"] < -0.1  # a real term and default tilt to hedge


def test_simulation_is_seeded():
    a, b = simulate(7), simulate(7)
    np.testing.assert_array_equal(a["assets"].to_numpy(), b["assets"].to_numpy())
    c = simulate(8)
    assert not np.allclose(np.nan_to_num(a["assets"].to_numpy()), np.nan_to_num(c["assets"].to_numpy()))


def test_demo_never_overwrites_files_it_did_not_write(tmp_path):
    """A folder of the user's own files is refused with exit 2; its files stay byte for byte."""
    from hedgekit.cli import main
    folder = tmp_path / "mine"
    folder.mkdir()
    (folder / "states.csv").write_text("date,mkt\n2020-01,0.01\n")
    (folder / "larkspur.toml").write_text("# my own config\n")
    before = {p.name: p.read_bytes() for p in folder.iterdir()}
    assert main(["demo", "--dir", str(folder), "--json"]) == 2
    assert {p.name: p.read_bytes() for p in folder.iterdir()} == before


def test_demo_refuses_a_demo_file_the_user_changed(tmp_path):
    """An earlier demo folder is reused, but a file edited since the demo wrote it is not overwritten."""
    import pytest

    from hedgekit.errors import InputError
    write_scenario(tmp_path)
    write_scenario(tmp_path)  # an earlier demo folder: reused
    holdings = tmp_path / "holdings.csv"
    holdings.write_text("asset,weight\nbanks,1.0\n")
    with pytest.raises(InputError, match="changed since the demo wrote it"):
        write_scenario(tmp_path)
    assert holdings.read_text() == "asset,weight\nbanks,1.0\n"
