"""Build the a > 0 atom-dimer table s_AD(k a), T_AD(k a) of B + (BX) (a_bb = 0, J = 0).

Two identical bosons B and a third atom X with a resonant B-X scattering length a > 0: a
boson B collides with the shallow B-X dimer (binding energy hbar^2/(2 mu a^2), mu the B-X
reduced mass) at the relative energy

    E = hbar^2 k^2/(2 mu_AD),   mu_AD = m_B (m_B + m_X)/(2 m_B + m_X),   x = k a,

and relaxes into deep dimers. Between the atom-dimer threshold and the breakup threshold
x_b = 1/cos(phi) = (m_B + m_X)/sqrt(m_X (2 m_B + m_X)) (E = hbar^2/(2 mu a^2)) only the
atom-dimer channel is open at large distances, so, in zero-range theory, the probability of
relaxation in the s-wave is

    P(x) = T_AD (1 - e^{-4 eta}) / |1 + s_AD(x) e^{2 i theta - 2 eta}|^2,
    theta = s0 ln(kappa* a),

with T_AD = 1 - |s_AD|^2 below breakup and T_AD < 1 - |s_AD|^2 above it (the Efimov
channel's flux can also leave as three atoms): two universal functions per mass ratio
(docs/heteronuclear-rates.md, "Atom-dimer relaxation at a > 0", derives the form). The
rate coefficient, counting dimers lost (dn_D/dt = -beta n_B n_D), is
beta(E) = pi hbar P/(mu_AD k).

The grid has two segments uniform in ln x that meet at x_b: from :data:`X_MIN` to x_b,
where the B-B-X solver works on the real axis
(:meth:`.stm_mixture.MixtureSTM.atom_dimer_amplitude`: real energy, one pole subtracted),
and from x_b to :data:`ABOVE` x_b on a deformed contour
(:meth:`.stm_mixture.MixtureSTM.atom_dimer_contour`). At each x the solver gives P at
``n_theta`` values of kappa* a over one Efimov period at eta = :data:`ETA`;
:func:`.mixture_tables.channel_fit` fits the form (T_AD and s_AD free). The threshold limit
(T_AD -> c1 x, arg s_AD -> delta0) comes from the same fit of the zero-energy relaxation
rates (:meth:`.stm_mixture.MixtureSTM.relaxation_beta`), and kappa* a* from
:meth:`.stm_mixture.MixtureSTM.kappa_a_star` (the pole of a_AD). The builder also measures
the table's errors: the fit residual, the unitarity identity (all inelastic flux is deep
below breakup), a cutoff and a quadrature change at every ``check_every``-th node, and the
cubic-spline interpolation against direct solves at every interval midpoint.

Beyond ABOVE x_b nothing is computed (docs/heteronuclear-rates.md says what the runtime does
there). The shipped tables are written by ``scripts/make_mixture_atom_dimer_tables.py``;
the file layout is what :class:`lossfit.universal.tables.MixtureAtomDimerTable` reads.
"""

__all__ = ["build_table", "breakup_wavenumber", "atom_dimer_grid", "solver_for", "X_MIN", "ABOVE", "PER_DECADE",
           "N_THETA", "ETA", "CUTOFF", "GRID_PER_DECADE"]

import functools
import json
import math
import os
from concurrent.futures import ProcessPoolExecutor

import numpy as np
from scipy.interpolate import CubicSpline
from tqdm.auto import tqdm

from ..._io import atomic_path
from . import stm_mixture
from .mixture_tables import blended_transmission, channel_fit, git_hash, period_kappas

