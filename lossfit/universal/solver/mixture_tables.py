"""Build the a < 0 table s11(x) of two identical bosons and a third atom (J = 0), for a_bb = 0
or at fixed ratios r = a_bb/a >= 0 (:func:`build_ratio_table`).

For each x = k|a| (E = hbar^2 k^2/(2 mu)) of a grid uniform in ln x, the B-B-X
momentum-space solver (:mod:`.stm_mixture`, docs/stm-mixture.md section 8) gives the
deep-dimer rate over the unitarity bound, P = K3/bound, at ``n_theta`` values of kappa*|a|
spread over one Efimov period; the Efimov-channel form

    P = T (1 - e^{-4 eta}) / |1 + s11 exp(2 i theta - 2 eta)|^2,   theta = s0 ln(kappa*|a|),

exact in zero-range theory, is fitted to them (:func:`channel_fit`), and the same fit of the
zero-energy rates gives the threshold law T -> c4 x^4, arg s11 -> delta0. The file has the
layout :class:`lossfit.universal.tables.S11Table` reads. Method, checks and measured
errors: docs/heteronuclear-rates.md.

The shipped tables are written by ``scripts/make_mixture_tables.py``; tables of other
pairs by ``lossfit tables BOSON OTHER`` into :func:`lossfit.universal.tables.cache_directory`.
"""

__all__ = ["build_table", "build_ratio_table", "solve_slice", "solve_x", "channel_fit", "blended_transmission",
           "period_kappas", "git_hash", "X_GRID", "N_THETA"]

import json
import math
import os
import subprocess
from concurrent.futures import ProcessPoolExecutor

import numpy as np
from tqdm.auto import tqdm

from ..._io import atomic_path
from . import stm_mixture

#: x = k|a| of the shipped tables: 0.01..10, 8 per decade.
X_GRID = np.exp(np.linspace(math.log(0.01), math.log(10.0), 25))
#: kappa* values per x, spread evenly over one Efimov period.
N_THETA = 5
ETA = 0.1
CUTOFF = 1e5
QMIN = 1e-4


def channel_fit(theta, p, eta):
    """T, s11 (complex) and the relative residual of the Efimov-channel form.

    Parameters
    ----------
    theta : ndarray
        s0 ln(kappa*|a|) of each solve, over one period.
    p : ndarray
        K3/bound at each theta.
    eta : float
        The eta of the solves.

    Returns
    -------
    dict
        ``T``, ``s11`` and ``residual`` (largest misfit of the reciprocal, relative).
    """
    y = (1.0 - math.exp(-4.0 * eta)) / np.asarray(p)
    a = np.c_[np.ones_like(theta), np.cos(2.0 * theta), np.sin(2.0 * theta)]
    c, *_ = np.linalg.lstsq(a, y, rcond=None)
    # T (1 - e^-4eta)/P = 1 + |s|^2 e^{-4 eta} + 2 |s| e^{-2 eta} cos(2 theta + arg s)
    r = math.hypot(c[1], c[2]) / c[0]                 # 2 z/(1 + z^2), z = |s11| e^{-2 eta}
    z = (1.0 - math.sqrt(max(1.0 - r * r, 0.0))) / r
    phase = math.atan2(-c[2], c[1])
    return {"T": (1.0 + z * z) / c[0], "s11": z * math.exp(2.0 * eta) * complex(math.cos(phase), math.sin(phase)),
            "residual": float(np.max(np.abs(a @ c - y)) / np.max(np.abs(y)))}


def blended_transmission(t_fit, s11):
    """1 - |s11|^2 from the two fitted quantities, weighted by 1 - T.

    T = 1 - |s11|^2 is exact, but each fitted value carries the extrapolation error: a
    common relative error of the rates at one x goes into T alone (|s11| comes from a
    ratio), so where T -> 1 (|s11| small) 1 - |s11|^2 is the better value; where T -> 0
    (threshold) 1 - |s11|^2 loses every digit (its absolute error, ~1e-5, exceeds T there)
    and the fitted T is the one to keep.  The weight 1 - T of the fitted T makes the other
    term T (1 - |s11|^2), negligible at threshold.
    """
    t_fit = np.clip(t_fit, 0.0, 1.0)
    return (1.0 - t_fit) * t_fit + t_fit * (1.0 - np.abs(s11) ** 2)


