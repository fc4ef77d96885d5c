#!/usr/bin/env python
"""Write lossfit/universal/data/recombination_high_energy.npz: the a > 0 shallow-dimer
recombination above the three-body table (E > 1e4 hbar^2/(m a^2)), up to k a -> infinity.

Deterministic (no timestamps, no random numbers; the only run-dependent metadata is the
git commit of the code).  Method (docs/stm.md section 7c):

* The J >= 1 breakup sum S(E) = sum_J (2J+1) P_J spreads over J up to ~ k a: its weight
  scales as a function of J/(k a) (measured on the three-body table), so the low partial
  waves, where the second-order (Born) form of the exchange kernel is poor, carry a share
  that falls with energy.  Here S = S_Born - D: the Born sum over every J
  (PartialWaveSolver.born_breakup, O(nodes) per J, summed until (2J+1) P_J < 1e-10 of the
  total) minus the Born correction D = S_Born - S of the low partial waves.
* D is known exactly on the three-body table (E <= 1e4, from its J >= 1 sums).  At
  CHECK_ENERGIES the low partial waves are solved here (J <= CHECK_J_CAP, with
  make_recombination_table.solve_higher_j); the per-J differences d_J beyond the last
  solved J are estimated by a power law in J fitted to the last half of the solved J and
  summed (measured on the table: this overestimates the true remainder by a factor
  1.7-2.2, so the remainder is taken as half of it, with half of it as its uncertainty).
* Above the table D is a piecewise power law in x = sqrt E = k a through the table's last
  point and every check whose uncertainty is below ANCHOR_REL_ERR of its D.  Beyond the
  last anchor the exponent is bracketed by 1 (the scaling regime, where every one of the
  ~k a partial waves carries a Born error ~1/(k a)^2) and 2 (single low partial waves,
  whose Born error falls like 1/(k a)): the spread is the stored uncertainty of D.  Every
  check must hold D between its solved part and that plus its estimated rest.
* An independent run with coarser numerics (cutoff, nodes, arc, contour angle) at every
  third energy bounds the discretisation error of S_Born.
* Beyond the grid (E > 1e8, k a > 1e4) the runtime uses S = c0 + c1/x + c2/x^2 fitted on
  the last two decades; the fit's largest residual is stored.  Since D -> 0, c0 is the
  limit of the Born sum alone.

Keys (float64 unless stated):
    energy              E m a^2/hbar^2, uniform in ln E from 1e4 (the three-body table's
                        last energy) to 1e8
    born_sum            S_Born
    born_correction     D
    higher_j            S = S_Born - D
    higher_j_err_rel    estimated error of S, relative (D's uncertainty, coarse-run
                        difference, truncation of the Born sum)
    check_energy, check_j_solved
    check_born_sum      S_Born at the checks
    check_sum           S with J <= check_j_solved solved and the Born form above
    check_correction_solved, check_remainder   D's solved part and the estimated rest
    table_energy, table_born_correction   D on the three-body table (E >= 100)
    correction_p                          the exponent p
    asymptote                             c0, c1, c2
    asymptote_max_residual                relative
    err_energy, err_born_sum_rel          coarse run against the main run
    metadata                              JSON string

Usage: OMP_NUM_THREADS=1 python scripts/make_recombination_tail.py [--processes N]
       [--cache DIR] [--out PATH]
"""

import argparse
import json
import math
import os
import pickle
import sys
import time
from multiprocessing import Pool

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
sys.path.insert(0, ROOT)
sys.path.insert(0, HERE)
os.environ.setdefault("OMP_NUM_THREADS", "1")

import make_recombination_table as three_body  # noqa: E402

from lossfit.batch.provenance import git_revision  # noqa: E402
from lossfit.universal.solver.partial_waves import PartialWaveSolver  # noqa: E402

