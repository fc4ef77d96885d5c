#!/usr/bin/env python
"""Write lossfit/universal/data/recombination_positive_a.npz: a > 0 three-body loss.

Deterministic (no timestamps, no random numbers; the only run-dependent metadata is the
git commit of the code).  Everything comes from the STM solver (docs/stm.md):

* J = 0 (lossfit/universal/solver/stm.py): at each energy one LU solve on the deformed
  contour serves every three-body force; s_AD, T_AD and the breakup coefficients A, B, C
  come from :func:`stm.s_ad_fit`.  With w = e^{2 i Phi - 2 eta} (events convention,
  units hbar a^4/m, E = three-atom energy in hbar^2/(m a^2)):

      K3_shallow,J=0(E) = 24 sqrt 3 pi^2 (A + 2 Re(B w) + C |w|^2) / (E^2 |1 + s_AD w|^2),
      K3_deep(E)        = 24 sqrt 3 pi^2 T_break (1 - e^{-4 eta}) / (E^2 |1 + s_AD w|^2),
      T_break           = 1 - |s_AD|^2 - T_AD   (three atoms -> Efimov channel),

  the first by detailed balance from dimer breakup, the second by unitarity of the
  long-distance S matrix (the Efimov channel's absorbed flux, fed from three atoms).
  A, B, C and T_break vanish like E^2 at breakup, so the table stores them over E^2; the
  E -> 0 limits come from a separate route, direct threshold recombination solves
  (:func:`stm.threshold_recombination_form`), and are stored as ``threshold_*``.
* J >= 1 (lossfit/universal/solver/partial_waves.py): no three-body force, so the
  breakup probabilities P_J(E) are universal; the shallow-dimer recombination gains
  24 sqrt 3 pi^2 sum_J (2J + 1) P_J / E^2. Low J come from solves (8 partial waves at a
  time), high J from the second-order (Born) form of the exchange kernel
  (PartialWaveSolver.born_breakup, one row per J), summed until (2J+1) P_J < 1e-10 of
  the total. The solves go on until the Born form's relative error at the last solved J
  (it falls with J: docs/stm.md section 7) times the Born part of the sum is below 1e-5
  of the total; that product is stored as the estimated error of the sum.

Keys (float64 unless stated):
    energy              E m a^2/hbar^2, uniform in ln E from 2e-2 to 1000
    s_ad                complex128 s_AD at k_AD a = sqrt(4 (E + 1)/3)
    breakup_a_over_e2, breakup_b_over_e2 (complex128), breakup_c_over_e2
    t_break_over_e2
    higher_j_over_e2    sum_{J>=1} (2J+1) P_J / E^2
    p_break_j           P_J (row per energy, column J - 1; zero past j_last)
    j_last (int)        last J summed at each energy
    j_solved (int)      last J from a solve; the Born form above it
    born_rel_diff       |P_Born / P_solve - 1| at j_solved
    higher_j_err_rel    estimated error of the J >= 1 sum (Born part and truncation),
                        relative to the shallow total (J >= 1 sum + A)
    threshold_alpha, threshold_b (complex128), threshold_c, threshold_tau, threshold_s_ad
    kappa_star_a_plus   kappa* a_+ where the eta -> 0 threshold shallow rate vanishes
    err_energy, err_*   error estimate (every 4th node, a coarser independent run)
    metadata            JSON string

Usage: OMP_NUM_THREADS=1 python scripts/make_recombination_table.py [--quick] [--out PATH]
       [--processes N]
"""

import argparse
import json
import math
import os
import sys
import time
from multiprocessing import Pool

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
sys.path.insert(0, ROOT)
os.environ.setdefault("OMP_NUM_THREADS", "1")

from scipy.special import loggamma  # noqa: E402

from lossfit.batch.provenance import git_revision  # noqa: E402
from lossfit.constants import S0  # noqa: E402
from lossfit.universal.solver import stm  # noqa: E402
from lossfit.universal.solver.partial_waves import PartialWaveSolver  # noqa: E402

