"""Build the a > 0, J = 0 recombination table of B + B + X (a_bb = 0): shallow and deep dimers.

Two identical bosons B and a third atom X with a resonant B-X scattering length a > 0 recombine
at the three-atom energy E = hbar^2 k^2/(2 mu) (mu the B-X reduced mass; x = k a, E = x^2 E_D
with E_D = hbar^2/(2 mu a^2) the shallow dimer's binding energy) into the shallow B-X dimer or
into deep dimers. In zero-range theory the three-body parameter enters through the Efimov
channel only, so with w = exp(2 i theta - 2 eta), theta = s0 ln(kappa* a),

    K3_deep(E)    = bound(E) T_break (1 - e^{-4 eta}) / |1 + s_AD w|^2,
    K3_shallow(E) = bound(E) (A + 2 Re(B w) + C |w|^2) / |1 + s_AD w|^2,

bound(E) the J = 0 bound of docs/stm-mixture.md section 8, s_AD the Efimov-channel reflection
amplitude of the atom-dimer table at the same total energy (atom-dimer wave number
k_AD a = x_b sqrt(1 + x^2), x_b the breakup threshold), T_break = 1 - |s_AD|^2 - T_AD the
Efimov channel's flux to three atoms and A, B, C the coefficients of the J = 0 breakup
probability of atom + dimer, which detailed balance turns into recombination
(docs/heteronuclear-rates.md, "Three-body recombination at a > 0", derives both).

At each x of a grid uniform in ln x the contour solver
(:meth:`.stm_mixture.MixtureSTM.atom_dimer_contour`) gives the deep and breakup probabilities
at ``n_theta`` values of kappa* a over one period and two eta; :func:`efimov_channel_fit`
fits T_AD, s_AD, A, B, C. The same fit of the zero-energy rates
(:meth:`.stm_mixture.MixtureSTM.recombination`) divided by bound(E) x^4 gives the threshold
limits tau = lim T_break/x^4, alpha, b, c = lim (A, B, C)/x^4 and s_AD at breakup. The file
layout is what :class:`lossfit.universal.tables.MixtureRecombinationTable` reads; the shipped
files are written by ``scripts/make_mixture_recombination_tables.py``, others by
``lossfit tables BOSON OTHER --atom-dimer``.
"""

__all__ = ["build_table", "efimov_channel_fit", "threshold_limits", "recombination_grid", "ETAS", "X_MIN", "X_MAX",
           "PER_DECADE", "N_THETA"]

import json
import math
import os

import numpy as np
from scipy.interpolate import CubicSpline
from tqdm.auto import tqdm

from ..._io import atomic_path
from .mixture_atom_dimer import ABOVE, CUTOFF, GRID_PER_DECADE, breakup_wavenumber, solver_for
from .mixture_tables import git_hash, period_kappas

#: First grid point in x = k a (three-atom energy x^2 E_D); below it the runtime runs
#: linearly in x to the threshold limits.
X_MIN = 0.1
#: Last grid point: the atom-dimer tables' end (k_AD a = ABOVE x_b), E = (ABOVE^2 - 1) E_D.
X_MAX = math.sqrt(ABOVE ** 2 - 1.0)
#: Grid points per decade of x.
PER_DECADE = 16
#: kappa* values per x over one Efimov period.
N_THETA = 6
#: The two eta of the solves (two are needed to separate A from C).
ETAS = (0.1, 0.4)


def recombination_grid(x_min=X_MIN, x_max=X_MAX, per_decade=PER_DECADE):
    """x = k a (three-atom energy x^2 E_D), uniform in ln x from ``x_min`` to ``x_max``."""
    n = int(math.ceil(per_decade * math.log10(x_max / x_min))) + 1
    grid = np.exp(np.linspace(math.log(x_min), math.log(x_max), n))
    grid[0], grid[-1] = x_min, x_max
    return grid


