"""Build the shipped a > 0 atom-dimer tables s_AD(k a) of two identical bosons and a third atom.

Run:  OMP_NUM_THREADS=1 python scripts/make_mixture_atom_dimer_tables.py [B-X ...] [--processes N]
      (default: the four shipped systems; about 4 min each on two cores)

The method is in lossfit.universal.solver.mixture_atom_dimer (docs/heteronuclear-rates.md,
"Atom-dimer relaxation at a > 0"); this script writes
lossfit/universal/data/s_ad_mixture_<B>_<X>.npz and prints the measured errors.
"""

import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")

from lossfit.mixture import heteronuclear  # noqa: E402
from lossfit.universal.solver.mixture_atom_dimer import build_table  # noqa: E402

OUT = Path(__file__).resolve().parents[1] / "lossfit" / "universal" / "data"
SHIPPED = (("133Cs", "6Li"), ("133Cs", "7Li"), ("87Rb", "40K"), ("87Rb", "41K"))


def main(argv):
    processes = 2
    if "--processes" in argv:
        i = argv.index("--processes")
        processes = int(argv[i + 1])
        del argv[i:i + 2]
    pairs = [tuple(p.split("-")) for p in argv] or SHIPPED
    for b, x in pairs:
        system = heteronuclear(b, x)
        name = f"s_ad_mixture_{system.boson.name}_{system.other.name}.npz"
        start = time.time()
        meta = build_table(system, str(OUT / name), processes=processes)
        cut, fine, mid = meta["cutoff_x10_error"], meta["finer_grid_error"], meta["spline_midpoint_error"]
        print(f"{name} ({time.time() - start:.0f} s): grid {meta['x_grid']['num']} points to x_b = "
              f"{meta['x_grid']['stop']:.6f}; fit residual {meta['channel_fit_residual_max']:.1e} "
              f"(threshold {meta['threshold_fit_residual']:.1e}); unitarity {meta['unitarity_identity_max']:.1e}; "
              f"cutoff x10 T {cut['t_rel_max']:.1e} s {cut['s_abs_max']:.1e} c1 {cut['c1_rel']:.1e}; "
              f"finer grid T {fine['t_rel_max']:.1e} s {fine['s_abs_max']:.1e}; "
              f"spline T {mid['t_rel_max']:.1e} s {mid['s_abs_max']:.1e}; "
              f"kappa* a* from the threshold phase {meta['kappa_star_a_star_from_threshold_phase']:.9g}", flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