ETAS = (0.1, 0.4)
NPHI = 6
KAPPA0 = 0.15
# Below E ~ 1e-2 the J = 0 breakup probability (~ 0.04 E^2) is the difference of numbers
# near 1 and loses ~1e-3 of its digits, so the grid starts at 2e-2 and the runtime
# interpolates from the separately computed E -> 0 limits.
E_MIN, E_MAX, PER_DECADE = 2e-2, 1e4, 12
J_CAP = 200             # most solved partial waves
J_BLOCK = 8             # partial waves per Legendre sweep (memory: 8 n^2 complex)
J_REL_TOL = 1e-8        # a Born tail below this fraction of the total needs no solves
BORN_TOL = 1e-5         # estimated Born error of the sum, relative to the total
BORN_END_TOL = 1e-10    # the Born sum runs until (2J+1) P_J is below this of the total
# J = 0: as scripts/make_atom_dimer_table.py (MAIN); J >= 1: the kernel needs no large cutoff
MAIN = dict(cut=1e8, dfac=0.5, per_decade=48, narc=32, cut_j=1e3, phi_scale=1.0)
COARSE = dict(cut=1e7, dfac=1.0, per_decade=36, narc=24, cut_j=1e4, phi_scale=0.7)


def _phi(kad, scale):
    return scale * min(0.5, 0.6 * math.atan(2.0 / kad))


def solve_j0(kad, cut, dfac, per_decade, narc, phi_scale, **_):
    cutoff = cut * max(1.0, kad)
    phi = _phi(kad, phi_scale)
    dmax = dfac * kad * math.tan(phi) if kad > 4.0 else None
    sol = stm.AtomDimerRankOne(kad, cutoff=cutoff, phi=phi, per_decade=per_decade,
                               narc=narc, dmax=dmax)
    return stm.s_ad_fit(sol, ETAS, NPHI, KAPPA0, cutoff)


def _born_sum(sol, j0_total):
    """Born P_J far enough that (2J+1) P_J < BORN_END_TOL of the total; the geometric
    estimate of what lies beyond."""
    l_max = int(6 * sol.kad) + 64
    while True:
        born = sol.born_breakup(l_max)
        terms = (2 * np.arange(1, l_max + 1) + 1) * born
        total = j0_total + terms.sum()
        if abs(terms[-1]) < BORN_END_TOL * total or l_max > 20000:
            ratio = min(abs(terms[-1] / terms[-2]), 0.999) if terms[-2] else 0.0
            return born, abs(terms[-1]) * ratio / (1.0 - ratio)
        l_max *= 2


def solve_higher_j(kad, cut_j, dfac, per_decade, narc, phi_scale, j0_total, j_cap=J_CAP,
                   block=J_BLOCK, log=None, **_):
    phi = _phi(kad, phi_scale)
    dmax = dfac * kad * math.tan(phi) if kad > 4.0 else None
    sol = PartialWaveSolver(kad, cutoff=cut_j * max(1.0, kad), phi=phi,
                            per_decade=per_decade, narc=narc, dmax=dmax)
    born, beyond = _born_sum(sol, j0_total)
    p = born.copy()
    js_all = np.arange(1, born.size + 1)
    for lo in range(1, j_cap + 1, block):
        js = list(range(lo, min(lo + block, j_cap + 1)))
        p[lo - 1:js[-1]] = 1.0 - np.abs(sol.amplitudes(js, block=block)) ** 2
        total = j0_total + np.sum((2 * js_all + 1) * p)
        born_part = np.sum((2 * js_all[js[-1]:] + 1) * born[js[-1]:])
        rel = abs(born[js[-1] - 1] / p[js[-1] - 1] - 1.0) if p[js[-1] - 1] else 0.0
        if log:
            log(f"k_AD a = {kad:.4g}: solved J <= {js[-1]}, Born error there {rel:.2e}")
        # the Born form's relative error falls with J (measured, docs/stm.md section 7):
        # bounded by its value at the last solved J times the Born part
        if born_part < J_REL_TOL * total or rel * born_part < BORN_TOL * total:
            break
    sum_j = float(np.sum((2 * js_all + 1) * p))
    err = (rel * born_part + beyond) / (j0_total + sum_j)
    last = int(np.flatnonzero(p)[-1]) + 1 if np.any(p) else 1
    return p[:last], sum_j, js[-1], rel, err