#: First grid point in x = k a (the runtime runs linearly to the threshold limits below it).
X_MIN = 1e-3
#: Last grid point over the breakup threshold: x_max = ABOVE x_b (E up to ABOVE^2 times the
#: dimer binding energy above the atom-dimer threshold).
ABOVE = 4.0
#: Grid points per decade of x.
PER_DECADE = 32
#: kappa* values per x, spread evenly over one Efimov period.
N_THETA = 6
#: eta of the solves (the form carries every other eta).
ETA = 0.1
#: Lambda a of the solver.
CUTOFF = 1e6
#: Momentum-grid nodes per decade of the solver: 24 leaves a 1.2e-7 misfit of the
#: Efimov-channel form for Cs-Cs-6Li (s0 = 1.98 oscillates twice as fast in ln q as the
#: equal-mass amplitudes), 48 brings it to 4e-13 (measured, docs/heteronuclear-rates.md).
GRID_PER_DECADE = 48
QMIN = 1e-4


def breakup_wavenumber(mass_ratio):
    """x_b = k a at the breakup threshold: 1/cos(phi) = 1/sqrt(1 - gamma^2), gamma = m_B/(m_B + m_X).

    Parameters
    ----------
    mass_ratio : float
        m_B/m_X.

    Returns
    -------
    float
        (m_B + m_X)/sqrt(m_X (2 m_B + m_X)); 2/sqrt(3) at equal masses.
    """
    g = stm_mixture.mass_parameter(mass_ratio)
    return 1.0 / math.sqrt(1.0 - g * g)


def atom_dimer_grid(mass_ratio, x_min=X_MIN, per_decade=PER_DECADE, above=ABOVE):
    """x = k a in two segments uniform in ln x: ``x_min`` to the breakup threshold x_b and
    x_b to ``above`` x_b (x_b once, shared).

    Returns
    -------
    grid : ndarray
    junction : int
        Index of x_b in ``grid``.
    """
    x_b = breakup_wavenumber(mass_ratio)
    segments = []
    for lo, hi in ((x_min, x_b), (x_b, above * x_b)):
        n = int(math.ceil(per_decade * math.log10(hi / lo))) + 1
        part = np.exp(np.linspace(math.log(lo), math.log(hi), n))
        part[0], part[-1] = lo, hi
        segments.append(part)
    return np.concatenate([segments[0], segments[1][1:]]), segments[0].size - 1


@functools.lru_cache(maxsize=None)
def solver_for(mass_ratio, cutoff=CUTOFF, per_decade=GRID_PER_DECADE):
    """The B-B-X solver the table is built with (a_bb = 0; Lambda a = ``cutoff``); one per
    process and setting (its constructor finds s0 by root search, ~0.1 s)."""
    return stm_mixture.MixtureSTM(mass_ratio, cutoff=cutoff, qmin=QMIN, per_decade=per_decade)


def _one_x(args):
    """Fit of the form at one x: (T_fit, s_AD, fit residual, unitarity check). The check is
    max |p_total - p_deep| below breakup (relaxation is the only inelastic channel there)
    and min(p_total - p_deep) above it (the breakup probability, >= 0)."""
    ratio, kappa_a_star, x, n_theta, cutoff, per_decade = args
    solver = solver_for(ratio, cutoff, per_decade)
    above = x > breakup_wavenumber(ratio)
    kappas = period_kappas(solver.s0, kappa_a_star, n_theta)
    p, check = [], math.inf if above else 0.0
    for k in kappas:
        out = solver.atom_dimer_contour(x, k, ETA) if above else solver.atom_dimer_amplitude(x, k, ETA)
        p.append(out["p_deep"])
        breakup = out["p_total"] - out["p_deep"]
        check = min(check, breakup) if above else max(check, abs(breakup))
    fit = channel_fit(solver.s0 * np.log(kappas), np.asarray(p), ETA)
    return fit["T"], fit["s11"], fit["residual"], check


def _kappa_a_star(solver):
    """(kappa* a*, how it was found). On the branch of a_- where the trimer tracking reaches
    the atom-dimer threshold (:meth:`.stm_mixture.MixtureSTM.kappa_a_star`); for mass ratios
    where it loses the state next to the threshold (measured: 87Rb-87Rb-7Li), the pole of
    a_AD in the period above kappa* a = 0.1, whose branch is then not identified: beta as a
    function of a and a* does not depend on the choice (its peaks sit at a* lambda^n either
    way), only the relation of a* to a_- does."""
    try:
        return solver.kappa_a_star(), "on the branch of a_- (trimer tracking)"
    except RuntimeError:
        lam = solver.scaling_factor
        low = 0.1

        def inverse(ln_kappa):
            return 1.0 / solver.atom_dimer_length(math.exp(ln_kappa)).real

        # the root of 1/Re a_AD within one period [low, lambda low] (rel spans it)
        value = solver._bracketed_root(inverse, low * math.sqrt(lam), (lam - 1.0) / (lam + 1.0) * 0.999, npts=17)
        return value, "pole of a_AD in the period above kappa* a = 0.1 (branch not identified)"