def git_hash():
    """The commit of the code that builds a table (``git rev-parse HEAD``; empty outside a
    git checkout)."""
    return subprocess.run(["git", "rev-parse", "HEAD"], capture_output=True, text=True,
                          cwd=os.path.dirname(os.path.abspath(__file__))).stdout.strip()


def period_kappas(s0, kappa_a, n_theta):
    """``n_theta`` values of kappa* |a| spread evenly over one Efimov period from |kappa_a|:
    |kappa_a| exp(j pi/(n_theta s0)), j = 0 .. n_theta - 1 (theta = s0 ln(kappa*|a|) steps by
    pi/n_theta)."""
    return abs(kappa_a) * np.exp(np.arange(n_theta) * math.pi / (n_theta * s0))


def solve_x(ratio, a_bb_ratio, kappa_a_minus, x, n_theta=N_THETA, cutoff=CUTOFF):
    """One row of a table: the Efimov-channel fit at x = k|a| (:func:`channel_fit`).

    Parameters
    ----------
    ratio, a_bb_ratio : float
        m_B/m_X and r = a_bb/a (>= 0).
    kappa_a_minus : float
        kappa* a_- at this r (the kappa* of the solves start there and span one period).
    x : float
        k|a|, E = hbar^2 k^2/(2 mu).
    n_theta : int
        kappa* values over the period.
    cutoff : float
        Lambda |a|.

    Returns
    -------
    tuple
        (x, the fit's dict: T, s11, residual; the largest relative extrapolation error).
    """
    solver = stm_mixture.MixtureSTM(ratio, a_bb_ratio=a_bb_ratio, cutoff=cutoff, qmin=QMIN)
    kappas = period_kappas(solver.s0, kappa_a_minus, n_theta)
    out = solver.recombination_energy(kappas, ETA, x * x)       # one LU per offset for all kappa*
    fit = channel_fit(solver.s0 * np.log(kappas), out["k3"] / out["bound"], ETA)
    return x, fit, float(np.max(out["error"] / out["k3"]))


def solve_slice(ratio, a_bb_ratio=0.0, *, x_grid=X_GRID, n_theta=N_THETA, cutoff=CUTOFF, processes=2,
                progress=True, label=""):
    """Solve and fit the a < 0 Efimov-channel form at one a_bb/a on ``x_grid``.

    Parameters
    ----------
    ratio : float
        m_B/m_X.
    a_bb_ratio : float
        r = a_bb/a, held fixed (>= 0: a_bb of the sign of a, no shallow B-B dimer); with
        r != 0 kappa* is defined at 1/a = 1/a_bb = 0 and s0 is that of three resonant pairs
        (docs/stm-mixture.md section 1).
    x_grid : ndarray
        x = k|a|, uniform in ln x, at least 4 values.
    n_theta : int
        kappa* values per x (at least 3).
    cutoff : float
        Lambda |a| of the solver.
    processes : int
        Worker processes (one x per task); 1 solves in this process.
    progress : bool
        Show a tqdm progress bar.
    label : str
        Name in the progress bar.

    Returns
    -------
    dict
        x, T (blended, :func:`blended_transmission`), transmission_fit, s11, phase (unwrapped
        arg s11), threshold_c4, threshold_phase (delta0 on the table's branch),
        kappa_star_a_minus, s0, fit_residual, extrapolation_error (relative, per x),
        threshold_fit_residual, threshold_abs_s11.
    """
    x_grid = np.asarray(x_grid, dtype=float)
    if x_grid.size < 4 or n_theta < 3:
        raise ValueError("need at least 4 x values and 3 kappa* values")
    solver = stm_mixture.MixtureSTM(ratio, a_bb_ratio=a_bb_ratio, cutoff=cutoff, qmin=QMIN)
    kappa_a_minus = solver.kappa_a_minus()
    kappas = period_kappas(solver.s0, kappa_a_minus, n_theta)
    # threshold: K3(0)/bound(eps = 1) = c4 (1 - e^-4eta)/|1 + e^{i delta0} e^{2 i theta - 2 eta}|^2
    prefactor = solver.unitarity_bound(1.0)
    k3 = [solver.recombination(k, ETA, negative_a=True)["deep"] for k in kappas]
    threshold = channel_fit(solver.s0 * np.log(kappas), np.asarray(k3) / prefactor, ETA)
    tasks = [(ratio, a_bb_ratio, kappa_a_minus, float(v), n_theta, cutoff) for v in x_grid]
    bar = dict(total=len(tasks), disable=not progress, desc=f"{label} table", unit="x")
    if processes > 1:
        with ProcessPoolExecutor(max_workers=processes) as pool:
            rows = list(tqdm(pool.map(solve_x, *zip(*tasks)), **bar))
    else:
        rows = [solve_x(*t) for t in tqdm(tasks, **bar)]
    t_fit = np.array([r[1]["T"] for r in rows])
    s11 = np.array([r[1]["s11"] for r in rows])
    phase = np.unwrap(np.angle(s11))
    delta0 = math.atan2(threshold["s11"].imag, threshold["s11"].real)
    delta0 += 2.0 * math.pi * round((phase[0] - delta0) / (2.0 * math.pi))   # onto the table's branch
    return {"x": np.array([r[0] for r in rows]), "T": blended_transmission(t_fit, s11), "transmission_fit": t_fit,
            "s11": s11, "phase": phase, "threshold_c4": threshold["T"], "threshold_phase": delta0,
            "kappa_star_a_minus": kappa_a_minus, "s0": solver.s0,
            "fit_residual": np.array([r[1]["residual"] for r in rows]),
            "extrapolation_error": np.array([r[2] for r in rows]),
            "threshold_fit_residual": threshold["residual"], "threshold_abs_s11": abs(threshold["s11"])}


