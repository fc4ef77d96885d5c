"""The sampler wrapper, diagnostics, priors and the spectrum fit."""

import json
import math
import warnings

import numpy as np
import pytest
from independent import Gaussian

import lossfit as lf
from lossfit.errors import ConvergenceWarning, LossfitValueError
from lossfit.inference.diagnostics import autocorrelation_times, split_rhat
from lossfit.inference.priors import LogNormal, LogUniform
from lossfit.inference.sampling import sample

CS = lf.species("133Cs")


def test_sampler_recovers_mean_and_covariance_of_analytic_gaussian():
    # Reference: the analytic moments of the target (exact), with tolerances from the
    # Monte Carlo error sigma / sqrt(ESS) (common practice, no source).
    mean = np.array([1.5, -2.0])
    cov = np.array([[1.0, 0.8], [0.8, 2.0]])
    rng = np.random.default_rng(0)
    run = sample(Gaussian(mean, cov), mean + rng.standard_normal((32, 2)), 3000, seed=11)
    chain = run.chain[500:]
    flat = chain.reshape(-1, 2)
    tau = autocorrelation_times(chain)
    ess = flat.shape[0] / tau.max()
    assert np.all(np.abs(flat.mean(axis=0) - mean) < 4 * np.sqrt(np.diag(cov) / ess))
    assert np.allclose(np.cov(flat, rowvar=False), cov, rtol=0.1, atol=0.05)
    assert np.all(split_rhat(chain) < 1.02)
    assert 0.3 < run.acceptance.mean() < 0.9


def test_split_rhat_flags_walkers_in_different_places():
    rng = np.random.default_rng(1)
    chain = rng.standard_normal((400, 8, 1))
    assert split_rhat(chain)[0] < 1.02
    chain[:, :4] += 3.0                       # half the walkers sit elsewhere
    assert split_rhat(chain)[0] > 1.3


def test_priors_in_sampling_coordinates():
    # A log-uniform prior is flat in ln|a|; its normalisation integrates to one.
    p = LogUniform(-300.0, -3000.0)
    assert p.sign == -1.0
    t = np.linspace(math.log(300.0), math.log(3000.0), 2001)
    dens = np.exp([p.log_density_theta(x) for x in t])
    assert np.trapezoid(dens, t) == pytest.approx(1.0, rel=1e-9)
    assert p.log_density_theta(math.log(5000.0)) == -math.inf
    ln = LogNormal(1.0, 0.2)
    t = np.linspace(-2, 2, 4001)
    assert np.trapezoid(np.exp([ln.log_density_theta(x) for x in t]), t) == pytest.approx(1.0, rel=1e-6)
    with pytest.raises(LossfitValueError, match="share a sign"):
        LogUniform(-300.0, 3000.0)


def _synthetic(seed=5, rel=0.12):
    # Invented scenario for the recovery check, generated from the forward model.
    truth = dict(a_minus=-850.0, eta_minus=0.06, a_star=900.0, eta_star=0.1)
    ef = lf.Efimov(**truth)
    rng = np.random.default_rng(seed)
    spectra = []
    a = -np.geomspace(450.0, 3000.0, 16)
    for t in (20.0, 150.0):
        m = lf.l3(a, t, species=CS, efimov=ef, model="capped")
        spectra.append(lf.LossSpectrum(a, t, m * (1 + rel * rng.standard_normal(a.size)), rel * m))
    a = np.geomspace(350.0, 3000.0, 14)
    m = lf.beta(a, 30.0, species=CS, efimov=ef, model="capped")
    spectra.append(lf.LossSpectrum(a, 30.0, m * (1 + rel * rng.standard_normal(a.size)), rel * m,
                                   kind="beta"))
    return spectra, truth


@pytest.mark.slow
def test_recovers_known_parameters_from_synthetic_spectra():
    spectra, truth = _synthetic()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        res = lf.fit(spectra, species=CS, free=list(truth), model="capped", steps=2500, seed=2,
                     progress=False)
    for row in res.summary():
        if row["name"] in truth:
            assert row["lo95"] <= truth[row["name"]] <= row["hi95"], row
    assert res.correlation().shape == (4, 4)
    assert set(res.derived) == {"a_star/a_minus", "a_minus/r_vdw", "eta_star/eta_minus"}
    assert np.median(res.derived["a_minus/r_vdw"]) == pytest.approx(-850.0 / CS.r_vdw, rel=0.02)
    d = res.to_dict()
    json.dumps(d)
    assert "<table>" in res._repr_html_()
    assert "a_minus (a0)" in res.table()