def efimov_channel_fit(theta, eta, p_deep, p_breakup=None):
    """T_AD, s_AD (and A, B, C) of the Efimov-channel forms by linear least squares.

    With w = exp(2 i theta - 2 eta):

        (1 - e^{-4 eta})/p_deep = a0 + a1 e^{-4 eta} + e^{-2 eta}(a2 cos 2 theta + a3 sin 2 theta),
        T_AD = 1/a0, s_AD = T_AD (a2 - i a3)/2,
        p_breakup |1 + s_AD w|^2 = A + 2 Re(B w) + C |w|^2.

    Parameters
    ----------
    theta, eta : ndarray
        s0 ln(kappa* a) and eta of each solve (at least two distinct eta).
    p_deep : ndarray
        Deep-dimer probabilities (or rates over a common bound).
    p_breakup : ndarray, optional
        Breakup probabilities (or shallow rates over the same bound) at the same points.

    Returns
    -------
    dict
        ``t`` (T_AD), ``s`` (complex), ``t_break`` = 1 - |s|^2 - T_AD, ``residual`` (largest
        relative misfit of the reciprocal), and with ``p_breakup``: ``a``, ``b`` (complex),
        ``c`` and ``breakup_residual`` (largest misfit relative to the largest value).
    """
    theta, eta = np.asarray(theta, dtype=float), np.asarray(eta, dtype=float)
    lhs = -np.expm1(-4.0 * eta) / np.asarray(p_deep, dtype=float)
    xm = np.c_[np.ones_like(eta), np.exp(-4.0 * eta), np.exp(-2.0 * eta) * np.cos(2.0 * theta),
               np.exp(-2.0 * eta) * np.sin(2.0 * theta)]
    coef, *_ = np.linalg.lstsq(xm, lhs, rcond=None)
    t = 1.0 / coef[0]
    s = t * complex(coef[2], -coef[3]) / 2.0
    out = {"t": t, "s": s, "t_break": 1.0 - abs(s) ** 2 - t,
           "residual": float(np.max(np.abs(xm @ coef - lhs) / np.abs(lhs)))}
    if p_breakup is not None:
        w = np.exp(2j * theta - 2.0 * eta)
        y = np.asarray(p_breakup, dtype=float) * np.abs(1.0 + s * w) ** 2
        xb = np.c_[np.ones_like(eta), 2.0 * w.real, -2.0 * w.imag, np.abs(w) ** 2]
        cb, *_ = np.linalg.lstsq(xb, y, rcond=None)
        out.update(a=float(cb[0]), b=complex(cb[1], cb[2]), c=float(cb[3]),
                   breakup_residual=float(np.max(np.abs(xb @ cb - y)) / np.max(np.abs(y))))
    return out


def _design(s0, kappa_a_star, n_theta):
    kappas = np.tile(period_kappas(s0, kappa_a_star, n_theta), len(ETAS))
    etas = np.repeat(np.asarray(ETAS, dtype=float), n_theta)
    return kappas, etas, s0 * np.log(kappas)


def threshold_limits(solver, kappa_a_star, n_theta=N_THETA):
    """E -> 0 limits of the J = 0 quantities from zero-energy solves.

    K3_deep(0) = bound x^4 tau (1 - e^{-4 eta})/|1 + s_b w|^2 and
    K3_shallow(0) = bound x^4 (alpha + 2 Re(b w) + c |w|^2)/|1 + s_b w|^2 (bound x^4 does not
    depend on E), fitted to :meth:`.stm_mixture.MixtureSTM.recombination` (the independent
    zero-energy equation, docs/stm-mixture.md section 3).

    Returns
    -------
    dict
        tau, s_b (s_AD at breakup), alpha, b, c, residual, breakup_residual and ``bound_x4``
        (bound(E) (k a)^4 in hbar a^4/m_B).
    """
    kappas, etas, theta = _design(solver.s0, kappa_a_star, n_theta)
    rates = [solver.recombination(k, e) for k, e in zip(kappas, etas)]
    bound_x4 = solver.unitarity_bound(1.0)          # eps = (k a)^2 = 1
    fit = efimov_channel_fit(theta, etas, np.array([r["deep"] for r in rates]) / bound_x4,
                             np.array([r["shallow_bx"] for r in rates]) / bound_x4)
    return {"tau": fit["t"], "s_b": fit["s"], "alpha": fit["a"], "b": fit["b"], "c": fit["c"],
            "residual": fit["residual"], "breakup_residual": fit["breakup_residual"], "bound_x4": bound_x4}


