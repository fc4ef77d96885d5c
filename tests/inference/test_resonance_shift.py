"""Resonance shifts reuse the prepared thermal averages: zero-range scale invariance
(a -> rho a with T -> T / rho^2) checked against plans built afresh and against the
adaptive reference quadrature, and the global fit's log posterior with reused plans
against rebuilt ones."""

import warnings

import numpy as np
import pytest

import lossfit as lf
from lossfit.errors import ValidityWarning
from lossfit.inference.global_fit import prepare_curves
from lossfit.inference.likelihood import RateBlock
from lossfit.simulate import invented_campaign

CS = lf.species("133Cs")
WALKERS = 4


def _walker_efimov(rng):
    def spread(centre, width):
        return centre * np.exp(width * rng.standard_normal(WALKERS))
    return lf.Efimov.trusted(a_minus=spread(-900.0, 0.1), eta_minus=spread(0.08, 0.3), a_plus=spread(1000.0, 0.1),
                             eta_plus=spread(0.08, 0.3), a_star=spread(950.0, 0.1), eta_star=spread(0.2, 0.3))


@pytest.mark.parametrize("kind, sign, channel", [("l3", -1.0, None), ("l3", 1.0, "total"), ("beta", 1.0, None)])
def test_scaled_plan_equals_a_plan_built_at_the_moved_points(kind, sign, channel):
    # the prepared weights at (a, T) give the averages at (rho a, T / rho^2) exactly: a plan
    # built afresh there agrees to rounding (zero-range theory has no other length)
    rng = np.random.default_rng(5)
    a = sign * np.geomspace(300.0, 3e4, 10)
    temps = np.geomspace(10.0, 500.0, 10)
    efimov = _walker_efimov(rng)
    ln_rho = 0.2 * rng.standard_normal((WALKERS, a.size))
    got = RateBlock(kind, a, temps, CS, "zero-range", channel=channel).plan.evaluate_scaled(efimov, ln_rho)
    for w, one in enumerate(efimov.walkers()):
        fresh = RateBlock(kind, a * np.exp(ln_rho[w]), temps * np.exp(-2.0 * ln_rho[w]), CS, "zero-range",
                          channel=channel).plan.evaluate(one)
        np.testing.assert_allclose(got[w], fresh, rtol=1e-12)


def test_scaled_plan_agrees_with_the_reference_quadrature():
    # outside check: scipy's adaptive quadrature of the same average at the moved points,
    # to the fast rule's accuracy (docs/thermal-averages.md: <= 1e-5 relative at eta >= 0.005)
    a = -np.geomspace(400.0, 2e4, 6)
    temps = np.geomspace(20.0, 300.0, 6)
    efimov = lf.Efimov(a_minus=-900.0, eta_minus=0.05)
    ln_rho = np.linspace(-0.15, 0.2, a.size)
    got = RateBlock("l3", a, temps, CS, "zero-range").plan.evaluate_scaled(efimov, ln_rho)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        want = lf.l3(a * np.exp(ln_rho), temps * np.exp(-2.0 * ln_rho), species=CS, efimov=efimov, rtol=1e-9)
    np.testing.assert_allclose(got, want, rtol=1e-5)


@pytest.fixture(scope="module", params=["resonance", "resonance and field noise", "dimer curves"])
def campaign(request):
    # invented campaign (lossfit.simulate, not measured data), every resonance parameter
    # free; the field noise sigma_B (G) in the second case; atom-dimer curves at a > 0
    # beside the atom curves in the third (beta tables, table objects per curve)
    systematics = {"density_scale": 0.2, "b0": 0.01, "width": 0.1, "a_bg": 5.0}
    if request.param == "resonance and field noise":
        systematics["sigma_B"] = (1e-4, 0.02)
    dimers = request.param == "dimer curves"
    free = ["a_minus", "eta_minus"] + (["a_star", "eta_star"] if dimers else [])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        curves, res, truth = invented_campaign(11, n_fields=4, dimer_fields=2 if dimers else 0)
        space, likelihood, post = prepare_curves(curves, species=CS, free=free, resonance=res,
                                                 priors={"a_star": (300.0, 3000.0)} if dimers else None,
                                                 systematics=systematics)
    assert likelihood.dimers.any() == dimers
    near = {**truth, "density_scale": 1.0, "b0": res.b0, "width": res.width, "a_bg": res.a_bg, "sigma_B": 0.004}
    centre = space.theta([near[n] for n in space.names])
    return space, likelihood, post, centre


def test_reused_plans_give_the_rebuilt_log_posterior(campaign):
    space, likelihood, post, centre = campaign
    assert 0.0 < likelihood.shift_margin <= 0.8
    rng = np.random.default_rng(3)
    spread = np.array([{"b0": 3e-6, "width": 0.01, "sigma_B": 0.3}.get(n, 0.02) for n in space.names])
    thetas = centre + spread * rng.standard_normal((8, centre.size))
    reused = post.batch(thetas)
    efimov, values = space.efimov(space.values(thetas)), space.values(thetas)
    _, _, served, rebuilt = likelihood._rescaled_coefficients_of_set(efimov, values)
    assert len(served) == 8 and not rebuilt          # all within the margin: none rebuilt
    margin = likelihood.shift_margin
    likelihood.shift_margin = 0.0      # every walker moved at all rebuilds its plans
    try:
        rebuilt_values = post.batch(thetas)
    finally:
        likelihood.shift_margin = margin
    # the same knot values, interpolated between shifted knots (and, with field noise,
    # each node's values read off its own spline): the tables differ by the splines'
    # interpolation error only (measured <= 3.2e-4 in log L at 200 curves, docs/global-fit.md)
    assert np.isfinite(reused).all()
    np.testing.assert_allclose(reused, rebuilt_values, rtol=0, atol=2e-3)
    assert not np.array_equal(reused, rebuilt_values)      # the two paths really differ


def test_walkers_beyond_the_margin_rebuild_and_single_calls_match_the_set(campaign):
    space, likelihood, post, centre = campaign
    thetas = np.repeat(centre[None], 3, axis=0)
    i = space.names.index("width")
    # a ~ width near the pole: 2 ln rho ~ 1.2 x the margin for the walker whose width grows so
    thetas[1, i] += 0.6 * likelihood.shift_margin
    efimov, values = space.efimov(space.values(thetas)), space.values(thetas)
    _, _, served, rebuilt = likelihood._rescaled_coefficients_of_set(efimov, values)
    assert served == [0, 2] and rebuilt == [1]
    many = post.batch(thetas)
    assert np.isfinite(many).all()
    # one walker alone takes the same route as inside the set (to 1e-12: the chord algebra
    # runs batched)
    np.testing.assert_allclose(many, np.array([post(t) for t in thetas]), rtol=1e-12)
