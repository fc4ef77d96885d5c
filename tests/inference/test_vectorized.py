"""Whole walker sets per call: the vectorised log posterior and sampler."""

import warnings

import numpy as np
import pytest

import lossfit as lf
from lossfit.inference.fitting import prepare
from lossfit.inference.global_fit import prepare_curves
from lossfit.inference.pools import SerialPool, make_pool
from lossfit.inference.posterior import WalkerBlocks
from lossfit.inference.priors import LogNormal, LogUniform
from lossfit.inference.sampling import sample
from lossfit.simulate import invented_campaign

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
    dimers = 1 if request.param == "dimers" else 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        curves, res, truth = invented_campaign(3, n_fields=3, dimer_fields=dimers)
        free = ["a_minus", "eta_minus"] + (["a_star", "eta_star"] if dimers else [])
        space, likelihood, post = prepare_curves(curves, species=CS, free=free, resonance=res,
                                                 priors={"a_star": (300.0, 3000.0)} if dimers else None,
                                                 systematics={"density_scale": 0.2, "temperature_scale": 0.05,
                                                              "b0": 0.01, "sigma_B": (1e-4, 0.02)})
    return post, res, truth


def _campaign_walkers(post, res, truth, n, seed):
    # walkers around the invented truth; walker 0 outside the a_- prior, walker 1 with b0
    # moved by 30 mG, which moves the curves nearest the resonance beyond the prepared
    # tables' reach (they rebuild their thermal averages) but not the others
    rng = np.random.default_rng(seed)
    names = post.space.names
    near = {"density_scale": 1.0, "temperature_scale": 1.0, "b0": res.b0, "sigma_B": 3e-3, **truth}
    centre = post.space.theta([near[n] for n in names])
    spread = np.array([2e-6 if n == "b0" else 0.02 for n in names])          # b0: ~1 mG
    thetas = centre + spread * rng.standard_normal((n, len(names)))
    thetas[0, names.index("a_minus")] = np.log(1e6)
    thetas[1] = post.space.theta([res.b0 + 0.03 if k == "b0" else near[k] for k in names])
    return thetas


def test_campaign_walker_set_equals_walker_by_walker(campaign_posterior):
    # every walker's curves in one batched integration against one call per walker: the
    # same bits (every sum runs in an order that does not depend on the set), for a
    # walker outside its prior (-inf without spoiling the others) and one whose
    # resonance shift makes it rebuild its tables; and against the likelihood's own
    # single-walker path with floats
    post, res, truth = campaign_posterior
    thetas = _campaign_walkers(post, res, truth, 6, 2)
    many = post.batch(thetas)
    one_by_one = np.array([post(t) for t in thetas])
    assert many[0] == -np.inf and np.isfinite(many[1:]).all()
    assert np.array_equal(many, one_by_one)
    single = np.array([post.space.log_prior(t) + post.likelihood(post.space.efimov(post.space.values(t)),
                                                                   post.space.values(t)) for t in thetas[1:]])
    assert np.array_equal(many[1:], single)


def _mixed_campaign(systematics, by_length=0):
    # invented campaign (lossfit.simulate): atom curves at a < 0, atom curves at a > 0 with
    # the explicit trapped-dimer kinetics, atom-dimer mixture curves; the first
    # ``by_length`` curves given by their scattering length instead of their field
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        curves, res, truth = invented_campaign(3, n_fields=2, dimer_fields=1, positive_fields=1)
        curves = [lf.DecayCurve(t=c.t, atoms=c.atoms, atoms_err=c.atoms_err, temperature=c.temperature,
                                temperature_err=c.temperature_err, a=c.scattering_length(res), trap_hz=c.trap_hz,
                                kind=c.kind, partner_atoms=c.partner_atoms, partner_atoms_err=c.partner_atoms_err,
                                trap_depth=c.trap_depth)
                  if j < by_length else c for j, c in enumerate(curves)]
        space, likelihood, post = prepare_curves(
            curves, species=CS, free=["a_minus", "eta_minus", "a_star", "eta_star", "a_plus", "eta_plus"],
            resonance=res, priors={"a_star": (300.0, 3000.0), "a_plus": (100.0, 1000.0)}, systematics=systematics)
    return post, res, truth


@pytest.fixture(scope="module")
def mixed_campaign():
    # b0 and the field noise free (every curve rebuilds its averages: the explicit
    # kinetics do not rescale)
    return _mixed_campaign({"density_scale": 0.2, "b0": 0.01, "sigma_B": (1e-4, 0.02)})


def test_curve_groups_side_by_side_give_the_campaign_bits(campaign_posterior):
    # two-level parallelism: the chi2 of the curve groups, side by side, are the whole
    # campaign's bit for bit, also where a resonance shift sends some curves of a walker
    # (not all) beyond the prepared tables (the campaign decides, not the group)
    _check_curve_groups(*campaign_posterior)


