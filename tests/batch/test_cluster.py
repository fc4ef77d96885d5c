"""Batch runs: job files, MPI, checkpoint/resume after kill -9 and SIGTERM, locks,
refusal to overwrite, damaged files, and a table of malformed job files."""

import contextlib
import io
import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time

import numpy as np
import pytest

from lossfit.batch.demo import demo_job_text
from lossfit.batch.jobs import JobError, load_job
from lossfit.batch.runner import EXIT_CONFLICT, EXIT_INTERRUPTED
from lossfit.cli import main as cli_main
from lossfit.data import write_spectra
from lossfit.inference.backends import read_chain_file
from lossfit.inference.pools import find_mpiexec
from lossfit.simulate import demo_spectra


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    """Invented demo data and a short job file (8 walkers, 2500 steps)."""
    d = tmp_path_factory.mktemp("campaign")
    spectra, _ = demo_spectra()
    write_spectra(d / "data.h5", spectra)
    text = demo_job_text(walkers=10, steps=2500, seed=5).replace("checkpoint_every = 250",
                                                                "checkpoint_every = 50")
    (d / "job.toml").write_text(text)
    return d




def _cmd(*args):
    return [sys.executable, "-m", "lossfit.cli", *map(str, args)]


def _run(*args, **kw):
    env = dict(os.environ, MPLBACKEND="Agg")
    return subprocess.run(_cmd(*args), capture_output=True, text=True, env=env, **kw)


def _wait_for_steps(path, steps, timeout=120):
    t0 = time.time()
    while time.time() - t0 < timeout:
        if path.exists():
            try:
                if read_chain_file(path)["iteration"] >= steps:
                    return
            except Exception:     # mid-rename on a slow disk
                pass
        time.sleep(0.05)
    raise AssertionError(f"{path} never reached {steps} steps")


@pytest.fixture(scope="module")
def uninterrupted(campaign):
    # the reference chain runs in this process: the runs it is compared with need their
    # own processes (signals, kill -9, MPI ranks), the reference only the same job, and a
    # new interpreter spends ~4 s importing before it starts
    out = campaign / "whole"
    err = io.StringIO()
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
        code = cli_main(["run", str(campaign / "job.toml"), "--out", str(out)])
    assert code == 0, err.getvalue()
    # no terminal: periodic log lines with step, acceptance, autocorrelation and ETA
    assert "[lossfit] step 500/2500  acceptance" in err.getvalue() and "ETA" in err.getvalue()
    return read_chain_file(out / "chains.h5")


