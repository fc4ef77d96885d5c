#!/usr/bin/env python
"""Write lossfit/universal/data/vdw_binding.npz: the weakest s-wave bound state of -C6/r^6.

In units of beta6 = (m C6/hbar^2)^(1/4) the van der Waals binding wave number depends on
a/beta6 alone, so one table serves every species. Stored: s = beta6/(a - abar) on a log
grid and g(s) = kappa (a - abar), which tends to 1 (the universal law) as s -> 0.
Computed with lossfit.experiment.binding.vdw_kappa (outward integration from the
zero-energy boundary condition at x = 0.08, docs/feshbach.md); deterministic; metadata
holds the git commit and a convergence check at x = 0.05.

Usage: python scripts/make_vdw_binding_table.py [--out PATH]
"""

import argparse
import json
import os
import sys
import time

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)

from lossfit.batch.provenance import git_revision  # noqa: E402
from lossfit.experiment.binding import ABAR_BETA6, vdw_kappa  # noqa: E402

S_GRID = np.geomspace(1e-4, 6.0, 48)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default=os.path.join(ROOT, "lossfit", "universal", "data", "vdw_binding.npz"))
    args = ap.parse_args()
    t0 = time.time()
    a = ABAR_BETA6 + 1.0 / S_GRID
    g = np.array([vdw_kappa(v) * (v - ABAR_BETA6) for v in a])
    check = [vdw_kappa(v, x_short=0.05) * (v - ABAR_BETA6) for v in a[::8]]
    meta = {"quantity": "kappa (a - abar) of the weakest s-wave bound state of -C6/r^6, against s = beta6/(a - abar)",
            "method": "lossfit.experiment.binding.vdw_kappa: outward DOP853 integration (rtol 1e-10) from the "
                      "zero-energy solution with scattering length a at x = 0.08 beta6, brentq on the sign of "
                      "the growing solution",
            "convergence_x_short_0.05_max_rel": float(np.max(np.abs(np.array(check) / g[::8] - 1.0))),
            "seconds": round(time.time() - t0), "git_hash": git_revision() or "unknown"}
    np.savez_compressed(args.out, s=S_GRID, g=g, metadata=json.dumps(meta, sort_keys=True))
    print(json.dumps(meta, indent=1, sort_keys=True))
    print(f"wrote {args.out}; g from {g[0]:.6f} (s = {S_GRID[0]:g}) to {g[-1]:.6f} (s = {S_GRID[-1]:g})")


if __name__ == "__main__":
    main()
