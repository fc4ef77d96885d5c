"""The temperature study on invented spectra (not measured data) made with the exact model.

Fact of the trade (common practice, no source): fitted with the zero-energy law, the
apparent a_- moves to smaller |a| as T rises; the thermally averaged fits agree with each
other and with the truth.
"""

import warnings

import numpy as np
import pytest

import lossfit as lf
from lossfit.plotting import temperature_study_plot

CS = "133Cs"


def _spectra(efimov, kind, temps, a, seed):
    rng = np.random.default_rng(seed)
    rate = lf.l3 if kind == "l3" else lf.beta
    out = []
    for t in temps:
        model = rate(a, t, species=CS, efimov=efimov)
        out.append(lf.LossSpectrum(a, t, model * (1 + 0.1 * rng.standard_normal(a.size)), 0.1 * model, kind=kind))
    return out


@pytest.mark.slow
def test_apparent_position_moves_and_thermal_fits_agree():
    truth = lf.Efimov(a_minus=-900.0, eta_minus=0.08)
    spectra = _spectra(truth, "l3", (10.0, 60.0, 250.0), -np.geomspace(3000.0, 500.0, 20), 3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # 16 walkers (not the default 32): the same chain length for one or two parameters;
        # measured with sampler seeds 0, 1, 2: chi2 p = 0.54-0.57, joint 95 % interval
        # [-909.4, -899.1] (32 walkers: [-909.3, -899.0]), 3-sigma bounds >= 9 a0 from the truth
        study = lf.temperature_study(spectra, species=CS, steps=2000, walkers=16)
    assert [r["temperature_nK"] for r in study.rows] == [10.0, 60.0, 250.0]
    apparent = [abs(r["apparent"][0]) for r in study.rows]
    assert apparent[0] > apparent[1] > apparent[2]                # smaller |a| as T rises
    assert study.consistent and study.dof == 2
    joint = {r["name"]: r for r in study.fits["joint"].summary()}["a_minus"]
    assert joint["lo95"] <= -900.0 <= joint["hi95"]
    for t in (10.0, 60.0, 250.0):                                  # each within 3 sigma
        lo, hi = np.percentile(study.fits[("thermal", t)].samples["a_minus"], [0.135, 99.865])
        assert lo <= -900.0 <= hi
    fig = temperature_study_plot(study)
    assert "consistency" in fig.axes[0].get_title()
    assert "joint" in study.table()


@pytest.mark.slow
def test_a_star_from_beta():
    truth = lf.Efimov(a_star=950.0, eta_star=0.1)
    spectra = _spectra(truth, "beta", (20.0, 150.0), np.geomspace(400.0, 3000.0, 16), 5)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # 16 walkers: measured with sampler seeds 0, 1, 2, chi2 p >= 0.89 and a* in [941, 967]
        study = lf.temperature_study(spectra, species=CS, feature="a_star", steps=1500, walkers=16)
    assert study.consistent
    assert study.rows[0]["thermal"][1] - 30 < 950.0 < study.rows[0]["thermal"][2] + 30


def test_needs_two_temperatures():
    spectra = _spectra(lf.Efimov(a_minus=-900.0, eta_minus=0.08), "l3", (10.0,), -np.geomspace(3000.0, 500.0, 8), 1)
    with pytest.raises(lf.LossfitValueError) as info:
        lf.temperature_study(spectra, species=CS)
    assert info.value.argument == "spectra"
    with pytest.raises(lf.LossfitValueError) as info:
        lf.temperature_study(spectra, species=CS, feature="a_plus")
    assert info.value.argument == "feature"