def _one_x(solver, kappa_a_star, x, n_theta, **contour):
    """The fit at three-atom x = k a (k_AD a = x_b sqrt(1 + x^2))."""
    kappas, etas, theta = _design(solver.s0, kappa_a_star, n_theta)
    kad = breakup_wavenumber(solver.mass_ratio) * math.sqrt(1.0 + x * x)
    outs = [solver.atom_dimer_contour(kad, k, e, **contour) for k, e in zip(kappas, etas)]
    return efimov_channel_fit(theta, etas, [o["p_deep"] for o in outs], [o["p_breakup"] for o in outs])


def _columns(fits, x):
    """Stored columns: T_break/x^4, Re s, Im s, A/x^4, Re B/x^4, Im B/x^4, C/x^4."""
    x4 = np.asarray(x) ** 4
    return np.array([[f["t_break"], f["s"].real, f["s"].imag, f["a"], f["b"].real, f["b"].imag, f["c"]]
                     for f in fits]) / np.c_[x4, np.ones_like(x4), np.ones_like(x4), x4, x4, x4, x4]


def _kappa_a_plus_from_limits(limits, s0, kappa_a_star):
    """The zero of the eta -> 0 threshold shallow rate alpha + 2 Re(b e^{2 i theta}) + c: 2 theta = pi - arg b,
    placed in the period above kappa* a*."""
    ln_k = (math.pi - math.atan2(limits["b"].imag, limits["b"].real)) / (2.0 * s0)
    period = math.pi / s0
    ln_k += period * math.ceil((math.log(kappa_a_star) - ln_k) / period)
    return math.exp(ln_k)


