"""Exports: pandas DataFrame, ArviZ data (and netCDF through it), and a run folder back to
a result object."""

import json
import os
import subprocess
import sys
import warnings

import numpy as np
import pytest

import lossfit as lf
from lossfit.batch.demo import demo_job_text
from lossfit.data import write_spectra
from lossfit.simulate import demo_spectra

az = pytest.importorskip("arviz")


@pytest.fixture(scope="module")
def result():
    spectra, _ = demo_spectra()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return lf.fit(spectra[:2], species="133Cs", free=["a_minus", "eta_minus"], walkers=16, steps=1500,
                      seed=4, progress=False)


def test_dataframe_holds_the_samples_with_walker_and_step(result):
    df = result.to_dataframe()
    assert list(df.columns) == ["walker", "step", "a_minus", "eta_minus"]
    assert len(df) == result.samples["a_minus"].size
    assert np.array_equal(df["a_minus"].to_numpy(), result.samples["a_minus"])
    assert df["step"].min() == result.burn and df["walker"].nunique() == 16


def test_arviz_summary_matches_lossfit(result):
    # ArviZ's own estimators (rank-normalised split R-hat, Vehtari et al., Bayesian Anal.
    # 16, 667 (2021)) against lossfit's split-R-hat: within sampling noise
    data = result.to_arviz()
    s = az.summary(data, var_names=result.names, stat_focus="median", round_to="none")
    for name in result.names:
        assert s.loc[name, "median"] == pytest.approx(np.median(result.samples[name]), rel=1e-3)
        assert abs(s.loc[name, "r_hat"] - result.rhat[name]) < 0.03
    n = sum(len(sp) for sp in result.likelihood.spectra)
    assert data.observed_data["y"].shape == (n,)
    assert data.posterior_predictive["y"].shape == (16, result.chain.shape[0] - result.burn, n)
    loo = az.loo(data)                          # the pointwise log likelihood is usable
    assert np.isfinite(loo.elpd_loo)


def test_netcdf_round_trip(result, tmp_path):
    path = result.to_netcdf(tmp_path / "posterior.nc")
    back = az.from_netcdf(path)
    assert np.array_equal(back.posterior["a_minus"].values, result.to_arviz().posterior["a_minus"].values)


@pytest.mark.slow
def test_load_result_reproduces_the_summary(tmp_path):
    spectra, _ = demo_spectra()
    write_spectra(tmp_path / "data.h5", spectra)
    (tmp_path / "job.toml").write_text(demo_job_text(walkers=12, steps=300, seed=3))
    out = tmp_path / "out"
    env = dict(os.environ, MPLBACKEND="Agg")
    proc = subprocess.run([sys.executable, "-m", "lossfit.cli", "run", str(tmp_path / "job.toml"), "--out", str(out),
                           "--quiet"], capture_output=True, text=True, env=env, timeout=600)
    assert proc.returncode == 0, proc.stderr
    summary = json.loads((out / "summary.json").read_text())
    summary.pop("provenance")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rebuilt = lf.load_result(out)
    assert json.loads(json.dumps(rebuilt.to_dict(), default=str)) == summary
    with pytest.raises(lf.LossfitValueError) as info:
        lf.load_result(tmp_path)
    assert info.value.argument == "run_dir"