def _threshold(ratio, kappa_a_star, n_theta, cutoff, per_decade):
    """(c1, s_AD(0), residual): beta m_B/(hbar a) = pi (1 + gamma) c1 (1 - e^-4eta)/|1 + s e^{2i theta - 2eta}|^2."""
    solver = solver_for(ratio, cutoff, per_decade)
    kappas = period_kappas(solver.s0, kappa_a_star, n_theta)
    beta = np.array([solver.relaxation_beta(k, ETA) for k in kappas])
    # beta = pi hbar P/(mu_AD k) with T_AD -> c1 k a and m_B/mu_AD = 1 + gamma
    fit = channel_fit(solver.s0 * np.log(kappas), beta / (math.pi * (1.0 + solver.gamma)), ETA)
    return fit["T"], fit["s11"], fit["residual"]


def _map(pool, tasks, progress, desc):
    return list(tqdm(pool.map(_one_x, tasks), total=len(tasks), disable=not progress, desc=desc, unit="x"))


def _transmission(t_fit, s_ad, below):
    """T_AD: blended with 1 - |s_AD|^2 below breakup, where they are equal; the fitted T_AD
    above (smaller than 1 - |s_AD|^2 there)."""
    return np.where(below, blended_transmission(t_fit, s_ad), np.clip(t_fit, 0.0, 1.0))


