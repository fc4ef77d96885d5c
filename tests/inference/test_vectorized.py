"""Whole walker sets per call: the vectorised log posterior and sampler."""

import warnings

import numpy as np
import pytest

import lossfit as lf
from lossfit.inference.fitting import prepare
from lossfit.inference.pools import SerialPool
from lossfit.inference.posterior import WalkerBlocks
from lossfit.inference.priors import LogNormal, LogUniform
from lossfit.inference.sampling import sample

CS = lf.species("133Cs")


def _spectra():
    # invented spectra on both sides and beta, generated with the exact model
    ef = lf.Efimov.universal(-900.0, 0.08)
    rng = np.random.default_rng(4)
    out = []
    for a, t, kind in ((-np.geomspace(3000.0, 500.0, 12), 40.0, "l3"), (np.geomspace(600.0, 3e4, 12), 80.0, "l3"),
                       (np.geomspace(600.0, 5000.0, 8), 40.0, "beta")):
        rate = lf.l3 if kind == "l3" else lf.beta
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            v = rate(a, t, species=CS, efimov=ef) * (1 + 0.1 * rng.standard_normal(a.size))
        out.append(lf.LossSpectrum(a, t, v, 0.1 * np.abs(v), kind=kind))
    return out


@pytest.fixture(scope="module", params=["zero-range", "threshold", "capped"])
def posterior(request):
    # the closed-form models (threshold law, capped) take their own many-walker path
    space, likelihood, post = prepare(_spectra(), species=CS, free=["a_minus", "eta", "density_scale"],
                                      model=request.param,
                                      tie="universal", priors={"a_minus": LogUniform(-3000.0, -450.0),
                                                               "density_scale": LogNormal(1.0, 0.2)})
    return post


def _walkers(post, n, seed):
    rng = np.random.default_rng(seed)
    centre = post.space.theta([-900.0, 0.08, 1.0])
    thetas = centre + 0.05 * rng.standard_normal((n, 3))
    thetas[0, 0] = np.log(5000.0)            # one walker outside its prior
    return thetas


def test_walker_set_equals_walker_by_walker(posterior):
    # one call for the set against one call per walker (the same bits), and against the
    # likelihood's own single-walker path with floats (to 1e-12)
    thetas = _walkers(posterior, 12, 1)
    many = posterior.batch(thetas)
    one_by_one = np.array([posterior(t) for t in thetas])
    assert np.array_equal(many, one_by_one)
    assert many[0] == -np.inf and np.isfinite(many[1:]).all()
    for theta, value in zip(thetas[1:], many[1:]):
        values = posterior.space.values(theta)
        lp = posterior.space.log_prior(theta)
        scalar = lp + posterior.likelihood.given_values(posterior.space.efimov(values), values)
        assert value == pytest.approx(scalar, rel=1e-12, abs=1e-9)


def test_vectorised_and_walker_map_sampling_give_the_same_chain(posterior):
    p0 = _walkers(posterior, 12, 2)[1:11]
    kw = dict(seed=9)
    mapped = sample(posterior, p0, 60, **kw)
    vectorised = sample(WalkerBlocks(posterior), p0, 60, vectorize=True, **kw)
    blocked = sample(WalkerBlocks(posterior, SerialPool()), p0, 60, vectorize=True, **kw)
    assert np.array_equal(mapped.chain, vectorised.chain)
    assert np.array_equal(mapped.chain, blocked.chain)
    assert np.array_equal(mapped.log_prob, blocked.log_prob)


def test_blocks_split_the_set_across_pool_workers(posterior):
    calls = []

    class CountingPool(SerialPool):
        size = 3

        def map(self, func, iterable):
            blocks = list(iterable)
            calls.append([len(b) for b in blocks])
            return [func(b) for b in blocks]

    thetas = _walkers(posterior, 8, 3)
    out = WalkerBlocks(posterior, CountingPool())(thetas)
    assert calls == [[3, 3, 2]]
    assert np.array_equal(out, posterior.batch(thetas))
    with pytest.raises(lf.LossfitValueError) as info:
        sample(WalkerBlocks(posterior), thetas, 10, vectorize=True, pool=SerialPool())
    assert info.value.argument == "pool"


@pytest.fixture(scope="module", params=["atoms", "dimers"])
def campaign_posterior(request):
    # invented campaign (lossfit.simulate): atom curves at a < 0, with a dimer curve in the
    # second case (the table-object path); every systematic that moves the tables is free
    from lossfit.inference.global_fit import prepare_curves
    from lossfit.simulate import invented_campaign

    dimers = 1 if request.param == "dimers" else 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        curves, res, truth = invented_campaign(3, n_fields=3, dimer_fields=dimers)
        free = ["a_minus", "eta_minus"] + (["a_star", "eta_star"] if dimers else [])
        space, likelihood, post = prepare_curves(curves, species=CS, free=free, resonance=res,
                                                 priors={"a_star": (300.0, 3000.0)} if dimers else None,
                                                 systematics={"density_scale": 0.2, "temperature_scale": 0.05,
                                                              "b0": 0.01})
    return post, res, truth


def test_campaign_walker_set_equals_walker_by_walker(campaign_posterior):
    # every walker's curves in one batched integration against one call per walker (to
    # 1e-12: the chord algebra runs batched), a walker outside its prior and one whose
    # resonance shift leaves its tables' support (-inf without spoiling the others)
    post, res, truth = campaign_posterior
    rng = np.random.default_rng(2)
    names = post.space.names
    near = {"density_scale": 1.0, "temperature_scale": 1.0, "b0": res.b0, **truth}
    centre = post.space.theta([near[n] for n in names])
    spread = np.array([2e-6 if n == "b0" else 0.02 for n in names])          # b0: ~1 mG
    thetas = centre + spread * rng.standard_normal((6, len(names)))
    thetas[0, names.index("a_minus")] = np.log(1e6)           # outside the a_- prior
    many = post.batch(thetas)
    one_by_one = np.array([post(t) for t in thetas])
    assert many[0] == -np.inf and np.isfinite(many[1:]).all()
    np.testing.assert_allclose(many[1:], one_by_one[1:], rtol=1e-12, atol=1e-9)
    single = np.array([post.space.log_prior(t) + post.likelihood(post.space.efimov(post.space.values(t)),
                                                                   post.space.values(t)) for t in thetas[1:]])
    np.testing.assert_allclose(many[1:], single, rtol=1e-12, atol=1e-9)
