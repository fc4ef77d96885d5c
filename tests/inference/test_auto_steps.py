"""steps="auto": sample until the chain is long enough (emcee's documented rule)."""

import json
import warnings

import numpy as np
import pytest
from independent import Gaussian

import lossfit as lf
from lossfit.errors import LossfitValueError
from lossfit.inference.diagnostics import autocorrelation_times
from lossfit.inference.sampling import CHECK_EVERY, convergence_state, sample
from lossfit.simulate import demo_spectra


def _target():
    mean = np.array([1.5, -2.0])
    return Gaussian(mean, np.array([[1.0, 0.8], [0.8, 2.0]])), mean


def test_auto_run_stops_when_the_rule_holds_and_not_before():
    # the rule of emcee's documentation ("Autocorrelation analysis & convergence"):
    # long enough in autocorrelation times and tau stable to 1 % between checks
    logp, mean = _target()
    p0 = mean + np.random.default_rng(0).standard_normal((16, 2))
    run = sample(logp, p0, "auto", seed=3)
    n = run.chain.shape[0]
    assert run.stop_reason == "converged" and n % CHECK_EVERY == 0
    ok, tau, needed = convergence_state(run.chain)
    assert ok and n >= needed and n >= 50 * tau
    # one check earlier the rule did not hold (the run did not overshoot)
    assert not convergence_state(run.chain[:n - CHECK_EVERY])[0]
    assert run.tau == pytest.approx(float(np.max(autocorrelation_times(run.chain))))
    # the chain length is within 2x of what 50 tau asks for
    assert n <= 2 * 50 * tau + CHECK_EVERY


def test_auto_run_stops_at_max_steps_and_says_so():
    logp, mean = _target()
    p0 = mean + np.random.default_rng(1).standard_normal((16, 2))
    run = sample(logp, p0, "auto", seed=3, max_steps=300)
    assert run.chain.shape[0] == 300 and run.stop_reason == "max_steps"
    with pytest.raises(LossfitValueError) as info:
        sample(logp, p0, "auto", max_steps=10)
    assert info.value.argument == "max_steps"


def test_auto_run_resumed_after_a_cap_gives_the_uninterrupted_chain(tmp_path):
    logp, mean = _target()
    p0 = mean + np.random.default_rng(2).standard_normal((16, 2))
    whole = sample(logp, p0, "auto", seed=5, backend=tmp_path / "whole.h5")
    first = sample(logp, p0, "auto", seed=5, backend=tmp_path / "part.h5", max_steps=400)
    assert first.stop_reason == "max_steps" and whole.chain.shape[0] > 400
    resumed = sample(logp, p0, "auto", seed=5, backend=tmp_path / "part.h5")
    assert resumed.stop_reason == "converged"
    assert np.array_equal(resumed.chain, whole.chain)
    # resuming a converged run takes no step
    again = sample(logp, p0, "auto", seed=5, backend=tmp_path / "whole.h5")
    assert np.array_equal(again.chain, whole.chain) and again.stop_reason == "converged"


@pytest.mark.slow
def test_auto_fit_of_the_demo_reproduces_a_long_fixed_run(tmp_path):
    # the spectrum demo (invented scenario): an automatic run stops within 2x of the
    # 50 tau rule and its medians agree with a fixed 6000-step run within 0.2 sigma
    spectra, _ = demo_spectra()
    kw = dict(species="133Cs", free=["a_minus", "eta_minus", "a_star", "eta_star", "density_scale"],
              density_sigma=0.2, seed=1, progress=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        auto = lf.fit(spectra, steps="auto", **kw)
        fixed = lf.fit(spectra, steps=6000, **kw)
    assert auto.settings["stopped"] == "converged"
    tau = auto.settings["tau_at_stop"]
    assert auto.chain.shape[0] <= 2 * 50 * tau
    for a_row, f_row in zip(auto.summary(), fixed.summary()):
        sigma = 0.5 * (f_row["hi68"] - f_row["lo68"])
        assert abs(a_row["median"] - f_row["median"]) < 0.2 * sigma, a_row["name"]
    summary = json.loads(json.dumps(auto.to_dict(), default=str))
    assert summary["settings"]["stopped"] == "converged"