def _metadata(system, what, method, cutoff, n_theta, xs, residual, extrapolation, **more):
    return dict({
        "quantity": f"s11(k|a|) for a < 0, J = 0, {what}, {system.name} (two identical bosons B and X)",
        "energy_convention": "E = hbar^2 k^2/(2 mu), mu the B-X reduced mass; x = k|a|",
        "k3_formula": "K3 (events, rate K3 n_B^2 n_X) = 8 pi^2 hbar^5 (2 m_B + m_X)^{3/2}/(m_B^3 m_X^{3/2} E^2) "
                      "(1-|s11|^2)(1-exp(-4 eta))/|1 + s11 exp(2 i theta - 2 eta)|^2, theta = s0 ln(kappa*|a|), "
                      "kappa* = kappa_star_a_minus/a_minus",
        "method": method,
        "cutoff": cutoff, "qmin": QMIN, "eta_used": ETA, "n_theta": n_theta,
        "x_grid": {"kind": "logspace", "start": float(xs[0]), "stop": float(xs[-1]), "num": int(xs.size)},
        "channel_fit_residual_max": float(np.max(residual)),
        "extrapolation_error_rel_max": float(np.max(extrapolation)),
        "git_hash": git_hash(),
    }, **more)


_METHOD = ("B-B-X STM equations at complex energy, extrapolated to the real axis (docs/stm-mixture.md "
           "section 8); Efimov-channel fit over one period of kappa*; T blended from the fitted T and "
           "1 - |s11|^2 (docs/heteronuclear-rates.md)")