def node(args):
    energy, num = args
    kad = math.sqrt(4.0 * (energy + 1.0) / 3.0)
    r = solve_j0(kad, **num)
    t_break = r["one_minus_abs_s2"] - r["t_ad"]
    pj, total, j_solved, born_rel, err = solve_higher_j(kad, j0_total=r["breakup_A"], **num)
    e2 = energy * energy
    return {"energy": energy, "s_ad": r["s_ad"], "a": r["breakup_A"] / e2,
            "b": r["breakup_B"] / e2, "c": r["breakup_C"] / e2, "t_break": t_break / e2,
            "higher_j": total / e2, "p_j": pj, "fit_residual": r["max_rel_residual"],
            "breakup_residual": r["breakup_max_abs_residual"], "j_solved": j_solved,
            "born_rel_diff": born_rel, "higher_j_err": err}


def energy_grid(quick):
    n = int(round(math.log10(E_MAX / E_MIN) * (4 if quick else PER_DECADE))) + 1
    return np.exp(np.linspace(math.log(E_MIN), math.log(E_MAX), n))


def kappa_star_a_plus(alpha, b, c):
    """kappa* a_+: the zero of alpha + 2 Re(b e^{2 i Phi}) + c (eta = 0) nearest 0.3."""
    arg_gamma = float(np.imag(loggamma(1 + 1j * S0)))
    phi_plus = 0.5 * (math.pi - math.atan2(b.imag, b.real))
    cands = [math.sqrt(2.0) * math.exp((phi_plus + n * math.pi + arg_gamma) / S0)
             for n in range(-3, 4)]
    return min(cands, key=lambda k: abs(math.log(k / 0.3)))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="4 energies per decade")
    ap.add_argument("--processes", type=int, default=2)
    ap.add_argument("--out", default=os.path.join(ROOT, "lossfit", "universal", "data",
                                                  "recombination_positive_a.npz"))
    args = ap.parse_args()
    t0 = time.time()
    energies = energy_grid(args.quick)
    err_energies = energies[::4]
    jobs = [(e, MAIN) for e in energies] + [(e, COARSE) for e in err_energies]
    with Pool(args.processes) as pool:
        res = []
        for i, r in enumerate(pool.imap(node, jobs)):
            res.append(r)
            print(f"[{time.time() - t0:7.1f} s] {i + 1}/{len(jobs)} E a^2 = {r['energy']:.4g} "
                  f"J <= {r['p_j'].size} (solved <= {r['j_solved']}) higher-J/E^2 = {r['higher_j']:.4g} "
                  f"est. error {r['higher_j_err']:.1e}", flush=True)
    main_res, err_res = res[:energies.size], res[energies.size:]

    s_thr = stm.s_ad_from_stm(2.0 / math.sqrt(3.0), cutoff=MAIN["cut"])
    thr = stm.threshold_recombination_form(s_thr, ETAS, NPHI, KAPPA0, cutoff=1e7,
                                           per_decade=48)
    k_plus = kappa_star_a_plus(thr["alpha"], thr["b"], thr["c"])

    def col(rs, key, dtype=float):
        return np.array([r[key] for r in rs], dtype=dtype)

    jmax = max(r["p_j"].size for r in main_res)
    p_j = np.zeros((energies.size, jmax))
    for i, r in enumerate(main_res):
        p_j[i, :r["p_j"].size] = r["p_j"]
    err = {}
    for key in ("a", "c", "t_break", "higher_j"):
        main_v = col(main_res, key)[::4]
        err_v = col(err_res, key)
        scale = np.maximum(np.abs(main_v), 1e-12)
        err[key] = np.abs(err_v - main_v) / scale
    err["s_ad"] = np.abs(col(err_res, "s_ad", complex) - col(main_res, "s_ad", complex)[::4])
    # only where the J >= 1 sum is above the rounding noise of 1 - |S_J|^2 (~1e-12)
    sig = col(main_res, "higher_j")[::4] * err_energies ** 2 > 1e-9

    meta = {
        "quantity": "a > 0 three-body recombination of identical bosons, zero range: J = 0 "
                    "shallow (breakup, detailed balance) and deep (T_break) parts, J >= 1 "
                    "shallow part (sum of (2J+1) P_J)",
        "method": "STM equation on a deformed contour; J = 0 with the three-body force as a "
                  "rank-one term (stm.AtomDimerRankOne, stm.s_ad_fit), J >= 1 without one "
                  "(partial_waves.PartialWaveSolver, kernel (-1)^J Q_J(z)/(pq)), solved up to "
                  "j_solved and in the second-order Born form above; E -> 0 limits "
                  "from direct threshold solves (stm.threshold_recombination_form)",
        "conventions": {
            "energy": "E = three-atom collision energy in hbar^2/(m a^2); k_AD a = sqrt(4 (E+1)/3)",
            "w": "exp(2 i Phi - 2 eta), Phi = s0 ln(kappa* a / sqrt 2) - arg Gamma(1 + i s0)",
            "K3_shallow_events": "24 sqrt3 pi^2 [(A + 2 Re(B w) + C|w|^2)/|1 + s_AD w|^2 + "
                                 "sum_{J>=1}(2J+1) P_J] / E^2   (hbar a^4/m; x3 for atoms lost)",
            "K3_deep_events": "24 sqrt3 pi^2 T_break (1 - e^{-4 eta}) / (E^2 |1 + s_AD w|^2)",
        },
        "grid": {"kind": "uniform in ln E", "e_min": E_MIN, "e_max": E_MAX,
                 "per_decade": 4 if args.quick else PER_DECADE, "n": int(energies.size)},
        "numerics": {"main": MAIN, "error_run": COARSE, "j_cap": J_CAP,
                     "j_rel_tol": J_REL_TOL, "born_tol": BORN_TOL, "born_end_tol": BORN_END_TOL,
                     "extraction": {"etas": ETAS, "nphi": NPHI,
                                                            "kappa0_a": KAPPA0}},
        "threshold": {k: (v if not isinstance(v, complex) else [v.real, v.imag])
                      for k, v in thr.items()},
        "kappa_star_a_plus": k_plus,
        "estimated_error": {
            "note": "main run vs an independent coarser run (cutoff, nodes, arc, contour "
                    "angle x 0.7) at every 4th energy",
            "breakup_a_rel_max": float(err["a"].max()),
            "breakup_c_rel_max": float(err["c"].max()),
            "t_break_rel_max": float(err["t_break"].max()),
            "s_ad_abs_max": float(err["s_ad"].max()),
            "higher_j_rel_max_where_resolved": float(err["higher_j"][sig].max()),
        },
        "checks": {
            "max_rel_fit_residual": float(max(r["fit_residual"] for r in main_res)),
            "breakup_max_abs_fit_residual": float(max(r["breakup_residual"] for r in main_res)),
            "threshold_vs_first_node_a_rel": abs(main_res[0]["a"] / thr["alpha"] - 1.0),
            "threshold_vs_first_node_tbreak_rel": abs(main_res[0]["t_break"] / thr["tau"] - 1.0),
            "j_last_max": int(jmax),
            "j_solved_max": int(max(r["j_solved"] for r in main_res)),
            "higher_j_err_rel_max": float(max(r["higher_j_err"] for r in main_res)),
        },
        "git_hash": git_revision() or "unknown",
    }
    np.savez_compressed(
        args.out, energy=energies, s_ad=col(main_res, "s_ad", complex),
        breakup_a_over_e2=col(main_res, "a"), breakup_b_over_e2=col(main_res, "b", complex),
        breakup_c_over_e2=col(main_res, "c"), t_break_over_e2=col(main_res, "t_break"),
        higher_j_over_e2=col(main_res, "higher_j"), p_break_j=p_j,
        j_last=np.array([r["p_j"].size for r in main_res]),
        j_solved=np.array([r["j_solved"] for r in main_res]),
        born_rel_diff=col(main_res, "born_rel_diff"), higher_j_err_rel=col(main_res, "higher_j_err"),
        threshold_alpha=thr["alpha"], threshold_b=thr["b"], threshold_c=thr["c"],
        threshold_tau=thr["tau"], threshold_s_ad=s_thr, kappa_star_a_plus=k_plus,
        err_energy=err_energies, err_breakup_a=err["a"], err_t_break=err["t_break"],
        err_higher_j=err["higher_j"], err_s_ad=err["s_ad"],
        metadata=json.dumps(meta, sort_keys=True))
    print(json.dumps(meta, indent=1, sort_keys=True))
    print(f"wrote {args.out} ({os.path.getsize(args.out)} bytes) in {time.time() - t0:.0f} s")


if __name__ == "__main__":
    main()
