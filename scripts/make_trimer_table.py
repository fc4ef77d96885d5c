#!/usr/bin/env python
"""Write lossfit/universal/data/trimer_spectrum.npz: the universal Efimov trimer spectrum.

Deterministic (no timestamps, no random numbers; the only run-dependent metadata are the
git commit of the code and the run time in seconds). The reference trimer branch -- the one whose binding wave number
at unitarity is kappa* (its definition) -- is followed with the hyperspherical bound-state
solver (lossfit/universal/solver/boundstates.py, docs/solver.md) from near unitarity to
the three-atom threshold on the a < 0 side (kappa |a| from 60 down to 0.004) and to the
atom-dimer threshold on the a > 0 side (kappa a from 60 down to 1.0002). Every other branch
follows by the discrete scaling a -> 22.694 a, E -> E / 22.694^2 (zero range, exact).

Keys:
    inv_kappa_star_a    1/(kappa* a), ascending (a < 0 part negative, then the unitarity
                        point 0, then a > 0)
    energy              E / (hbar^2 kappa*^2 / m) of the reference branch (< 0)
    x_threshold_minus   1/(kappa* a_-): the end of the a < 0 part, from solver.boundstates
                        .kappa_star_a_minus (the trimer meets the three-atom threshold)
    x_threshold_star    1/(kappa* a*): the end of the a > 0 part, from solver.boundstates
                        .kappa_star_a_star (the trimer meets the atom-dimer threshold)
    metadata            JSON string

Usage: python scripts/make_trimer_table.py [--out PATH]
"""

import argparse
import json
import os
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
sys.path.insert(0, ROOT)

from lossfit.batch.provenance import git_revision  # noqa: E402
from lossfit.universal.solver import boundstates  # noqa: E402

# kappa |a| grids, decreasing from the unitarity end; dense enough that the phase unwraps
# continuously (a coarse a > 0 grid jumps to the next rung of the ladder)
NEG_GRID = np.geomspace(60.0, 0.004, 90)
POS_GRID = 1.0 + np.geomspace(59.0, 2e-4, 110)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default=os.path.join(ROOT, "lossfit", "universal", "data", "trimer_spectrum.npz"))
    args = ap.parse_args()
    t0 = time.time()
    x_neg, k_neg = boundstates.trimer_branch_negative_a(NEG_GRID)
    print(f"[{time.time() - t0:6.1f} s] a < 0: 1/(kappa* a) {x_neg[0]:.4f} .. {x_neg[-1]:.6f}", flush=True)
    x_pos, k_pos = boundstates.trimer_branch_positive_a(POS_GRID)
    print(f"[{time.time() - t0:6.1f} s] a > 0: 1/(kappa* a) {x_pos[0]:.4f} .. {x_pos[-1]:.4f}", flush=True)
    x_minus = 1.0 / boundstates.kappa_star_a_minus()
    x_star = 1.0 / boundstates.kappa_star_a_star()
    gap_star = float((k_pos[-1] / x_pos[-1]) ** 2 - 1.0)      # E/(-E_b) - 1 at the last solved point
    # the end points: the three-atom threshold (E = 0) at a_-, the atom-dimer threshold
    # (E = -hbar^2/(m a^2), i.e. -x^2 in these units) at a*; the last solved points lie
    # within 1e-5 (a < 0) and 4e-4 (a > 0, relative to E_b) of them
    x = np.concatenate([[x_minus], x_neg[::-1], [0.0], x_pos, [x_star]])
    energy = np.concatenate([[0.0], -k_neg[::-1] ** 2, [-1.0], -k_pos ** 2, [-x_star ** 2]])
    if np.any(np.diff(x) <= 0):
        raise SystemExit("the branch is not monotonic in 1/(kappa* a): refine the grids")
    meta = {
        "quantity": "universal Efimov trimer spectrum, reference branch (kappa = kappa* at unitarity), zero range",
        "method": "hyperspherical bound-state mode (solver.boundstates.trimer_branch_negative_a / _positive_a), "
                  "branch followed continuously from kappa |a| = 60; thresholds from kappa_star_a_minus and "
                  "kappa_star_a_star",
        "units": "x = 1/(kappa* a); energy in hbar^2 kappa*^2/m",
        "grids": {"negative_kappa_abs_a": [float(NEG_GRID[0]), float(NEG_GRID[-1]), int(NEG_GRID.size)],
                  "positive_kappa_a": [float(POS_GRID[0]), float(POS_GRID[-1]), int(POS_GRID.size)]},
        "checks": {"x_end_negative": float(x_neg[-1]), "x_threshold_minus": float(x_minus),
                   "x_end_positive": float(x_pos[-1]), "x_threshold_star": float(x_star),
                   "last_positive_point_binding_over_eb_minus_1": gap_star},
        "seconds": round(time.time() - t0),
        "git_hash": git_revision() or "unknown",
    }
    np.savez_compressed(args.out, inv_kappa_star_a=x, energy=energy, x_threshold_minus=x_minus,
                        x_threshold_star=x_star, metadata=json.dumps(meta, sort_keys=True))
    print(json.dumps(meta, indent=1, sort_keys=True))
    print(f"wrote {args.out} ({os.path.getsize(args.out)} bytes) in {time.time() - t0:.0f} s; "
          f"kappa* a_- = {1 / x_minus:.6f}, kappa* a* = {1 / x_star:.6f}")


if __name__ == "__main__":
    main()
