"""The ensemble move lossfit samples with: emcee's stretch move (Goodman & Weare 2010,
Comm. Appl. Math. Comput. Sci. 5, 65; Foreman-Mackey et al. 2013, PASP 125, 306) with
the acceptance of a half-ensemble taken in one array operation.

emcee's own move loops over the walkers of each half in Python to accept or reject them
(one uniform draw, one logarithm and one comparison per walker), and converts a
vectorised log probability walker by walker: a third of emcee's bookkeeping of a step at
32 walkers (docs/architecture.md, "The sampler step of a spectrum fit"). The proposals,
the random numbers and the decisions are emcee's: the chain is the same bit for bit
(tests/inference/test_moves.py).
"""

__all__ = ["WalkerSetStretchMove"]

import emcee
import numpy as np

from ..errors import LossfitValueError


class WalkerSetStretchMove(emcee.moves.StretchMove):
    """emcee's :class:`~emcee.moves.StretchMove` that accepts a half-ensemble at once.

    Parameters
    ----------
    a : float
        The stretch scale (emcee's default 2).
    vectorized : bool
        The sampler's log probability takes the whole half-ensemble (emcee's
        ``vectorize=True``): its values then go to the acceptance as one array.
    """

    def __init__(self, a=2.0, vectorized=False):
        super().__init__(a=a)
        self.vectorized = bool(vectorized)

    def _log_probs(self, model, coords):
        if not self.vectorized:
            return model.compute_log_prob_fn(coords)
        log_prob = np.asarray(model.log_prob_fn(coords), dtype=float)
        if log_prob.shape != (coords.shape[0],):
            raise LossfitValueError("log_prob", f"a vectorised log probability must return one value per walker "
                                    f"({coords.shape[0]}), got shape {log_prob.shape}")
        if np.isnan(log_prob).any():
            raise LossfitValueError("log_prob", "returned NaN (return -inf outside the support)")
        return log_prob, None

    def stretch(self, s, others, random):
        """Proposals for the walkers ``s`` (n, ndim) from the complementary set ``others``
        and their log acceptance factors: emcee's ``get_proposal``, the same draws and the
        same arithmetic, with the chosen partners indexed once."""
        ns, ndim = s.shape
        zz = ((self.a - 1.0) * random.rand(ns) + 1) ** 2.0 / self.a
        factors = (ndim - 1.0) * np.log(zz)
        partners = others[random.randint(len(others), size=(ns,))]
        return partners - (partners - s) * zz[:, None], factors

    def propose(self, model, state):
        """One stretch step of every walker, half-ensemble by half-ensemble: (state, accepted).
        ``state`` is updated in place, as emcee's moves do."""
        walkers, ndim = state.coords.shape
        if walkers < 2 * ndim:
            raise LossfitValueError("walkers", f"the stretch move needs at least 2 x {ndim} walkers, got {walkers}")
        accepted = np.zeros(walkers, dtype=bool)
        halves = np.arange(walkers) % self.nsplits
        if self.randomize_split:
            model.random.shuffle(halves)
        for half in range(self.nsplits):
            moving = halves == half
            members = np.flatnonzero(moving)
            others = np.concatenate([state.coords[halves == j] for j in range(self.nsplits) if j != half])
            proposal, factors = self.stretch(state.coords[members], others, model.random)
            log_prob, blobs = self._log_probs(model, proposal)
            # one uniform per walker in walker order: MT19937 draws rand(n) as n calls of
            # rand(), so the decisions are emcee's loop's
            take = factors + log_prob - state.log_prob[members] > np.log(model.random.rand(members.size))
            accepted[members] = take
            if blobs is None and state.blobs is None:
                moved = members[take]
                state.coords[moved] = proposal[take]
                state.log_prob[moved] = log_prob[take]
            else:
                state = self.update(state, emcee.State(proposal, log_prob=log_prob, blobs=blobs), accepted, moving)
        return state, accepted
