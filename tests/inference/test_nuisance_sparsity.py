"""The Jacobian sparsity of the start-point refinement (CurvesLikelihood._solve_inner):
a scipy.sparse block-diagonal pattern, equal to the dense one it replaced, and giving
least_squares the same solution."""

import numpy as np
from scipy.optimize import least_squares
from scipy.sparse import issparse

from lossfit.inference.curves_likelihood import nuisance_sparsity


def _layout(sizes, dimers):
    """res_index, n_res, active of curves with ``sizes`` residuals each (residual rows
    interleaved between curves, as the measured temperatures and constraints are), the
    curves in ``dimers`` with a fourth active coordinate."""
    owner = np.concatenate([np.full(n, j) for j, n in enumerate(sizes)])
    owner = owner[np.random.default_rng(1).permutation(owner.size)]
    n_res = owner.size
    res_index = np.full((len(sizes), max(sizes)), n_res)
    for j, n in enumerate(sizes):
        res_index[j, :n] = np.flatnonzero(owner == j)
    active = np.ones((len(sizes), 4), dtype=bool)
    active[[j for j in range(len(sizes)) if j not in dimers], 1] = False
    return res_index, n_res, active, owner


def test_pattern_is_sparse_and_equals_the_dense_block_pattern():
    res_index, n_res, active, owner = _layout([5, 3, 7, 4], dimers={2})
    pattern = nuisance_sparsity(res_index, n_res, active)
    dense = owner[:, None] == np.nonzero(active)[0][None, :]      # the former construction
    assert issparse(pattern)
    assert pattern.shape == (n_res, int(active.sum()))
    assert pattern.nnz == int(dense.sum()) == 5 * 3 + 3 * 3 + 7 * 4 + 4 * 3
    np.testing.assert_array_equal(pattern.toarray() != 0, dense)


def test_least_squares_gives_the_same_solution_with_the_sparse_pattern():
    # independent decays y = exp(c0 - c2 t) + c3 per curve (one with a fourth coordinate,
    # + c1 t^2): a block-diagonal problem like the per-curve nuisances
    sizes = [8, 6, 9, 7, 8]
    res_index, n_res, active, owner = _layout(sizes, dimers={1})
    t = np.linspace(0.0, 1.0, n_res)
    truth = np.array([[0.5, 0.0, 1.0, 0.1], [0.2, 0.3, 2.0, 0.0], [1.0, 0.0, 0.5, -0.1],
                      [0.0, 0.0, 1.5, 0.2], [0.3, 0.0, 0.8, 0.05]])

    def model(x):
        c = x[owner]
        return np.exp(c[:, 0] - c[:, 2] * t) + c[:, 3] + c[:, 1] * t ** 2

    y = model(truth)

    def fun(z):
        x = np.zeros_like(truth)
        x[active] = z
        return model(x) - y

    z0 = truth[active] + 0.1
    kw = dict(method="trf", xtol=1e-12, ftol=1e-12, gtol=1e-12)
    sparse = least_squares(fun, z0, jac_sparsity=nuisance_sparsity(res_index, n_res, active), **kw)
    dense = least_squares(fun, z0, jac_sparsity=owner[:, None] == np.nonzero(active)[0][None, :], **kw)
    full = least_squares(fun, z0, **kw)
    np.testing.assert_allclose(sparse.x, dense.x, rtol=0, atol=1e-8)
    np.testing.assert_allclose(sparse.x, full.x, rtol=0, atol=1e-8)
    np.testing.assert_allclose(sparse.x, truth[active], rtol=0, atol=1e-8)