def build_table(system, path, kappa_a_star, *, x_min=X_MIN, x_max=X_MAX, per_decade=PER_DECADE, n_theta=N_THETA,
                cutoff=CUTOFF, grid_per_decade=GRID_PER_DECADE, check_midpoints=True, progress=True):
    """Solve, fit, check and write the a > 0 recombination table of ``system`` to ``path`` (.npz).

    One process (the solves are small dense LU; two processes on two shared cores gained
    nothing measurable).

    Parameters
    ----------
    system : HeteronuclearSystem
        a_bb must be 0.
    path : str
        Output file, written atomically.
    kappa_a_star : float
        kappa* a* of the system's atom-dimer table (the phase convention shared with it).
    x_min, x_max, per_decade : float, float, int
        The grid in x = k a (three-atom energy x^2 E_D).
    n_theta : int
        kappa* values per x and eta.
    cutoff, grid_per_decade : float, int
        Lambda a and momentum nodes per decade of the solver (the atom-dimer table's).
    check_midpoints : bool
        Also solve at every interval midpoint and record the spline's error there.
    progress : bool
        Show a tqdm progress bar.

    Returns
    -------
    dict
        The table's metadata.
    """
    if system.a_bb != 0.0:
        raise ValueError("recombination tables are built for a_bb = 0")
    solver = solver_for(system.mass_ratio, cutoff, grid_per_decade)
    s0 = solver.s0
    grid = recombination_grid(x_min, x_max, per_decade)
    if grid.size < 4 or n_theta < 3:
        raise ValueError("need at least 4 grid points and 3 kappa* values")
    limits = threshold_limits(solver, kappa_a_star, n_theta)
    kappa_a_plus = solver.kappa_a_plus(kappa_a_star)
    mids = np.sqrt(grid[:-1] * grid[1:]) if check_midpoints else np.array([])
    fits = [_one_x(solver, kappa_a_star, float(x), n_theta)
            for x in tqdm(np.r_[grid, mids], disable=not progress, desc=f"{system.name} a > 0 recombination",
                          unit="x")]
    node_fits, mid_fits = fits[:grid.size], fits[grid.size:]
    cols = _columns(node_fits, grid)
    lnx = np.log(grid)
    spline_error = []
    if check_midpoints:
        mid_cols = _columns(mid_fits, mids)
        interp = np.array([CubicSpline(lnx, c)(np.log(mids)) for c in cols.T]).T
        # relative for the positive columns (T_break, A, C), absolute against the column's scale otherwise
        scale = np.maximum(np.abs(mid_cols), np.abs(cols).max(axis=0)[None, :] * np.array([0, 1, 1, 0, 1, 1, 0]))
        spline_error = (np.abs(interp - mid_cols) / scale).max(axis=0).tolist()
    # checks: A, C >= 0 and |B|^2 <= A C (Cauchy-Schwarz over the three-atom channels); the J = 0
    # bound P_shallow + P_deep <= 1 at its largest over theta (fine) and the two eta
    a_c = cols[:, [3, 6]]
    b2 = cols[:, 4] ** 2 + cols[:, 5] ** 2
    theta = np.linspace(0.0, math.pi, 721)
    largest = []
    for x, f in zip(grid, node_fits):
        w = np.exp(2j * theta[None, :] - 2.0 * np.array([[0.0], [0.01], [0.1], [1.0]]))
        den = np.abs(1.0 + f["s"] * w) ** 2
        p = (f["a"] + 2.0 * (f["b"] * w).real + f["c"] * np.abs(w) ** 2 + f["t_break"] * (1.0 - np.abs(w) ** 2)) / den
        largest.append(float(p.max()))
    meta = {
        "quantity": f"J = 0 three-body recombination B + B + X at a > 0 (a_bb = 0), {system.name}: "
                    "T_break/x^4, s_AD, A/x^4, B/x^4, C/x^4 against x = k a",
        "energy_convention": "three-atom energy E = hbar^2 k^2/(2 mu), mu the B-X reduced mass, x = k a, "
                             "E = x^2 hbar^2/(2 mu a^2); atom-dimer wave number k_AD a = x_b sqrt(1 + x^2)",
        "rates": "K3_deep = bound T_break (1 - e^-4eta)/|1 + s w|^2, K3_shallow = bound (A + 2 Re(B w) + "
                 "C |w|^2)/|1 + s w|^2, w = exp(2 i s0 ln(kappa* a) - 2 eta), kappa* = kappa_star_a_star/a*, "
                 "bound the J = 0 bound (docs/stm-mixture.md section 8), events",
        "method": "MixtureSTM.atom_dimer_contour at n_theta kappa* over one period and eta in ETAS; "
                  "efimov_channel_fit; threshold limits from MixtureSTM.recombination (zero-energy equation)",
        "cutoff": cutoff, "grid_per_decade": grid_per_decade, "etas": list(ETAS), "n_theta": n_theta,
        "x_grid": {"start": float(grid[0]), "stop": float(grid[-1]), "num": int(grid.size),
                   "per_decade": per_decade},
        "fit_residual_max": max(f["residual"] for f in node_fits),
        "breakup_fit_residual_max": max(f["breakup_residual"] for f in node_fits),
        "threshold_fit_residual": limits["residual"], "threshold_breakup_residual": limits["breakup_residual"],
        "spline_midpoint_error": dict(zip(["t_break", "re_s", "im_s", "a", "re_b", "im_b", "c"], spline_error)),
        "min_a_c": float(a_c.min()), "max_b2_over_ac": float(np.max(b2 / (cols[:, 3] * cols[:, 6]))),
        "j0_bound_largest_share": max(largest),
        "kappa_star_a_plus_from_limits": _kappa_a_plus_from_limits(limits, s0, kappa_a_star),
        "beyond_grid": "not tabulated; the runtime refuses temperatures with more than its stated weight beyond",
        "git_hash": git_hash(),
    }
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, x=grid, columns=cols, x_mid=mids, threshold_tau=limits["tau"], threshold_s=limits["s_b"],
                 threshold_alpha=limits["alpha"], threshold_b=limits["b"], threshold_c=limits["c"],
                 bound_x4=limits["bound_x4"], kappa_star_a_star=kappa_a_star, kappa_star_a_plus=kappa_a_plus,
                 s0=s0, mass_ratio=system.mass_ratio, breakup_x=breakup_wavenumber(system.mass_ratio),
                 j0_share=np.array(largest), metadata=json.dumps(meta, sort_keys=True))
    return meta