E_LO, E_HI, PER_DECADE = 1e4, 1e8, 6
CHECK_ENERGIES = (10 ** 4.5, 1e5)
# solved partial waves and how many share one Legendre sweep (memory: block x nodes^2
# complex numbers; 10560 nodes at E = 1e5, where one block of 4 takes ~9 min)
CHECK_J_CAP = {10 ** 4.5: 32, 1e5: 24}
CHECK_BLOCK = {10 ** 4.5: 8, 1e5: 4}
ASYMPTOTE_E_MIN = 1e6      # the asymptotic form is fitted from here up
ANCHOR_REL_ERR = 0.1       # a check anchors D if its estimated rest is known to this


def _solver(energy, num):
    kad = math.sqrt(4.0 * (energy + 1.0) / 3.0)
    phi = three_body._phi(kad, num["phi_scale"])
    dmax = num["dfac"] * kad * math.tan(phi) if kad > 4.0 else None
    return PartialWaveSolver(kad, cutoff=num["cut_j"] * max(1.0, kad), phi=phi,
                             per_decade=num["per_decade"], narc=num["narc"], dmax=dmax)


def born_node(energy, num):
    born, beyond = three_body._born_sum(_solver(energy, num), 0.0)
    terms = (2 * np.arange(1, born.size + 1) + 1) * born
    return {"sum": float(terms.sum()), "beyond": float(beyond), "j_last": int(born.size)}


def check_node(energy):
    kad = math.sqrt(4.0 * (energy + 1.0) / 3.0)
    t0 = time.time()

    def log(msg):
        print(f"  [check E = {energy:.4g}, {time.time() - t0:6.0f} s] {msg}", flush=True)

    p, total, j_solved, rel, err = three_body.solve_higher_j(
        kad, j0_total=0.0, j_cap=CHECK_J_CAP[energy], block=CHECK_BLOCK[energy], log=log,
        **three_body.MAIN)
    return {"sum": float(total), "err": float(err), "j_solved": int(j_solved), "p_j": p,
            "born_rel_at_j_solved": float(rel)}


def _task(args):
    kind, energy, which = args
    if kind == "check":
        return check_node(energy)
    return born_node(energy, three_body.MAIN if which == "main" else three_body.COARSE)


def run_tasks(tasks, processes, cache):
    """Results of every task, computed once: each is kept in ``cache`` (a folder) so that
    a stopped run resumes."""
    os.makedirs(cache, exist_ok=True)

    def path(t):
        return os.path.join(cache, f"{t[0]}_{t[2]}_{t[1]:.10e}.pkl")

    todo = [t for t in tasks if not os.path.exists(path(t))]
    t0 = time.time()
    with Pool(processes) as pool:
        for t, r in zip(todo, pool.imap(_task, todo)):
            with open(path(t), "wb") as f:
                pickle.dump(r, f)
            print(f"[{time.time() - t0:7.1f} s] {t[0]} {t[2]} E = {t[1]:.4g}: S = {r['sum']:.8f}",
                  flush=True)
    out = {}
    for t in tasks:
        with open(path(t), "rb") as f:
            out[t] = pickle.load(f)
    return out


def energy_grid():
    n = int(round(math.log10(E_HI / E_LO) * PER_DECADE)) + 1
    return np.exp(np.linspace(math.log(E_LO), math.log(E_HI), n))


def correction_model(x, anchors):
    """(D, its uncertainty, the last exponent) at x = sqrt(E) from anchors (x_i, D_i, err_i),
    the first exact: D is piecewise a power law between anchors (linear in ln D against
    ln x), and beyond the last one continues with the last segment's exponent p, its
    uncertainty there the spread of exponents 1 and 2 around p (module docstring)."""
    ax, ad, ae = (np.array(v) for v in zip(*anchors))
    lx = np.log(x)
    corr = np.exp(np.interp(lx, np.log(ax), np.log(ad)))
    err = np.interp(lx, np.log(ax), ae)
    p = -math.log(ad[-1] / ad[-2]) / math.log(ax[-1] / ax[-2])
    far = x > ax[-1]
    r = x[far] / ax[-1]
    corr[far] = ad[-1] * r ** -p
    err[far] = ae[-1] / r + ad[-1] * np.maximum(np.abs(r ** -1.0 - r ** -p), np.abs(r ** -2.0 - r ** -p))
    return corr, err, p