def test_curve_groups_of_a_mixed_campaign_give_its_bits(mixed_campaign):
    _check_curve_groups(*mixed_campaign)


@pytest.fixture(scope="module")
def campaign_partly_by_length():
    # the mixed campaign with its first curves given by their scattering length, the others
    # by field, b0 free and no field noise: groups without a curve given by field still
    # take the campaign's way (rates rebuilt at the moved lengths, not the prepared ones)
    post, res, truth = _mixed_campaign({"density_scale": 0.2, "b0": 0.01}, by_length=3)
    assert not post.likelihood.by_field[:3].any() and post.likelihood.by_field[3:].all()
    return post, res, truth


def test_curve_groups_of_a_campaign_partly_by_scattering_length_give_its_bits(campaign_partly_by_length):
    _check_curve_groups(*campaign_partly_by_length)


def _check_curve_groups(post, res, truth):
    likelihood = post.likelihood
    thetas = _campaign_walkers(post, res, truth, 17, 0)[1:]
    values = post.space.values(thetas)
    efimov = post.space.efimov(values)
    whole = likelihood.curve_chi2(efimov, values)
    assert whole.shape == (16, likelihood.n_curves) and np.isfinite(whole).all()
    for groups in (2, 3, likelihood.n_curves):
        parts = likelihood.split(groups)
        assert [p.n_curves for p in parts] == [len(x) for x in np.array_split(np.arange(likelihood.n_curves),
                                                                              groups)]
        side = np.concatenate([p.curve_chi2(efimov, values) for p in parts], axis=1)
        assert np.array_equal(side, whole)
    # one walker and one curve per task (the most workers two-level parallelism can use)
    for w, theta in enumerate(thetas):
        one = post.space.values(theta[None, :])
        side = np.concatenate([p.curve_chi2(post.space.efimov(one), one) for p in parts], axis=1)
        assert np.array_equal(side[0], whole[w])
    assert np.array_equal(likelihood.log_likelihood_of(whole), likelihood(efimov, values))
    for bad in (0, likelihood.n_curves + 1, 1.5):
        with pytest.raises(lf.LossfitValueError) as info:
            likelihood.split(bad)
        assert info.value.argument == "groups"


class _SizedPool(SerialPool):
    """A serial pool that reports ``size`` workers and records the tasks of every map."""

    def __init__(self, size):
        self.size = size
        self.maps = []

    def map(self, func, iterable):
        items = list(iterable)
        self.maps.append(items)
        return [func(x) for x in items]


def test_more_workers_than_walkers_split_the_curves_and_keep_the_chain(campaign_posterior):
    # emcee hands out half the ensemble (ndim walkers): 2 ndim + 1 workers take 2 curve
    # groups of every walker; the chain is the one-process chain, bit for bit
    post, res, truth = campaign_posterior
    ndim = post.space.ndim
    p0 = _campaign_walkers(post, res, truth, 2 * ndim + 2, 5)[2:]
    pool = _SizedPool(2 * ndim + 1)
    blocks = WalkerBlocks(post, pool)
    assert blocks.curve_groups(ndim) == 2 and blocks.curve_groups(2 * ndim) == 1 and blocks.curve_groups(0) == 1
    assert blocks.curve_groups(1) == min(2 * ndim + 1, post.likelihood.n_curves)
    # 48 workers, 32 walkers per set: 3 groups give each worker 2 tasks of a third of the
    # curves (2 groups: 2 tasks of a half; no split: one whole walker)
    assert WalkerBlocks(post, _SizedPool(48)).curve_groups(32) == 3
    assert WalkerBlocks(post, _SizedPool(64)).curve_groups(32) == 2
    alone = sample(WalkerBlocks(post), p0, 20, vectorize=True, seed=3)
    split = sample(blocks, p0, 20, vectorize=True, seed=3)
    assert np.array_equal(alone.chain, split.chain)
    assert np.array_equal(alone.log_prob, split.log_prob)
    assert 0.1 < split.acceptance.mean() < 0.9
    # the first call (every walker) went out in walker blocks, the half-ensembles as
    # (group, walker rows) tasks: every walker in both groups
    assert len(pool.maps[0]) == 2 * ndim
    assert all(len(m) == 2 * ndim and [g for g, _ in m] == [0, 1] * ndim for m in pool.maps[1:])


def test_curve_groups_cross_a_process_boundary(campaign_posterior):
    # the groups travel pickled (thermal plans rebuilt where they arrive): one walker on
    # two worker processes, two curve groups, the same bits
    post, res, truth = campaign_posterior
    thetas = _campaign_walkers(post, res, truth, 4, 6)[2:3]
    pool = make_pool("processes", 2)
    try:
        out = WalkerBlocks(post, pool)(thetas)
    finally:
        pool.close()
        pool.join()
    assert np.array_equal(out, post.batch(thetas))
