"""The command line refuses bad jobs and paths before any work, with the documented exit
codes and no traceback, leaves no empty folders, and is quiet when asked."""

import json
import os
import subprocess
import sys

import pytest

from lossfit.batch.demo import demo_job_text
from lossfit.data import write_spectra
from lossfit.simulate import demo_spectra


def _run(*args, cwd=None):
    env = dict(os.environ, MPLBACKEND="Agg")
    return subprocess.run([sys.executable, "-m", "lossfit.cli", *map(str, args)], capture_output=True,
                          text=True, env=env, cwd=cwd, timeout=300)


@pytest.fixture(scope="module")
def job(tmp_path_factory):
    d = tmp_path_factory.mktemp("job")
    spectra, _ = demo_spectra()
    write_spectra(d / "data.h5", spectra)
    (d / "job.toml").write_text(demo_job_text(walkers=10, steps=40, seed=2))
    return d


def _job_with(job, tmp_path, old, new):
    text = (job / "job.toml").read_text()
    assert old in text
    path = job / f"edited-{tmp_path.name}.toml"
    path.write_text(text.replace(old, new))
    return path


def _refused(proc, key):
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    assert f"error: {key}" in proc.stderr, proc.stderr


def test_help_lists_the_exit_codes():
    proc = _run("run", "--help")
    assert proc.returncode == 0
    for code in ("0", "2", "3", "75"):
        assert f"\n  {code} " in proc.stdout


def test_output_path_that_is_a_file_is_refused_before_anything(job, tmp_path, run_cli):
    target = tmp_path / "results"
    target.write_text("not a folder")
    _refused(run_cli("run", job / "job.toml", "--out", target), "out")
    _refused(run_cli("run", job / "job.toml", "--out", target / "below"), "out")
    assert target.read_text() == "not a folder"


def test_burn_longer_than_the_chain_is_refused_before_sampling(job, tmp_path, run_cli):
    path = _job_with(job, tmp_path, 'burn = "auto"', "burn = 60")
    out = tmp_path / "out"
    _refused(run_cli("run", path, "--out", out), "sampler.burn")
    assert not out.exists()                      # no empty folder from a rejected job


def test_rejected_job_leaves_no_folder(job, tmp_path, run_cli):
    path = _job_with(job, tmp_path, 'spectra = ["data.h5"]', 'spectra = ["missing.h5"]')
    out = tmp_path / "out"
    proc = run_cli("run", path, "--out", out)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert not out.exists()


@pytest.mark.slow
def test_quiet_prints_nothing_and_ignored_options_are_named(job, tmp_path, run_cli):
    out = tmp_path / "quiet"
    proc = _run("run", job / "job.toml", "--out", out, "--quiet", "--workers", "3")
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout == "" and proc.stderr == ""
    assert (out / "summary.json").exists()
    # the same job again without --quiet: the finished folder is left alone, and the notice
    # names the ignored option (the result table of a loud run: test_demo_writes_all_outputs...)
    loud = run_cli("run", job / "job.toml", "--out", out, "--workers", "3")
    assert loud.returncode == 0, loud.stderr
    assert "--workers is ignored with --pool serial" in loud.stderr
    assert "already holds the finished run" in loud.stdout


def test_campaign_recorded_for_another_species_warns(tmp_path):
    import warnings

    from lossfit.batch.jobs import parse_job
    from lossfit.data import write_campaign
    from lossfit.errors import FitCheckWarning, LossfitValueError
    from lossfit.simulate import invented_campaign

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        curves, resonance, _ = invented_campaign(seed=3, n_fields=2)
    write_campaign(tmp_path / "campaign.h5", curves, species="133Cs", resonance=resonance)
    text = ('[data]\nspecies = "7Li"\ncampaign = "campaign.h5"\n[model]\nname = "capped"\n[free]\n'
            'a_minus = { prior = "default" }\n[sampler]\nwalkers = 8\nsteps = 60\n')
    job = parse_job(text, str(tmp_path / "job.toml"))
    # refused before any sampling, naming the key; allowed explicitly with a warning
    with pytest.raises(LossfitValueError, match="recorded for 133Cs, the job fits 7Li") as info:
        job.load_data()
    assert info.value.argument == "data.species"
    job = parse_job(text.replace('campaign = "campaign.h5"', 'campaign = "campaign.h5"\nallow_species_mismatch = true'),
                    str(tmp_path / "job.toml"))
    with pytest.warns(FitCheckWarning, match="recorded for 133Cs, the job fits 7Li"):
        job.load_data()


def test_unwritable_output_folder_is_refused(tmp_path, monkeypatch):
    # root may write anywhere, so the permission is simulated: os.access says no
    from lossfit.batch import runner
    from lossfit.errors import LossfitValueError

    monkeypatch.setattr(runner.os, "access", lambda path, mode: False)
    with pytest.raises(LossfitValueError, match="not writable") as info:
        runner.check_output_folder(tmp_path)
    assert info.value.argument == "out"
    with pytest.raises(LossfitValueError, match="not writable"):
        runner.check_output_folder(tmp_path / "new" / "deeper")


@pytest.mark.slow
@pytest.mark.parametrize("study", ['kind = "temperature"\nfeature = "a_minus"',
                                   'kind = "model-comparison"\ncompare = ["free", "shared-eta", "universal"]'])