def build_table(system, path, *, x_grid=X_GRID, n_theta=N_THETA, cutoff=CUTOFF, processes=2, progress=True,
                a_bb_ratio=0.0):
    """Solve, fit and write the a < 0 table of ``system`` at one a_bb/a to ``path`` (.npz).

    Parameters
    ----------
    system : HeteronuclearSystem
        The masses (its a_bb in a0 is not used: ``a_bb_ratio`` sets the B-B interaction).
    path : str
        Output file; written atomically (a failed build never leaves a partial file).
    x_grid, n_theta, cutoff, processes, progress
        As in :func:`solve_slice`.
    a_bb_ratio : float
        r = a_bb/a >= 0 held fixed (0: no B-B interaction, the shipped tables).

    Returns
    -------
    dict
        The table's metadata (errors, residuals).
    """
    row = solve_slice(system.mass_ratio, a_bb_ratio, x_grid=x_grid, n_theta=n_theta, cutoff=cutoff,
                      processes=processes, progress=progress, label=system.name)
    what = "a_bb = 0" if a_bb_ratio == 0.0 else f"a_bb/a = {a_bb_ratio:g} held fixed"
    meta = _metadata(system, what, _METHOD, cutoff, n_theta, row["x"], row["fit_residual"],
                     row["extrapolation_error"], threshold_fit_residual=row["threshold_fit_residual"],
                     threshold_abs_s11=row["threshold_abs_s11"], a_bb_ratio=a_bb_ratio)
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, x=row["x"], log_transmission=np.log(row["T"]), transmission_fit=row["transmission_fit"],
                 phase=row["phase"], s11=row["s11"], threshold_c4=row["threshold_c4"],
                 threshold_phase=row["threshold_phase"], kappa_star_a_minus=row["kappa_star_a_minus"],
                 s0=row["s0"], mass_ratio=system.mass_ratio, fit_residual=row["fit_residual"],
                 extrapolation_error=row["extrapolation_error"], metadata=json.dumps(meta, sort_keys=True))
    return meta


def build_ratio_table(system, path, ratios, *, x_grid=X_GRID, n_theta=N_THETA, cutoff=CUTOFF, processes=1,
                      progress=True):
    """Solve, fit and write the a < 0 tables of ``system`` on a grid of r = a_bb/a to ``path``.

    Each r is a slice of :func:`solve_slice`; the file stacks them (first axis r) for
    :class:`lossfit.universal.tables.S11RatioTable`, with the phase of each slice measured
    from its own a_-: phase_rel = arg s11 + 2 s0 ln|kappa* a_-(r)| (so that 2 theta =
    2 s0 ln(|a|/|a_-|) + phase_rel, continuous in r), unwrapped across r at the first x.

    Parameters
    ----------
    system : HeteronuclearSystem
        The masses.
    path : str
        Output file (.npz), written atomically.
    ratios : array_like
        r = a_bb/a > 0, increasing, at least 4 (interpolated in ln r at run time).
    x_grid, n_theta, cutoff, processes, progress
        As in :func:`solve_slice`.

    Returns
    -------
    dict
        The metadata.
    """
    ratios = np.asarray(ratios, dtype=float)
    if ratios.size < 4 or not (ratios > 0).all() or not (np.diff(ratios) > 0).all():
        raise ValueError("need at least 4 increasing a_bb/a > 0")
    rows = [solve_slice(system.mass_ratio, float(r), x_grid=x_grid, n_theta=n_theta, cutoff=cutoff,
                        processes=processes, progress=progress, label=f"{system.name} a_bb/a = {r:g}")
            for r in ratios]
    s0 = rows[0]["s0"]
    kam = np.array([r["kappa_star_a_minus"] for r in rows])
    shift = 2.0 * s0 * np.log(np.abs(kam))
    phase = np.array([r["phase"] for r in rows]) + shift[:, None]
    delta0 = np.array([r["threshold_phase"] for r in rows]) + shift
    turns = np.round((np.unwrap(phase[:, 0]) - phase[:, 0]) / (2.0 * math.pi))   # continuous in r
    phase += 2.0 * math.pi * turns[:, None]
    delta0 += 2.0 * math.pi * turns
    stack = {k: np.array([r[k] for r in rows]) for k in ("transmission_fit", "s11", "threshold_c4", "fit_residual",
                                                         "extrapolation_error", "threshold_fit_residual")}
    meta = _metadata(system, "a_bb/a held fixed per slice (kappa* at 1/a = 1/a_bb = 0)", _METHOD, cutoff, n_theta,
                     rows[0]["x"], stack["fit_residual"], stack["extrapolation_error"],
                     a_bb_ratios=[float(r) for r in ratios],
                     phase_convention="phase_rel = arg s11 + 2 s0 ln|kappa_star_a_minus|")
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, a_bb_ratio=ratios, x=rows[0]["x"], log_transmission=np.log([r["T"] for r in rows]),
                 phase_rel=phase, threshold_phase_rel=delta0, kappa_star_a_minus=kam, s0=s0,
                 mass_ratio=system.mass_ratio, metadata=json.dumps(meta, sort_keys=True), **stack)
    return meta