def build_table(system, path, *, x_min=X_MIN, above=ABOVE, per_decade=PER_DECADE, n_theta=N_THETA, cutoff=CUTOFF,
                grid_per_decade=GRID_PER_DECADE, check_every=4, processes=2, progress=True):
    """Solve, fit, check and write the a > 0 atom-dimer table of ``system`` to ``path`` (.npz).

    Parameters
    ----------
    system : HeteronuclearSystem
        a_bb must be 0.
    path : str
        Output file, written atomically.
    x_min : float
        First grid point in x = k a.
    above : float
        The grid ends at ``above`` times the breakup threshold x_b.
    per_decade : int
        Grid points per decade of x in each segment (at least 4 points in all).
    n_theta : int
        kappa* values per x (at least 3).
    cutoff : float
        Lambda a of the solver.
    grid_per_decade : int
        Momentum-grid nodes per decade of the solver.
    check_every : int
        The cutoff (x 10) and quadrature (x 4/3 nodes per decade) changes are measured at
        every ``check_every``-th node and the last.
    processes : int
        Worker processes.
    progress : bool
        Show tqdm progress bars.

    Returns
    -------
    dict
        The table's metadata (grid, errors, residuals).
    """
    if system.a_bb != 0.0:
        raise ValueError("atom-dimer tables are built for a_bb = 0")
    ratio = system.mass_ratio
    grid, junction = atom_dimer_grid(ratio, x_min, per_decade, above)
    if junction < 3 or grid.size - junction < 4 or n_theta < 3:
        raise ValueError("need at least 4 x values per segment and 3 kappa* values")
    x_b = grid[junction]
    solver = solver_for(ratio, cutoff, grid_per_decade)
    gamma, s0 = solver.gamma, solver.s0
    kappa_a_star, how = _kappa_a_star(solver)
    c1, s_thr, thr_residual = _threshold(ratio, kappa_a_star, n_theta, cutoff, grid_per_decade)
    mids = np.sqrt(grid[:-1] * grid[1:])
    checked = np.unique(np.r_[np.arange(0, grid.size, check_every), junction, grid.size - 1])
    base = (ratio, kappa_a_star)
    with ProcessPoolExecutor(max_workers=processes) as pool:
        rows = _map(pool, [base + (float(x), n_theta, cutoff, grid_per_decade) for x in grid], progress,
                    f"{system.name} atom-dimer")
        mid_rows = _map(pool, [base + (float(x), n_theta, cutoff, grid_per_decade) for x in mids], progress,
                        "midpoints")
        cut_rows = _map(pool, [base + (float(grid[i]), n_theta, 10.0 * cutoff, grid_per_decade)
                               for i in checked], progress, "cutoff x 10")
        quad_rows = _map(pool, [base + (float(grid[i]), n_theta, cutoff, grid_per_decade * 4 // 3)
                                for i in checked], progress, "finer grid")
    c1_cut = _threshold(ratio, kappa_a_star, n_theta, 10.0 * cutoff, grid_per_decade)[0]
    # the two routes below breakup: the contour against the real axis at three nodes
    route = max(abs(solver.atom_dimer_contour(grid[i], 1.7 * kappa_a_star, 0.2)["p_deep"]
                    / solver.atom_dimer_amplitude(grid[i], 1.7 * kappa_a_star, 0.2)["p_deep"] - 1.0)
                for i in (junction // 3, 2 * junction // 3, junction))
    below = grid <= x_b
    t_fit = np.array([r[0] for r in rows])
    s_ad = np.array([r[1] for r in rows])
    residual = np.array([r[2] for r in rows])
    check = np.array([r[3] for r in rows])
    transmission = _transmission(t_fit, s_ad, below)
    phase = np.unwrap(np.angle(s_ad))
    delta0 = float(np.angle(s_thr))
    delta0 += 2.0 * math.pi * round((phase[0] - delta0) / (2.0 * math.pi))      # onto the grid's branch
    # the eta -> 0 threshold relaxation peaks where delta0 + 2 theta = pi (mod 2 pi): a check
    # of the fitted phase against kappa* a* from the pole of a_AD
    ln_peak = (math.pi - delta0) / (2.0 * s0)
    period = math.pi / s0
    ln_peak += period * round((math.log(kappa_a_star) - ln_peak) / period)

    def values(other, x):
        t_o = np.array([r[0] for r in other])
        s_o = np.array([r[1] for r in other])
        return _transmission(t_o, s_o, x <= x_b), s_o

    def errors(other, index):
        t_o, s_o = values(other, grid[index])
        return np.abs(t_o / transmission[index] - 1.0), np.abs(s_o - s_ad[index])

    err_cut_t, err_cut_s = errors(cut_rows, checked)
    err_quad_t, err_quad_s = errors(quad_rows, checked)
    # the runtime's interpolant (tables.MixtureAtomDimerTable): per segment, not-a-knot cubic
    # splines of ln T, Re s and Im s in ln x (tables.spline_coefficients gives scipy's
    # CubicSpline coefficients, tested)
    t_mid, s_mid = values(mid_rows, mids)
    spline_t, spline_s = np.empty(mids.size), np.empty(mids.size, dtype=complex)
    segments = ((slice(0, junction + 1), slice(0, junction)), (slice(junction, None), slice(junction, None)))
    for nodes, between in segments:
        lnx, lnm = np.log(grid[nodes]), np.log(mids[between])
        spline_t[between] = np.exp(CubicSpline(lnx, np.log(transmission[nodes]))(lnm))
        spline_s[between] = (CubicSpline(lnx, s_ad[nodes].real)(lnm) + 1j * CubicSpline(lnx, s_ad[nodes].imag)(lnm))
    mid_t = np.abs(spline_t / t_mid - 1.0)
    mid_s = np.abs(spline_s - s_mid)
    meta = {
        "quantity": f"s_AD(k a) and T_AD(k a) of B + (BX) -> deep dimers, a > 0, J = 0, a_bb = 0, {system.name}",
        "energy_convention": "E = hbar^2 k^2/(2 mu_AD) relative atom-dimer energy above the dimer threshold, "
                             "mu_AD = m_B (m_B + m_X)/(2 m_B + m_X); x = k a; breakup at x_b = 1/sqrt(1 - gamma^2), "
                             "gamma = m_B/(m_B + m_X) (E = hbar^2/(2 mu a^2), mu the B-X reduced mass)",
        "beta_formula": "beta (dimers lost, dn_D/dt = -beta n_B n_D) = pi hbar P/(mu_AD k), "
                        "P = T_AD (1 - exp(-4 eta))/|1 + s_AD exp(2 i theta - 2 eta)|^2, theta = s0 ln(kappa* a), "
                        "kappa* = kappa_star_a_star/a_*; T_AD = 1 - |s_AD|^2 below breakup, smaller above",
        "threshold": "T_AD -> threshold_c1 x, arg s_AD -> threshold_phase; beta(E -> 0) = pi (1 + gamma) c1 "
                     "(1 - exp(-4 eta))/|...|^2 hbar a/m_B = C_beta sinh(2 eta)/(sin^2 + sinh^2 eta) hbar a/m_B",
        "method": "B-B-X STM equations at real energy below breakup (MixtureSTM.atom_dimer_amplitude) and on a "
                  "deformed contour above (MixtureSTM.atom_dimer_contour), docs/stm-mixture.md section 3; "
                  "Efimov-channel fit over one period of kappa* (channel_fit); below breakup T blended from the "
                  "fitted T and 1 - |s_AD|^2 (blended_transmission), above the fitted T_AD",
        "cutoff": cutoff, "qmin": QMIN, "grid_per_decade": grid_per_decade, "eta_used": ETA, "n_theta": n_theta,
        "x_grid": {"kind": "two logspace segments meeting at the breakup threshold", "start": float(grid[0]),
                   "breakup": float(x_b), "stop": float(grid[-1]), "num": int(grid.size),
                   "junction_index": int(junction), "per_decade": per_decade},
        "channel_fit_residual_max": float(residual.max()),
        "threshold_fit_residual": float(thr_residual),
        "unitarity_identity_max": float(check[below].max()),
        "breakup_probability_min": float(check[~below].min()),
        "t_fit_vs_one_minus_abs_s2_max": float(np.max(np.abs(t_fit[below] - (1.0 - np.abs(s_ad[below]) ** 2)))),
        "contour_vs_real_axis_max": float(route),
        "cutoff_x10_error": {"t_rel_max": float(err_cut_t.max()), "s_abs_max": float(err_cut_s.max()),
                             "c1_rel": abs(c1_cut / c1 - 1.0)},
        "finer_grid_error": {"t_rel_max": float(err_quad_t.max()), "s_abs_max": float(err_quad_s.max())},
        "spline_midpoint_error": {"t_rel_max": float(mid_t.max()), "s_abs_max": float(mid_s.max())},
        "kappa_star_a_star_from_threshold_phase": math.exp(ln_peak),
        "kappa_star_a_star_found": how,
        "beyond_grid": "not tabulated; the runtime refuses temperatures whose Boltzmann weight beyond the last "
                       "grid point exceeds its stated fraction and holds s_AD, T_AD at their last values there",
        "git_hash": git_hash(),
    }
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, x=grid, junction_index=junction, log_transmission=np.log(transmission), transmission_fit=t_fit,
                 phase=phase, s_ad=s_ad, fit_residual=residual, unitarity_check=check,
                 threshold_c1=c1, threshold_phase=delta0, threshold_s_ad=s_thr, kappa_star_a_star=kappa_a_star,
                 c_beta=0.5 * math.pi * (1.0 + gamma) * c1, s0=s0, mass_ratio=ratio,
                 breakup_x=breakup_wavenumber(ratio), x_checked=grid[checked],
                 cutoff_error_t=err_cut_t, cutoff_error_s=err_cut_s, grid_error_t=err_quad_t,
                 grid_error_s=err_quad_s, x_mid=mids, spline_error_t=mid_t, spline_error_s=mid_s,
                 metadata=json.dumps(meta, sort_keys=True))
    return meta