def test_job_files_run_the_studies(job, tmp_path, study, run_cli):
    text = (job / "job.toml").read_text().replace("steps = 40", "steps = 400") + f"\n[study]\n{study}\n"
    path = job / f"study-{tmp_path.name}.toml"
    path.write_text(text)
    out = tmp_path / "out"
    proc = run_cli("run", path, "--out", out)
    assert proc.returncode == 0, proc.stderr
    import json
    record = json.loads((out / "study.json").read_text())
    assert (out / "study.png").stat().st_size > 0 and record["provenance"]["job_text"] == text
    if "temperature" in study:
        assert [r["temperature_nK"] for r in record["rows"]] == [15.0, 60.0, 250.0]
        assert {"apparent", "thermal"} <= set(record["rows"][0])
    else:
        assert {r["name"] for r in record["rows"]} == {"free", "shared-eta", "universal"}
    again = run_cli("run", path, "--out", out)
    assert again.returncode == 3                      # a finished study is not overwritten


@pytest.mark.parametrize("study, key", [('kind = "sweep"', "study.kind"),
                                        ('kind = "temperature"\nfeature = "a_plus"', "study.feature"),
                                        ('kind = "model-comparison"\ncompare = ["free"]', "study.compare"),
                                        ('kind = "temperature"\nfoo = 1', "study.foo")])
def test_bad_study_sections_name_the_key(job, study, key):
    from lossfit.batch.jobs import JobError, parse_job

    with pytest.raises(JobError) as info:
        parse_job((job / "job.toml").read_text() + f"\n[study]\n{study}\n", str(job / "job.toml"))
    assert info.value.argument == key


@pytest.mark.slow
def test_job_files_run_the_calibration_and_the_spectrum(job, tmp_path, run_cli):
    import json

    import numpy as np

    from lossfit.experiment.binding import binding_energy_khz
    from lossfit.experiment.feshbach import resonance_scattering_length

    # invented binding energies (not measured): van der Waals model, b0 = 550 G
    b = 550.0 + np.geomspace(0.025, 9.0, 12)
    e = binding_energy_khz(resonance_scattering_length(b, 550.0, -10.0, 200.0), "133Cs", model="van-der-waals")
    e_meas = e * (1 + 0.005 * np.random.default_rng(4).standard_normal(e.size))
    lines = ["# invented (not measured)", "B,E_b,E_b_err"] + [f"{x:.6f},{y:.8g},{0.005 * z:.4g}"
                                                            for x, y, z in zip(b, e_meas, e)]
    (tmp_path / "binding.csv").write_text("\n".join(lines) + "\n")
    (tmp_path / "cal.toml").write_text('[data]\nspecies = "133Cs"\nbinding_energies = "binding.csv"\n[study]\n'
                                       'kind = "calibration"\nguess = [549.9, -9.0, 190.0]\n')
    proc = run_cli("run", tmp_path / "cal.toml", "--out", tmp_path / "cal")
    assert proc.returncode == 0, proc.stderr
    record = json.loads((tmp_path / "cal" / "study.json").read_text())
    assert record["preferred"] == "van-der-waals"
    assert abs(record["fits"][0]["params"][0] - 550.0) < 0.01
    spec = (job / "job.toml").read_text().replace("steps = 40", "steps = 300") + '\n[study]\nkind = "spectrum"\n'
    (job / f"spectrum-{tmp_path.name}.toml").write_text(spec)
    proc = run_cli("run", job / f"spectrum-{tmp_path.name}.toml", "--out", tmp_path / "spec")
    assert proc.returncode == 0, proc.stderr
    record = json.loads((tmp_path / "spec" / "study.json").read_text())
    assert record["kind"] == "spectrum" and record["kappa_star_per_a0"] > 0
    assert (tmp_path / "spec" / "study.png").stat().st_size > 0


def test_job_with_automatic_steps_runs_to_a_recorded_stop(job, tmp_path, run_cli):
    # steps = "auto" with a small cap: the run stops at the cap and summary.json says why;
    # a bad cap is refused naming its key, and --steps takes "auto" too
    path = _job_with(job, tmp_path, "steps = 40", 'steps = "auto"\nmax_steps = 200')
    out = tmp_path / "auto"
    proc = run_cli("run", path, "--out", out, "--quiet")
    assert proc.returncode == 0, proc.stderr
    settings = json.loads((out / "summary.json").read_text())["settings"]
    assert settings["stopped"] in ("converged", "max_steps") and settings["steps"] <= 200
    assert settings["tau_at_stop"] > 0
    again = run_cli("run", path, "--out", out)
    assert again.returncode == 0 and "already holds the finished run" in again.stdout
    bad = _job_with(job, tmp_path, "steps = 40", 'steps = "auto"\nmax_steps = 5')
    _refused(run_cli("run", bad, "--out", tmp_path / "bad"), "sampler.max_steps")
    _refused(run_cli("run", job / "job.toml", "--out", tmp_path / "x", "--steps", "often"), "")


def test_help_answers_without_loading_the_library():
    # the command line loads the library only for the command it runs
    proc = subprocess.run([sys.executable, "-X", "importtime", "-m", "lossfit.cli", "--help"], capture_output=True,
                          text=True, timeout=60)
    assert proc.returncode == 0
    loaded = {line.rsplit("|", 1)[-1].strip() for line in proc.stderr.splitlines() if "|" in line}
    assert "lossfit.errors" in loaded
    assert not {"numba", "emcee", "h5py", "matplotlib", "lossfit.rates"} & loaded
