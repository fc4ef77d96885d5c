"""lossfit's stretch move gives emcee's own chain bit for bit (reference library:
emcee's StretchMove, Foreman-Mackey et al. 2013, PASP 125, 306)."""

import emcee
import numpy as np
import pytest

from lossfit.errors import LossfitValueError
from lossfit.inference.moves import WalkerSetStretchMove
from lossfit.inference.sampling import sample

PRECISIONS = np.array([1.0, 4.0, 9.0])


def _log_prob(x):
    # an analytic Gaussian, with a hard edge so that some proposals are refused outright
    lp = -0.5 * np.sum(x * x * PRECISIONS, axis=-1)
    return np.where(x[..., 0] > 1.5, -np.inf, lp)


def _run(move, vectorize, walkers=12, steps=300, seed=3):
    sampler = emcee.EnsembleSampler(walkers, 3, _log_prob, vectorize=vectorize, moves=move)
    sampler.random_state = np.random.RandomState(seed).get_state()
    start = 0.3 * np.random.default_rng(1).standard_normal((walkers, 3))
    sampler.run_mcmc(start, steps, progress=False)
    return sampler


@pytest.mark.parametrize("vectorize", [True, False])
def test_chain_equals_emcees_stretch_move_bit_for_bit(vectorize):
    ref = _run(emcee.moves.StretchMove(), vectorize)
    ours = _run(WalkerSetStretchMove(vectorized=vectorize), vectorize)
    assert np.array_equal(ref.get_chain(), ours.get_chain())
    assert np.array_equal(ref.get_log_prob(), ours.get_log_prob())
    assert np.array_equal(ref.acceptance_fraction, ours.acceptance_fraction)
    # the hard edge refused proposals, and the sampler moved
    assert 0.1 < ours.acceptance_fraction.mean() < 0.9
    assert ours.get_chain()[:, :, 0].max() <= 1.5


def test_bad_vectorised_log_probability_is_named():
    calls = []

    def wrong_shape(x):
        # right for emcee's own evaluation of the start, wrong for the move's proposals
        calls.append(1)
        return np.zeros(x.shape[0] + (len(calls) > 1))

    sampler = emcee.EnsembleSampler(8, 2, wrong_shape, vectorize=True, moves=WalkerSetStretchMove(vectorized=True))
    with pytest.raises(LossfitValueError, match="log_prob"):
        sampler.run_mcmc(np.random.default_rng(0).standard_normal((8, 2)), 2, progress=False,
                         skip_initial_state_check=True)
    sampler = emcee.EnsembleSampler(3, 2, lambda x: -0.5 * np.sum(x * x, axis=-1), vectorize=True,
                                    moves=WalkerSetStretchMove(vectorized=True))
    with pytest.raises(LossfitValueError, match="walkers"):
        sampler.run_mcmc(np.zeros((3, 2)) + 0.1, 2, progress=False, skip_initial_state_check=True)


@pytest.mark.parametrize("vectorize", [True, False])
def test_lossfits_sampler_loop_gives_emcees_chain(vectorize, tmp_path):
    # lossfit's loop (lossfit.inference.sampling) against emcee's own EnsembleSampler with
    # emcee's StretchMove, seeded alike; through a checkpoint file too, whose stored random
    # state is read when it is written, not copied at every step
    ref = _run(emcee.moves.StretchMove(), vectorize)
    start = 0.3 * np.random.default_rng(1).standard_normal((12, 3))
    run = sample(_log_prob, start, 300, seed=3, vectorize=vectorize)
    assert np.array_equal(run.chain, ref.get_chain())
    assert np.array_equal(run.log_prob, ref.get_log_prob())
    part = sample(_log_prob, start, 170, seed=3, vectorize=vectorize, backend=tmp_path / "c.h5", checkpoint_every=7)
    assert np.array_equal(part.chain, ref.get_chain()[:170])
    resumed = sample(_log_prob, start, 300, seed=3, vectorize=vectorize, backend=tmp_path / "c.h5")
    assert resumed.resumed_from == 170
    assert np.array_equal(resumed.chain, ref.get_chain())
