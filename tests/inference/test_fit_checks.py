"""Fit checks: goodness of fit, posterior-predictive p, prior-bound pile-up, plausibility.

The demo spectra (an invented scenario) fitted as given pass every check; the same data
with temperatures in uK, with L3 in m^6/s, or fitted as another species fail the checks
that should catch them.
"""

import warnings

import numpy as np
import pytest

import lossfit as lf
from lossfit.errors import FitCheckWarning
from lossfit.inference.fit_checks import prior_bound_pileup
from lossfit.inference.parameters import ParameterSpace
from lossfit.inference.priors import LogUniform
from lossfit.simulate import demo_spectra

FREE = ["a_minus", "eta_minus", "a_star", "eta_star", "density_scale"]


def _fit(spectra, species="133Cs"):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = lf.fit(spectra, species=species, free=FREE, density_sigma=0.2, walkers=24, steps=800, seed=3,
                        progress=False)
    return result, [w for w in caught if issubclass(w.category, FitCheckWarning)]


@pytest.fixture(scope="module")
def demo():
    return demo_spectra()[0]


def test_correct_inputs_pass_every_check(demo):
    result, caught = _fit(demo)
    g = result.fit_checks
    assert not caught and not result.check_warnings
    assert g["dof"] == sum(len(s) for s in demo) - len(FREE)
    assert 0.5 < g["chi2_per_dof"] < 2.0 and g["p_chi2"] > 1e-3 and g["ppp"] > 0.01
    # chi2 by hand from the public rates at the posterior medians (an independent path)
    vals = result.median_values()
    ef = result.efimov()
    chi2 = 0.0
    for s in demo:
        rate = lf.l3 if s.kind == "l3" else lf.beta
        power = 2 if s.kind == "l3" else 1
        model = rate(s.a, s.temperature, species="133Cs", efimov=ef) / vals["density_scale"] ** power
        chi2 += float(np.sum(((s.value - model) / s.error) ** 2))
    assert g["chi2"] == pytest.approx(chi2, rel=1e-6)
    d = result.to_dict()["fit_checks"]
    assert d["dof"] == g["dof"] and len(d["residuals"]) == len(demo)
    assert "fit check: chi2/dof" in result.table() and "posterior-predictive" in result._repr_html_()


def test_temperatures_in_microkelvin_are_caught(demo):
    bad = [lf.LossSpectrum(s.a, s.temperature / 1000, s.value, s.error, kind=s.kind) for s in demo]
    result, caught = _fit(bad)
    text = " ".join(result.check_warnings)
    assert "lie outside 1..100000 nK" in text
    assert "poor fit" in text and result.fit_checks["ppp"] < 0.01
    assert caught


def test_l3_in_m6_per_s_is_caught(demo):
    bad = [lf.LossSpectrum(s.a, s.temperature, s.value * (1e-12 if s.kind == "l3" else 1.0),
                           s.error * (1e-12 if s.kind == "l3" else 1.0), kind=s.kind) for s in demo]
    result, _ = _fit(bad)
    assert any("poor fit" in w for w in result.check_warnings)


def test_species_mismatch_is_named(demo):
    tagged = [lf.LossSpectrum(s.a, s.temperature, s.value, s.error, kind=s.kind, species="Cs133") for s in demo]
    result, _ = _fit(tagged, species="7Li")
    assert any("recorded for Cs133, the fit uses 7Li" in w for w in result.check_warnings)
    same, _ = _fit(tagged, species="133Cs")
    assert not any("recorded for" in w for w in same.check_warnings)


def test_pileup_on_a_prior_bound():
    space = ParameterSpace(["eta_minus"], {"eta_minus": LogUniform(0.005, 2.0)})
    rng = np.random.default_rng(0)
    flat = rng.uniform(np.log(0.005), np.log(2.0), (4000, 1))
    assert prior_bound_pileup(space, flat) == []            # 2 % in each outer 2 %: no warning
    piled = np.log(0.005) + np.abs(rng.normal(0.0, 0.05, (4000, 1)))
    (msg,) = prior_bound_pileup(space, piled)
    assert "lower bound 0.005" in msg
