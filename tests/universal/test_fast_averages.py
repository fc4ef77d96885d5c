"""The fast thermal averages against the adaptive reference quadrature.

Reference: lossfit's adaptive Gauss-Kronrod engine (QUADPACK's qk15 rule, Piessens et
al. 1983) run at rtol 1e-12 over the same energy-resolved kernels, itself checked
against scipy.integrate.quad in tests/test_thermal.py and tests/universal/test_zero_range.py.
Requirement (docs/thermal-averages.md): <= 1e-6 relative over the working range,
eta 0.005-2, |a| 5 r_vdW-1e6 a0 on both sides (a > 0: through the three-body table
and its high-energy extension),
T 1 nK-3 uK, every channel, 133Cs and 7Li.
"""

import math
import warnings

import numpy as np
import pytest

import lossfit as lf
from lossfit.errors import LossfitValueError
from lossfit.inference.likelihood import SpectrumLikelihood
from lossfit.universal.models import get_model

TOL = 1e-6


@pytest.fixture(autouse=True)
def _quiet():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", lf.errors.ValidityWarning)
        yield


def _grid(sp, a_range, n_a, n_t, t_range=(1.0, 3000.0)):
    a = np.geomspace(*a_range, n_a)
    t = np.geomspace(*t_range, n_t)
    aa, tt = np.meshgrid(a, t)
    return aa.ravel(), tt.ravel()


def _positive_reach(sp, t_max):
    # a where E = 42.25 k_B T reaches 1000 hbar^2/(m a^2), inside the three-body table
    hbar, kb, a0 = 1.054571817e-34, 1.380649e-23, 5.29177210903e-11
    return np.sqrt(1000.0 / 42.25 * hbar ** 2 / (sp.mass * kb * t_max * 1e-9)) / a0


def _compare(rate, a, t, ef, channel, sp, model="zero-range"):
    fast = rate(a, t, species=sp, efimov=ef, model=model, channel=channel)
    ref = rate(a, t, species=sp, efimov=ef, model=model, channel=channel, rtol=1e-12)
    ok = ref > 1e-300
    rel = np.abs(fast[ok] / ref[ok] - 1.0)
    # where the reference is exactly zero (breakup far below threshold) so is the fast value
    assert np.all(fast[~ok] < 1e-300 + 1e-12 * np.max(np.abs(ref)))
    return rel.max()


def _etas(dense):
    return (0.005, 0.02, 0.1, 0.5, 2.0) if dense else (0.005, 0.3)


@pytest.mark.parametrize("name", ["133Cs", "7Li"])
@pytest.mark.parametrize("dense", [False, pytest.param(True, marks=pytest.mark.slow)])
def test_three_body_negative_a(name, dense):
    sp = lf.species(name)
    a, t = _grid(sp, (5 * sp.r_vdw, 1e6), 41 if dense else 13, 9 if dense else 4)
    for eta in _etas(dense):
        # a_- inside the scanned range: the resonance sweeps through the points
        ef = lf.Efimov(a_minus=-math.sqrt(5 * sp.r_vdw * 1e4), eta_minus=eta)
        assert _compare(lf.l3, -a, t, ef, "total", sp) < TOL


@pytest.mark.parametrize("name", ["133Cs", "7Li"])
@pytest.mark.parametrize("channel", ["total", "shallow", "deep"])
@pytest.mark.parametrize("dense", [False, pytest.param(True, marks=pytest.mark.slow)])
def test_three_body_positive_a(name, channel, dense):
    sp = lf.species(name)
    a, t = _grid(sp, (5 * sp.r_vdw, 1e6), 41 if dense else 13, 9 if dense else 4)
    for eta in _etas(dense):
        ef = lf.Efimov(a_plus=math.sqrt(5 * sp.r_vdw * 1e4), eta_plus=eta)
        assert _compare(lf.l3, a, t, ef, channel, sp) < TOL


@pytest.mark.parametrize("name", ["133Cs", "7Li"])
@pytest.mark.parametrize("channel", ["relaxation", "breakup", "total"])
@pytest.mark.parametrize("dense", [False, pytest.param(True, marks=pytest.mark.slow)])
def test_atom_dimer(name, channel, dense):
    sp = lf.species(name)
    a, t = _grid(sp, (5 * sp.r_vdw, 2e4), 31 if dense else 9, 9 if dense else 4)
    if channel != "relaxation":
        # the breakup table ends lower than the relaxation table; and where breakup needs
        # more than 20 k_B T (rates below e^-20 of the relaxation rate) the reference,
        # which stops at 42.25 k_B T, is itself no longer accurate to 1e-6
        x_b = (_positive_reach(sp, t) / a) ** 2 * 42.25 / 1000.0
        keep = (a < 0.999 * _positive_reach(sp, t)) & (x_b < 20.0)
        a, t = a[keep], t[keep]
    for eta in _etas(dense):
        ef = lf.Efimov(a_star=math.sqrt(5 * sp.r_vdw * 2e4), eta_star=eta)
        assert _compare(lf.beta, a, t, ef, channel, sp) < TOL


