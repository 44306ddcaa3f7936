"""The README stays true: two set-up commands, and its Python walk-through runs."""

from __future__ import annotations

import re

from .helpers import ROOT, exec_in


def _blocks(text: str) -> list[tuple[str, str]]:
    return re.findall(r"```(\w*)\n(.*?)```", text, flags=re.S)


def test_two_setup_commands():
    text = (ROOT / "README.md").read_text()
    setup = text.split("## Set up on a fresh machine", 1)[1].split("\n## ", 1)[0]
    blocks = [b for _, b in _blocks(setup)]
    assert blocks == ["pip install . && hedgekit demo\n", 'pip install ".[test]" && pytest\n']
    ci = (ROOT / ".ci" / "run").read_text()
    assert 'pip install ".[test]" && pytest' in ci


def test_readme_opens_with_the_job_and_cautions():
    text = (ROOT / "README.md").read_text()
    first = text.split("\n\n")[1].replace("\n", " ")
    for word in ("Risk managers", "quarterly exposure report", "recession", "hedge"):
        assert word in first
    flat = re.sub(r"\s*\n>?\s*", " ", text)
    assert "not investment advice" in flat and "licensed professionals" in flat


def test_python_walkthrough_runs(tmp_path):
    text = (ROOT / "README.md").read_text()
    api = text.split("## Python API", 1)[1]
    code = next(b for lang, b in _blocks(api) if lang == "python")
    code = code.replace("run = pipeline.run_all(config)", "run = pipeline.run_all(config, backtest=False)")
    scope = exec_in(ROOT, code, "README.md")
    assert scope["hedge"].status == "optimal"
    assert scope["run"].hedge.status == "optimal"