@pytest.mark.slow
def test_sigterm_then_kill_9_then_resume_gives_the_uninterrupted_chain(campaign, uninterrupted):
    # one folder through both interruptions a cluster deals out: the scheduler's SIGTERM
    # (checkpoint, documented exit code, lock released) and then, in the resumed run, a
    # kill -9 (no chance to clean up: complete file, stale lock); the last run finishes
    out = campaign / "interrupted"
    env = dict(os.environ, MPLBACKEND="Agg")
    proc = subprocess.Popen(_cmd("run", campaign / "job.toml", "--out", out, "--quiet"), env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    _wait_for_steps(out / "chains.h5", 100)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == EXIT_INTERRUPTED, err
    saved = read_chain_file(out / "chains.h5")["iteration"]
    assert 100 <= saved < 2500 and f"step {saved}" in err
    assert not (out / ".lossfit.lock").exists() and not (out / "summary.json").exists()

    proc = subprocess.Popen(_cmd("run", campaign / "job.toml", "--out", out, "--quiet"), env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    _wait_for_steps(out / "chains.h5", saved + 200)
    proc.kill()
    proc.wait()
    partial = read_chain_file(out / "chains.h5")
    assert saved < partial["iteration"] < 2500          # killed mid-run, file still complete
    assert (out / ".lossfit.lock").exists()              # stale lock of the dead process

    again = _run("run", campaign / "job.toml", "--out", out)
    assert again.returncode == 0, again.stderr
    assert "resuming" in again.stdout and "dead process" in again.stderr
    final = read_chain_file(out / "chains.h5")
    assert np.array_equal(final["chain"], uninterrupted["chain"])
    assert np.array_equal(final["log_prob"], uninterrupted["log_prob"])


@pytest.mark.slow
def test_mpiexec_two_ranks_end_to_end(campaign, uninterrupted):
    mpiexec = find_mpiexec()
    assert mpiexec, "mpiexec (from the mpich wheel, extra 'test') is not on PATH"
    out = campaign / "mpi"
    env = dict(os.environ, MPLBACKEND="Agg")
    # the first 400 steps: emcee's proposals do not depend on the run's length, so a
    # shorter run with the same seed is the prefix of the uninterrupted chain
    proc = subprocess.run([mpiexec, "-n", "2", *_cmd("run", campaign / "job.toml", "--out", out,
                                                     "--pool", "mpi", "--quiet", "--steps", "400")],
                          capture_output=True, text=True, env=env, timeout=600)
    assert proc.returncode == 0, proc.stderr
    stored = read_chain_file(out / "chains.h5")
    assert stored["metadata"]["workers"] == 2 and stored["metadata"]["pool"] == "mpi"
    assert stored["chain"].shape[0] == 400
    assert np.array_equal(stored["chain"], uninterrupted["chain"][:400])     # same seed, same chain
    assert json.loads((out / "summary.json").read_text())["steps"] == 400


@pytest.mark.slow
def test_finished_results_are_never_overwritten(campaign, uninterrupted, run_cli):
    out = campaign / "whole"
    before = {n: (out / n).read_bytes() for n in ("chains.h5", "summary.json")}
    same = run_cli("run", campaign / "job.toml", "--out", out)
    assert same.returncode == 0 and "nothing to do" in same.stdout
    other = campaign / "other.toml"
    other.write_text((campaign / "job.toml").read_text().replace("seed = 5", "seed = 6"))
    diff = run_cli("run", other, "--out", out, "--quiet")
    assert diff.returncode == EXIT_CONFLICT and "different job" in diff.stderr
    rep = run_cli("report", out)
    assert rep.returncode == EXIT_CONFLICT and "--overwrite" in rep.stderr
    assert {n: (out / n).read_bytes() for n in before} == before
    rep = run_cli("report", out, "--overwrite")
    assert rep.returncode == 0, rep.stderr
    assert (out / "chains.h5").read_bytes() == before["chains.h5"]


def test_a_second_process_on_the_same_folder_refuses(campaign, run_cli):
    out = campaign / "locked"
    out.mkdir()
    lock = out / ".lossfit.lock"
    lock.write_text(json.dumps({"pid": os.getpid(), "host": socket.gethostname()}))   # alive
    proc = run_cli("run", campaign / "job.toml", "--out", out, "--quiet")
    assert proc.returncode == EXIT_CONFLICT and "in use by process" in proc.stderr
    assert lock.exists() and not (out / "chains.h5").exists()


@pytest.mark.slow
def test_truncated_chain_file_is_detected(campaign, uninterrupted, tmp_path, run_cli):
    out = tmp_path / "trunc"
    out.mkdir()
    data = (campaign / "whole" / "chains.h5").read_bytes()
    (out / "chains.h5").write_bytes(data[: len(data) // 3])
    proc = run_cli("run", campaign / "job.toml", "--out", out, "--quiet")
    assert proc.returncode == 2 and "truncated" in proc.stderr
    assert (out / "chains.h5").stat().st_size == len(data) // 3       # left as it was


GOOD = """[data]
species = "133Cs"
spectra = ["data.h5"]
[model]
name = "capped"
[free]
a_minus = { prior = "log-uniform", lo = -3500.0, hi = -450.0 }
[sampler]
walkers = 8
steps = 100
"""


@pytest.mark.parametrize("edit, key", [
    (lambda t: t + "[extra]\nx = 1\n", "extra"),
    (lambda t: t.replace("walkers = 8", "walker = 8"), "sampler.walker"),
    (lambda t: t.replace("walkers = 8", "walkers = 1"), "sampler.walkers"),
    (lambda t: t.replace("walkers = 8", "walkers = 8.5"), "sampler.walkers"),
    (lambda t: t.replace("steps = 100", 'steps = "many"'), "sampler.steps"),
    (lambda t: t.replace('"data.h5"', '"missing.h5"'), "data.spectra[0]"),
    (lambda t: t.replace('species = "133Cs"\n', ""), "data.species"),
    (lambda t: t.replace('"133Cs"', '"134Xx"'), "data.species"),
    (lambda t: t.replace('"capped"', '"exact-ish"'), "model.name"),
    (lambda t: t.replace('name = "capped"', 'name = "capped"\ntie = "loose"'), "model.tie"),
    (lambda t: t.replace("log-uniform", "log-uniformish"), "free.a_minus.prior"),
    (lambda t: t.replace("lo = -3500.0, ", ""), "free.a_minus.lo"),
    (lambda t: t.replace("hi = -450.0", "hi = 450.0"), "free.a_minus"),
    (lambda t: t.replace("a_minus = {", "a_zero = {"), "free.a_zero"),
    (lambda t: t + "[fixed]\neta_plus = \"small\"\n", "fixed.eta_plus"),
    (lambda t: t + "[fixed]\nkappa = 0.1\n", "fixed.kappa"),
    (lambda t: t.replace("[free]\n", "[free]\ndensity_scale = { prior = \"default\" }\n"),
     "free.density_scale"),
    (lambda t: t.replace("[data]", "[data\n"), "job"),
    (lambda t: t.replace('spectra = ["data.h5"]', 'spectra = "data.h5"'), "data.spectra"),
    (lambda t: t.replace('species = "133Cs"', 'species = "133Cs"\na_bb = -1500.0'), "data.a_bb"),
    (lambda t: t.replace('species = "133Cs"', 'species = "133Cs-133Cs-6Li"\nallow_species_mismatch = true\n'
                                                'a_bb = "large"'), "data.a_bb"),
])
def test_malformed_job_files_name_the_key(campaign, tmp_path, edit, key):
    shutil.copy(campaign / "data.h5", tmp_path / "data.h5")
    path = tmp_path / "job.toml"
    path.write_text(GOOD)
    load_job(path)                     # the unedited file is valid
    path.write_text(edit(GOOD))
    with pytest.raises(JobError) as info:
        load_job(path)
    assert info.value.argument == key


def test_a_job_gives_a_mixture_its_boson_boson_length(campaign, tmp_path):
    # [data] a_bb reaches lf.fit as the system's B-B scattering length (a0)
    shutil.copy(campaign / "data.h5", tmp_path / "data.h5")
    path = tmp_path / "job.toml"
    path.write_text(GOOD.replace('species = "133Cs"', 'species = "133Cs-133Cs-6Li"\nallow_species_mismatch = true\n'
                                                      'a_bb = -1500.0'))
    species = load_job(path).fit_kwargs()["species"]
    assert (species.name, species.a_bb) == ("133Cs-133Cs-6Li", -1500.0)
    path.write_text(GOOD.replace('species = "133Cs"', 'species = "133Cs-133Cs-6Li"\nallow_species_mismatch = true'))
    assert load_job(path).fit_kwargs()["species"] == "133Cs-133Cs-6Li"      # a_bb = 0: the name


def test_bad_job_on_the_command_line_exits_2(tmp_path):
    (tmp_path / "job.toml").write_text("[data]\nspecies = 'Cs'\n")
    proc = _run("run", tmp_path / "job.toml", "--out", tmp_path / "out")
    assert proc.returncode == 2 and "lossfit: error:" in proc.stderr


@pytest.mark.slow
def test_campaign_job_runs_the_global_fit(tmp_path, run_cli):
    from lossfit.data.curves import write_campaign
    from lossfit.simulate import invented_campaign
    curves, resonance, truth = invented_campaign(seed=3, n_fields=4)
    write_campaign(tmp_path / "campaign.h5", curves, species="133Cs", resonance=resonance)
    (tmp_path / "job.toml").write_text("""[data]
species = "133Cs"
campaign = "campaign.h5"
[model]
name = "capped"
[free]
a_minus = { prior = "default" }
eta_minus = { prior = "default" }
density_scale = { prior = "log-normal", median = 1.0, sigma = 0.2 }
[sampler]
walkers = 8
steps = 60
seed = 2
checkpoint_every = 20
""")
    proc = run_cli("run", tmp_path / "job.toml", "--out", tmp_path / "out", "--quiet")
    assert proc.returncode == 0, proc.stderr
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert {r["name"] for r in summary["summary"]} >= {"a_minus", "eta_minus", "density_scale"}
    assert read_chain_file(tmp_path / "out" / "chains.h5")["iteration"] == 60
    # lossfit report rebuilds the same summary from the stored chain (refusing to
    # overwrite without --overwrite); the medians depend only on the chain
    proc = run_cli("report", tmp_path / "out")
    assert proc.returncode == 3, proc.stderr
    proc = run_cli("report", tmp_path / "out", "--overwrite")
    assert proc.returncode == 0, proc.stderr
    again = json.loads((tmp_path / "out" / "summary.json").read_text())
    before = {r["name"]: r["median"] for r in summary["summary"]}
    after = {r["name"]: r["median"] for r in again["summary"]}
    assert after == pytest.approx(before, rel=1e-12)
    assert (tmp_path / "out" / "spectrum.png").stat().st_size > 0


@pytest.mark.slow
def test_mpi_pool_carries_functions_larger_than_the_default_receive_buffer(tmp_path):
    # a campaign posterior pickles to tens of KiB to MBs; a receive with mpi4py's default
    # 32 KiB buffer truncated it and the master waited forever (docs/cluster.md)
    mpiexec = find_mpiexec()
    assert mpiexec, "mpiexec (from the mpich wheel, extra 'test') is not on PATH"
    script = tmp_path / "big.py"
    script.write_text(
        "import numpy as np\n"
        "from lossfit.inference.pools import make_pool\n"
        "class Big:\n"
        "    def __init__(self):\n"
        "        self.data = np.arange(200000.0)\n"
        "    def __call__(self, x):\n"
        "        return float(self.data[int(x)])\n"
        "pool = make_pool('mpi')\n"
        "if not pool.is_master():\n"
        "    pool.wait()\n"
        "else:\n"
        "    print(sum(pool.map(Big(), range(8))))\n"
        "    pool.close()\n")
    root = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [root, os.environ.get("PYTHONPATH")])))
    proc = subprocess.run([mpiexec, "-n", "2", sys.executable, str(script)], capture_output=True, text=True,
                          env=env, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "28.0"