def test_sharp_resonances_at_low_temperature():
    # eta = 0.005 exactly on the three-atom and atom-dimer resonances at 1-5 nK, where
    # the thermal average is dominated by a line ~0.01 rad wide in the Efimov phase
    sp = lf.species("133Cs")
    t = np.array([1.0, 2.0, 5.0])
    ef = lf.Efimov(a_minus=-900.0, eta_minus=0.005, a_star=1100.0, eta_star=0.005)
    a_neg = -900.0 * np.array([0.98, 0.995, 1.0, 1.005, 1.02])
    a_pos = 1100.0 * np.array([0.98, 0.995, 1.0, 1.005, 1.02])
    for a_side, rate in ((a_neg, lf.l3), (a_pos, lf.beta)):
        aa, tt = np.meshgrid(a_side, t)
        channel = "total" if rate is lf.l3 else "relaxation"
        assert _compare(rate, aa.ravel(), tt.ravel(), ef, channel, sp) < TOL


@pytest.mark.parametrize("model", ["capped", "threshold"])
def test_closed_forms_match_the_adaptive_quadrature(model):
    # the capped and threshold averages are exact closed forms in the incomplete gamma
    # function; the adaptive quadrature of their kernels agrees to its tolerance
    sp = lf.species("133Cs")
    ef = lf.Efimov(a_minus=-900.0, eta_minus=0.05, a_plus=250.0, eta_plus=0.1, a_star=950.0, eta_star=0.05)
    a, t = _grid(sp, (600.0, 1e5), 15, 6)
    for rate, sign, channel in ((lf.l3, -1.0, "total"), (lf.l3, 1.0, "total"), (lf.beta, 1.0, "relaxation")):
        assert _compare(rate, sign * a, t, ef, channel, sp, model=model) < 1e-10


def test_plans_equal_the_general_path():
    # the fixed-data plan and the general path run the same rule: equal to rounding
    # (common practice, no source: two orderings of one sum)
    sp = lf.species("133Cs")
    model = get_model("zero-range")
    rng = np.random.default_rng(3)
    a = np.concatenate([-np.geomspace(600, 5e4, 20), np.geomspace(600, 3000, 10)])
    t = rng.uniform(5.0, 400.0, a.size)
    eta = 0.03           # plans built for eta_min = eta use the general path's rules for eta
    ef = lf.Efimov(a_minus=-1100.0, eta_minus=eta, a_plus=260.0, eta_plus=eta, a_star=1000.0, eta_star=eta)
    for kind, rate in (("l3", lf.l3), ("beta", lf.beta)):
        sel = slice(None) if kind == "l3" else slice(20, None)
        like = SpectrumLikelihood([lf.LossSpectrum(a[sel], t[sel], np.ones(a[sel].size), np.ones(a[sel].size),
                                                   kind=kind)], sp, model, eta_min=eta)
        np.testing.assert_allclose(like.blocks[0].predict(ef), rate(a[sel], t[sel], species=sp, efimov=ef),
                                   rtol=1e-13)


def test_plans_for_small_eta_are_finer_and_refuse_below_their_floor():
    sp = lf.species("133Cs")
    a = -np.geomspace(600, 5e4, 12)
    t = np.full(a.size, 20.0)
    spec = lf.LossSpectrum(a, t, np.ones(a.size), np.ones(a.size), kind="l3")
    ef = lf.Efimov(a_minus=-1100.0, eta_minus=0.001)
    like = SpectrumLikelihood([spec], sp, "zero-range", eta_min=0.001)
    ref = lf.l3(a, t, species=sp, efimov=ef, rtol=1e-12)
    np.testing.assert_allclose(like.blocks[0].predict(ef), ref, rtol=TOL)
    default = SpectrumLikelihood([spec], sp, "zero-range")
    with pytest.raises(LossfitValueError, match="eta_minus"):
        default.blocks[0].predict(ef)
    # the public path builds its own finer rule for eta below the default floor
    np.testing.assert_allclose(lf.l3(a, t, species=sp, efimov=ef), ref, rtol=TOL)


@pytest.mark.slow
def test_fit_gives_the_same_posterior_on_fast_and_reference_paths():
    # demo scenario, fixed seed and start: the two likelihoods differ by ~1e-7
    # relative, so the chains agree and the medians coincide far within 0.05 sigma
    # (measured: identical chains, median difference 0, at 100 and at 150 steps)
    from lossfit.simulate import demo_spectra
    spectra, truth = demo_spectra()
    kw = dict(species="133Cs", free=["a_minus", "eta_minus", "a_star", "eta_star"], walkers=12, steps=100,
              seed=4, progress=False, initial={k: truth[k] for k in ("a_minus", "eta_minus", "a_star", "eta_star")})
    fast = lf.fit(spectra, **kw)
    ref = lf.fit(spectra, rtol=1e-10, **kw)
    for name in fast.space.names:
        f, r = fast.samples[name], ref.samples[name]
        assert abs(np.median(f) - np.median(r)) <= 0.05 * np.std(r), name
