"""Build the a < 0 table s11(x) of two identical bosons and a third atom (a_bb = 0, J = 0).

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

__all__ = ["build_table", "channel_fit", "blended_transmission", "period_kappas", "git_hash", "X_GRID", "N_THETA"]

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


def _one_x(args):
    ratio, kappa_a_minus, x, n_theta, cutoff = args
    solver = stm_mixture.MixtureSTM(ratio, cutoff=cutoff, qmin=QMIN)
    kappas = period_kappas(solver.s0, kappa_a_minus, n_theta)
    p, err = [], []
    for k in kappas:
        out = solver.recombination_energy(k, ETA, x * x)
        p.append(out["k3"] / out["bound"])
        err.append(out["error"] / out["k3"])
    return x, channel_fit(solver.s0 * np.log(kappas), p, ETA), max(err)


def build_table(system, path, *, x_grid=X_GRID, n_theta=N_THETA, cutoff=CUTOFF, processes=2, progress=True):
    """Solve, fit and write the a < 0 table of ``system`` to ``path`` (.npz).

    Parameters
    ----------
    system : HeteronuclearSystem
        a_bb must be 0.
    path : str
        Output file; written atomically (a failed build never leaves a partial file).
    x_grid : ndarray
        x = k|a|, uniform in ln x, at least 4 values.
    n_theta : int
        kappa* values per x (at least 3).
    cutoff : float
        Lambda |a| of the solver.
    processes : int
        Worker processes (one x per task).
    progress : bool
        Show a tqdm progress bar.

    Returns
    -------
    dict
        The table's metadata (errors, residuals).
    """
    if system.a_bb != 0.0:
        raise ValueError("tables are built for a_bb = 0")
    x_grid = np.asarray(x_grid, dtype=float)
    if x_grid.size < 4 or n_theta < 3:
        raise ValueError("need at least 4 x values and 3 kappa* values")
    ratio = system.mass_ratio
    solver = stm_mixture.MixtureSTM(ratio, cutoff=cutoff, qmin=QMIN)
    kappa_a_minus = solver.kappa_a_minus()
    kappas = period_kappas(solver.s0, kappa_a_minus, n_theta)
    # threshold: K3(0)/bound(eps = 1) = c4 (1 - e^-4eta)/|1 + e^{i delta0} e^{2 i theta - 2 eta}|^2
    prefactor = solver.unitarity_bound(1.0)
    k3 = [solver.recombination(k, ETA, negative_a=True)["deep"] for k in kappas]
    threshold = channel_fit(solver.s0 * np.log(kappas), np.asarray(k3) / prefactor, ETA)
    tasks = [(ratio, kappa_a_minus, float(v), n_theta, cutoff) for v in x_grid]
    with ProcessPoolExecutor(max_workers=processes) as pool:
        rows = list(tqdm(pool.map(_one_x, tasks), total=len(tasks), disable=not progress,
                         desc=f"{system.name} table", unit="x"))
    xs = np.array([r[0] for r in rows])
    t_fit = np.array([r[1]["T"] for r in rows])
    s11 = np.array([r[1]["s11"] for r in rows])
    phase = np.unwrap(np.angle(s11))
    delta0 = math.atan2(threshold["s11"].imag, threshold["s11"].real)
    delta0 += 2.0 * math.pi * round((phase[0] - delta0) / (2.0 * math.pi))   # onto the table's branch
    residual = np.array([r[1]["residual"] for r in rows])
    extrapolation = np.array([r[2] for r in rows])
    git = git_hash()
    meta = {
        "quantity": f"s11(k|a|) for a < 0, J = 0, a_bb = 0, {system.name} (two identical bosons B and X)",
        "energy_convention": "E = hbar^2 k^2/(2 mu), mu the B-X reduced mass; x = k|a|",
        "k3_formula": "K3 (events, rate K3 n_B^2 n_X) = 8 pi^2 hbar^5 (2 m_B + m_X)^{3/2}/(m_B^3 m_X^{3/2} E^2) "
                      "(1-|s11|^2)(1-exp(-4 eta))/|1 + s11 exp(2 i theta - 2 eta)|^2, theta = s0 ln(kappa*|a|), "
                      "kappa* = kappa_star_a_minus/a_minus",
        "method": "B-B-X STM equations at complex energy, extrapolated to the real axis (docs/stm-mixture.md "
                  "section 8); Efimov-channel fit over one period of kappa*; T blended from the fitted T and "
                  "1 - |s11|^2 (docs/heteronuclear-rates.md)",
        "cutoff": cutoff, "qmin": QMIN, "eta_used": ETA, "n_theta": n_theta,
        "x_grid": {"kind": "logspace", "start": float(xs[0]), "stop": float(xs[-1]), "num": int(xs.size)},
        "channel_fit_residual_max": float(residual.max()),
        "extrapolation_error_rel_max": float(extrapolation.max()),
        "threshold_fit_residual": threshold["residual"],
        "threshold_abs_s11": abs(threshold["s11"]),
        "git_hash": git,
    }
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, x=xs, log_transmission=np.log(blended_transmission(t_fit, s11)), transmission_fit=t_fit,
                 phase=phase, s11=s11, threshold_c4=threshold["T"], threshold_phase=delta0,
                 kappa_star_a_minus=kappa_a_minus, s0=solver.s0, mass_ratio=ratio, fit_residual=residual,
                 extrapolation_error=extrapolation, metadata=json.dumps(meta, sort_keys=True))
    return meta