@pytest.mark.slow
def test_universal_tie_and_density_nuisance():
    spectra, truth = _synthetic(seed=9)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        res = lf.fit(spectra[:2], species=CS, free=["a_minus", "eta", "density_scale"], tie="universal",
                     density_sigma=0.3, steps=800, seed=4, progress=False)
    ef = res.efimov()
    assert ef.a_star / ef.a_minus == pytest.approx(-1.0652, rel=1e-4)   # docs/architecture.md, conventions
    assert ef.eta_star == ef.eta_minus
    assert np.all(res.derived["a_star/a_minus"] == res.derived["a_star/a_minus"][0])


def test_short_chain_warns():
    spectra, truth = _synthetic()
    with pytest.warns(ConvergenceWarning, match="too short"):
        lf.fit(spectra[:1], species=CS, free=["a_minus", "eta_minus"], steps=60, seed=1, progress=False)


def test_resume_from_hdf5_reproduces_an_uninterrupted_run(tmp_path):
    spectra, _ = _synthetic()
    kw = dict(species=CS, free=["a_minus", "eta_minus"], steps=200, seed=7, progress=False, walkers=8)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        part = lf.fit(spectra[:1], backend=tmp_path / "a.h5", **kw)
        kw["steps"] = 400
        resumed = lf.fit(spectra[:1], backend=tmp_path / "a.h5", **kw)
        whole = lf.fit(spectra[:1], backend=tmp_path / "b.h5", **kw)
    assert part.chain.shape[0] == 200 and resumed.chain.shape[0] == 400
    assert np.array_equal(resumed.chain, whole.chain)


@pytest.mark.parametrize("kw, argument", [
    (dict(free=["a_minus", "eta_minus"], walkers=3), "walkers"),
    (dict(free=["a_zero"]), "free"),
    (dict(free=["a_plus"]), "free"),                                    # no L3 at a > 0
    (dict(free=["a_minus"], fixed={"a_minus": -900.0}), "fixed"),
    (dict(free=["a_minus", "density_scale"]), "density_scale"),        # prior width missing
    (dict(free=["a_minus"], steps=1), "steps"),
    (dict(free=["a_minus", "eta_minus"], priors={"a_minus": (100.0, 2000.0)}), "priors['a_minus']"),
    (dict(free=["eta", "eta_minus"]), "free"),
])
def test_bad_fit_arguments(kw, argument):
    spectra, _ = _synthetic()
    with pytest.raises(LossfitValueError) as info:
        lf.fit(spectra[:1], species=CS, progress=False, **kw)
    assert info.value.argument == argument


def test_missing_parameter_for_the_data_is_named():
    spectra, _ = _synthetic()
    with pytest.raises(LossfitValueError, match="a_star"):
        lf.fit(spectra, species=CS, free=["a_minus", "eta_minus"], progress=False)


def test_likelihood_speed_path_matches_public_rates():
    # The likelihood's fused fast path must give exactly what the public API gives.
    from lossfit.inference.likelihood import SpectrumLikelihood
    spectra, truth = _synthetic()
    ef = lf.Efimov(**truth)
    like = SpectrumLikelihood(spectra, CS, "capped", rtol=1e-10)
    for s, pred in zip(spectra, like.predict(ef, density_scale=1.1)):
        func, power = (lf.l3, 2) if s.kind == "l3" else (lf.beta, 1)
        ref = func(s.a, s.temperature, species=CS, efimov=ef, model="capped") / 1.1 ** power
        np.testing.assert_allclose(pred, ref, rtol=1e-8)


def test_burn_in_of_a_chain_too_short_for_any_tau():
    # emcee returns NaN autocorrelation times for a 3-step chain; the default burn-in
    # must still be an integer (steps/5 rule, common practice, no source)
    from lossfit.inference.posterior import auto_burn
    chain = np.zeros((3, 8, 2))
    assert auto_burn(chain) == 0
    chain = np.random.default_rng(1).standard_normal((50, 8, 2))
    assert 10 <= auto_burn(chain) <= 25
