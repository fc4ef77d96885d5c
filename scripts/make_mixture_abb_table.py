"""Build the a < 0 table of 133Cs-133Cs-6Li on a grid of r = a_bb/a (B-B interaction).

Run:  OMP_NUM_THREADS=1 nice -n 19 python scripts/make_mixture_abb_table.py coarse
      (3 values of r, 7 values of x: the Efimov-channel residual and the threshold limit
      per r, about 2 min on one core)
      OMP_NUM_THREADS=1 nice -n 19 python scripts/make_mixture_abb_table.py build
      (the shipped grid RATIOS x X_GRID into lossfit/universal/data/, or into PATH given after
      "build"; about 8 min on one core)
      OMP_NUM_THREADS=1 nice -n 19 python scripts/make_mixture_abb_table.py midpoints
      (slices at r between the grid's nodes against the shipped table's interpolation in ln r)

The method is in lossfit.universal.solver.mixture_tables (docs/heteronuclear-rates.md,
"The B-B interaction at a < 0"); one process, as every solve here.
"""

import math
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from lossfit.mixture import heteronuclear  # noqa: E402
from lossfit.universal.mixture_model import ratio_table_name  # noqa: E402
from lossfit.universal.solver.mixture_tables import X_GRID, build_ratio_table, solve_slice  # noqa: E402
from lossfit.universal.tables import load_s11_ratio_table  # noqa: E402

OUT = Path(__file__).resolve().parents[1] / "lossfit" / "universal" / "data"
SYSTEM = heteronuclear("133Cs", "6Li")
#: r = a_bb/a of the shipped table: 0.05..15.8, 2 per decade (docs/heteronuclear-rates.md says why)
RATIOS = 0.05 * 10.0 ** (0.5 * np.arange(6))


def report(r, row):
    x = row["x"]
    c4_ratio = row["transmission_fit"][0] / (row["threshold_c4"] * x[0] ** 4)
    print(f"r = {r:g}: kappa* a_- = {row['kappa_star_a_minus']:.7f}, s0 = {row['s0']:.6f}, "
          f"fit residual max {row['fit_residual'].max():.1e}, extrapolation error max "
          f"{row['extrapolation_error'].max():.1e}, T(x0)/(c4 x0^4) = {c4_ratio:.6f} at x0 = {x[0]:g}, "
          f"arg s11(x0) - delta0 = {row['phase'][0] - row['threshold_phase']:.2e}, "
          f"max |s11|^2 + T_fit - 1 = {np.max(np.abs(row['s11']) ** 2 + row['transmission_fit'] - 1):.1e}, "
          f"T_fit max {row['transmission_fit'].max():.5f}", flush=True)


def main(argv):
    mode = argv[0] if argv else "coarse"
    start = time.time()
    if mode == "coarse":
        for r in (0.05, 0.5, 5.0):
            row = solve_slice(SYSTEM.mass_ratio, r, x_grid=np.geomspace(0.01, 10.0, 7), processes=1, progress=False)
            report(r, row)
            print(f"  {time.time() - start:.0f} s", flush=True)
    elif mode == "build":
        path = argv[1] if len(argv) > 1 else str(OUT / ratio_table_name(SYSTEM))
        meta = build_ratio_table(SYSTEM, path, RATIOS, processes=1, progress=False)
        print(meta, f"{time.time() - start:.0f} s", flush=True)
    elif mode == "midpoints":
        table = load_s11_ratio_table(str(OUT / ratio_table_name(SYSTEM)))
        for r in np.sqrt(RATIOS[1:] * RATIOS[:-1])[[0, 2]]:
            row = solve_slice(SYSTEM.mass_ratio, float(r), x_grid=X_GRID, processes=1, progress=False)
            report(r, row)
            t, s, kam = table.amplitudes(row["x"], np.full(row["x"].size, r))
            d_t = np.max(np.abs(t / row["T"] - 1.0))
            d_s = np.max(np.abs(s - row["s11"]))
            print(f"  interpolated at r = {r:.4g}: kappa* a_- {kam[0]:.7f} vs {row['kappa_star_a_minus']:.7f} "
                  f"(rel {kam[0] / row['kappa_star_a_minus'] - 1:.1e}); T max rel {d_t:.1e}, s11 max abs {d_s:.1e}; "
                  f"{time.time() - start:.0f} s", flush=True)
    else:
        raise SystemExit(f"unknown mode {mode!r}")
    print(f"done in {time.time() - start:.0f} s ({math.floor((time.time() - start) / 60)} min)")


if __name__ == "__main__":
    main(sys.argv[1:])