def remainder_estimate(energy, p_solved):
    """(D's solved part, estimated rest) at one check energy: the per-J Born differences
    d_J = (2J + 1)(P_Born - P_solve) for the solved J, and the power law in J fitted to
    their last half, summed beyond."""
    j = np.arange(1, p_solved.size + 1)
    born = _solver(energy, three_body.MAIN).born_breakup(p_solved.size)
    d_j = (2 * j + 1) * (born - p_solved)
    tail = j > j[-1] // 2
    if np.any(d_j[tail] <= 0):
        raise SystemExit(f"E = {energy:.4g}: the Born differences change sign in the last solved J")
    slope, intercept = np.polyfit(np.log(j[tail]), np.log(d_j[tail]), 1)
    beyond = np.arange(j[-1] + 1, 100 * j[-1])
    return float(d_j.sum()), float(np.sum(np.exp(intercept) * beyond ** slope)), float(slope)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--processes", type=int, default=2)
    ap.add_argument("--cache", default=os.path.join(ROOT, "build", "recombination_tail_cache"))
    ap.add_argument("--only", choices=("checks", "born"),
                    help="run only the low-J solves or only the Born sums, and stop (two "
                         "such runs can share the cache: the solves need ~13 GB at E = 1e5)")
    ap.add_argument("--out", default=os.path.join(ROOT, "lossfit", "universal", "data",
                                                  "recombination_high_energy.npz"))
    args = ap.parse_args()
    t0 = time.time()
    with np.load(os.path.join(ROOT, "lossfit", "universal", "data",
                              "recombination_positive_a.npz")) as d:
        t_energy = np.array(d["energy"])
        t_sum = np.array(d["higher_j_over_e2"]) * t_energy ** 2
    if not math.isclose(t_energy[-1], E_LO, rel_tol=1e-12):
        raise SystemExit("the three-body table does not end at E_LO")
    overlap = t_energy >= 100.0
    energies = energy_grid()
    err_energies = energies[::3]
    # the long solves first, so that the two processes share the work evenly
    check_tasks = [("check", e, "main") for e in CHECK_ENERGIES]
    borns = ([("born", e, "main") for e in energies[::-1]]
             + [("born", e, "coarse") for e in err_energies[::-1]]
             + [("born", e, "main") for e in t_energy[overlap]]
             + [("born", e, "main") for e in CHECK_ENERGIES])
    tasks = {"checks": check_tasks, "born": borns, None: check_tasks + borns}[args.only]
    res = run_tasks(tasks, args.processes, args.cache)
    if args.only:
        return

    table_corr = np.array([res[("born", e, "main")]["sum"] for e in t_energy[overlap]]) - t_sum[overlap]
    check_e = np.array(sorted(CHECK_ENERGIES))
    checks = [res[("check", e, "main")] for e in check_e]
    check_born = np.array([res[("born", e, "main")]["sum"] for e in check_e])
    check_sum = np.array([c["sum"] for c in checks])
    solved_part, remainder, slopes = np.array(
        [remainder_estimate(e, c["p_j"][:c["j_solved"]]) for e, c in zip(check_e, checks)]).T
    # the check's D: solved part plus half the (overestimated) rest, +- half the rest
    check_corr = solved_part + 0.5 * remainder
    check_corr_err = 0.5 * remainder

    x = np.sqrt(energies)
    anchors = [(math.sqrt(E_LO), float(table_corr[-1]), 0.0)] + [
        (math.sqrt(e), float(c), float(err)) for e, c, err in zip(check_e, check_corr, check_corr_err)
        if err < ANCHOR_REL_ERR * c]
    corr, d_err, p_last = correction_model(x, anchors)
    born_sum = np.array([res[("born", e, "main")]["sum"] for e in energies])
    beyond = np.array([res[("born", e, "main")]["beyond"] for e in energies])
    higher_j = born_sum - corr
    coarse = np.array([res[("born", e, "coarse")]["sum"] for e in err_energies])
    coarse_rel = np.abs(coarse / born_sum[::3] - 1.0)
    coarse_interp = np.interp(np.log(energies), np.log(err_energies), coarse_rel)
    err_rel = d_err / higher_j + coarse_interp + beyond / higher_j
    # every check, anchor or not, must hold D between its solved part and that plus the rest
    at_checks = np.interp(np.log(check_e), np.log(energies), corr)
    if np.any(at_checks < solved_part) or np.any(at_checks > solved_part + remainder):
        raise SystemExit(f"D = {at_checks} at E = {check_e} leaves [{solved_part}, {solved_part + remainder}]")

    sel = energies >= ASYMPTOTE_E_MIN
    xs = x[sel]
    design = np.stack([np.ones_like(xs), 1.0 / xs, 1.0 / xs ** 2], axis=1)
    asym, *_ = np.linalg.lstsq(design, higher_j[sel], rcond=None)
    asym_resid = float(np.max(np.abs(design @ asym / higher_j[sel] - 1.0)))

    meta = {
        "quantity": "a > 0 shallow-dimer recombination of identical bosons, zero range: "
                    "S = sum_{J>=1} (2J+1) P_J above the three-body table",
        "method": "second-order (Born) form of the J >= 1 exchange kernel summed over all J, "
                  "minus the Born correction of the low partial waves, D = D(1e4) (x/100)^-p through "
                  "the three-body table's end and low-J solves at %.4g; a second check at %.4g"
                  % (check_e[0], check_e[1]),
        "conventions": {
            "energy": "E = three-atom collision energy in hbar^2/(m a^2); x = sqrt(E) = k a",
            "K3_shallow_events": "24 sqrt3 pi^2 [J = 0 part + S] / E^2 (hbar a^4/m), as in "
                                 "recombination_positive_a.npz",
            "asymptote": "S = c0 + c1/x + c2/x^2 above the grid",
        },
        "grid": {"kind": "uniform in ln E", "e_min": E_LO, "e_max": E_HI,
                 "per_decade": PER_DECADE, "n": int(energies.size)},
        "numerics": {"main": three_body.MAIN, "error_run": three_body.COARSE,
                     "born_end_tol": three_body.BORN_END_TOL,
                     "check_j_cap": {f"{e:.4g}": j for e, j in CHECK_J_CAP.items()}},
        "correction": {"anchors_x_d_err": anchors, "exponent_beyond_last_anchor": p_last,
                       "bracket_beyond_last_anchor": [1.0, 2.0]},
        "checks": {f"{e:.4g}": {"born_sum": float(b), "sum_with_solved_low_j": float(s_), "j_solved": c["j_solved"],
                                "correction_solved_part": float(sp), "remainder_estimate": float(rm),
                                "d_j_tail_slope": float(sl)}
                   for e, b, s_, c, sp, rm, sl in zip(check_e, check_born, check_sum, checks, solved_part,
                                                      remainder, slopes)},
        "correction_at_checks": [float(v) for v in at_checks],
        "estimated_error": {"higher_j_err_rel_max": float(err_rel.max()),
                            "coarse_rel_max": float(coarse_rel.max()),
                            "asymptote_max_rel_residual": asym_resid},
        "git_hash": git_revision() or "unknown",
    }
    np.savez_compressed(
        args.out, energy=energies, born_sum=born_sum, born_correction=corr, higher_j=higher_j,
        higher_j_err_rel=err_rel, check_energy=check_e, check_born_sum=check_born,
        check_sum=check_sum, check_correction_solved=solved_part, check_remainder=remainder,
        check_j_solved=np.array([c["j_solved"] for c in checks]),
        table_energy=t_energy[overlap], table_born_correction=table_corr,
        correction_p=p_last, asymptote=asym, asymptote_max_residual=asym_resid,
        err_energy=err_energies, err_born_sum_rel=coarse_rel,
        metadata=json.dumps(meta, sort_keys=True))
    print(json.dumps(meta, indent=1, sort_keys=True))
    print(f"wrote {args.out} ({os.path.getsize(args.out)} bytes) in {time.time() - t0:.0f} s")


if __name__ == "__main__":
    main()
