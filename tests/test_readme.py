"""The README's Python tour runs as written (every ```python block, in order, in one
namespace), so that a new user following it hits no undefined name and no traceback."""

import os
import re
import warnings

import matplotlib.pyplot as plt
import pytest

README = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "README.md")


def _blocks():
    with open(README, encoding="utf-8") as fh:
        return re.findall(r"^```python\n(.*?)^```", fh.read(), flags=re.S | re.M)


def test_readme_has_a_tour():
    assert _blocks(), "README.md has no ```python block"


@pytest.mark.slow
def test_readme_python_blocks_run(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    namespace = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")          # convergence notes are part of the output
        for i, block in enumerate(_blocks()):
            exec(compile(block, f"README.md python block {i + 1}", "exec"), namespace)
    plt.close("all")
    result = namespace["result"]
    # the tour's invented spectrum comes from a_- = -900 a0: the posterior must hold it
    row = {r["name"]: r for r in result.summary()}["a_minus"]
    assert row["lo95"] <= -900.0 <= row["hi95"]


def test_readme_reads_in_two_minutes():
    with open(README, encoding="utf-8") as fh:
        text = fh.read()
    assert len(text.splitlines()) <= 120
    assert len(text.split("\n\n")[1]) >= 300                      # the paragraph that states the job
    for command in ('python -m pip install . && lossfit demo --out demo-out',
                    'python -m pip install ".[test]" && python -m pytest -q -n 2', '-m "not slow"',
                    "python -m sphinx -W -b html docs build/docs"):
        assert command in text, command
    assert sum(len(b.splitlines()) for b in _blocks()) <= 30      # the tour
    # every link of the capability table points at a page of the guide that exists
    links = re.findall(r"\]\((docs/[^)#]+)", text)
    assert len(links) >= 10
    root = os.path.dirname(README)
    assert all(os.path.isfile(os.path.join(root, link)) for link in links), links
