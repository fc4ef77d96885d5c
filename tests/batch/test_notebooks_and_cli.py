"""The notebooks execute and the demo command produces every promised output."""

import json
import os
import pathlib
import subprocess
import sys

import nbformat
import pytest
from nbclient import NotebookClient

ROOT = pathlib.Path(__file__).resolve().parents[2]
NOTEBOOKS = sorted((ROOT / "notebooks").glob("*.ipynb"))


@pytest.mark.slow
@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.name for p in NOTEBOOKS])
def test_notebook_executes(path, tmp_path, monkeypatch):
    nb = nbformat.read(path, as_version=4)
    # the kernel runs in a scratch folder; make it import this checkout's lossfit
    monkeypatch.setenv("PYTHONPATH", os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")])))
    NotebookClient(nb, timeout=600, kernel_name="python3",
                   resources={"metadata": {"path": str(tmp_path)}}).execute()
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])
              if o.get("output_type") == "error"]
    assert not errors


def _lossfit(*args, **kw):
    env = dict(os.environ, MPLBACKEND="Agg")
    return subprocess.run([sys.executable, "-m", "lossfit.cli", *args], capture_output=True, text=True,
                          env=env, cwd=ROOT, **kw)


@pytest.mark.slow
def test_demo_writes_all_outputs_and_refuses_to_overwrite(tmp_path, run_cli):
    out = tmp_path / "demo"
    proc = _lossfit("demo", "--out", str(out), "--steps", "600")
    assert proc.returncode == 0, proc.stderr
    for name in ("data.h5", "chains.h5", "summary.json", "corner.png", "spectrum.png"):
        assert (out / name).stat().st_size > 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["model"] == "zero-range"             # the exact model, no approximation label
    assert "invented" in summary["provenance"]["job_text"]
    for key in ("lossfit_version", "numpy", "scipy", "numba", "emcee", "host", "seed", "started_utc",
                "finished_utc"):
        assert key in summary["provenance"], key
    assert (out / "job.toml").read_text() == summary["provenance"]["job_text"]
    assert {r["name"] for r in summary["summary"]} >= {"a_minus", "eta_minus", "a_star", "eta_star"}
    assert "a_minus (a0)" in proc.stdout
    before = (out / "summary.json").read_bytes()
    again = run_cli("demo", "--out", str(out), "--steps", "600", "--quiet")
    assert again.returncode == 3 and "--overwrite" in again.stderr     # documented exit code
    assert (out / "summary.json").read_bytes() == before


@pytest.mark.slow
def test_demo_from_raw_curves(tmp_path):
    out = tmp_path / "curves-demo"
    # a short chain: this checks the outputs and the job record, not the posterior
    proc = _lossfit("demo", "--from-curves", "--out", str(out), "--steps", "100", "--walkers", "12", "--quiet")
    assert proc.returncode == 0, proc.stderr
    for name in ("campaign.h5", "job.toml", "chains.h5", "summary.json", "curves.png", "spectrum.png", "corner.png"):
        assert (out / name).stat().st_size > 0
    assert proc.stdout == ""                             # --quiet: nothing but errors
    summary = json.loads((out / "summary.json").read_text())
    # the demo wrote its campaign job and ran it as lossfit run does
    assert (out / "job.toml").read_text() == summary["provenance"]["job_text"]
    job_text = summary["provenance"]["job_text"]
    assert "invented" in job_text and 'campaign = "campaign.h5"' in job_text
    assert {r["name"] for r in summary["summary"]} >= {"a_minus", "eta_minus", "density_scale",
                                                       "temperature_scale"}


@pytest.mark.slow
def test_mixture_demo_and_its_job_file(tmp_path, run_cli):
    # the invented two-bosons-and-a-third-atom scenario (lossfit.simulate.MIXTURE_SCENARIO):
    # all outputs, the a_bb = 0 caution, and the job file reproducing the chain bit for bit
    out = tmp_path / "mixture"
    proc = _lossfit("demo", "--mixture", "--out", str(out), "--steps", "400", "--walkers", "12")
    assert proc.returncode == 0, proc.stderr
    for name in ("data.h5", "job.toml", "chains.h5", "summary.json", "corner.png", "spectrum.png"):
        assert (out / name).stat().st_size > 0
    assert not (out / "universality.png").exists()      # the published chart is for identical bosons
    assert "idealisation" in proc.stdout and "a_minus(1)" in proc.stdout
    summary = json.loads((out / "summary.json").read_text())
    assert summary["species"] == "133Cs-133Cs-6Li"
    rows = {r["name"]: r for r in summary["summary"]}
    assert rows["a_minus"]["median"] == pytest.approx(-320.0, rel=0.03)      # the scenario's truth
    again = run_cli("run", str(out / "job.toml"), "--out", str(tmp_path / "rerun"), "--quiet")
    assert again.returncode == 0, again.stderr
    assert (tmp_path / "rerun" / "chains.h5").exists()
    first = json.loads((out / "summary.json").read_text())["summary"]
    second = json.loads((tmp_path / "rerun" / "summary.json").read_text())["summary"]
    assert [r["median"] for r in first] == [r["median"] for r in second]
