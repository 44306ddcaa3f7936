"""The optional walk-through notebook stays in step with the Python API (its code cells run)."""

from __future__ import annotations

import json
import shutil

from .helpers import DEMO, ROOT, exec_in


def test_walkthrough_cells_run(tmp_path):
    nb = json.loads((ROOT / "notebooks_optional" / "walkthrough.ipynb").read_text())
    assert nb["nbformat"] == 4
    code = "\n".join("".join(c["source"]) for c in nb["cells"] if c["cell_type"] == "code")
    shutil.copytree(DEMO, tmp_path / "demo_portfolios")
    scope = exec_in(tmp_path, code, "walkthrough.ipynb")
    assert scope["hedge"].status == "optimal"
    assert (tmp_path / "walkthrough_output" / "report.html").exists()
