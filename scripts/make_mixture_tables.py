"""Build the shipped a < 0 tables of two identical bosons and a third atom (a_bb = 0).

Run:  OMP_NUM_THREADS=1 python scripts/make_mixture_tables.py [B-X ...] [--processes N]
      (default: the four shipped systems, about 25 min on two busy cores)
      python scripts/make_mixture_tables.py --repack   (recompute ln T of the shipped files)

The method is in lossfit.universal.solver.mixture_tables (docs/heteronuclear-rates.md);
this script writes into lossfit/universal/data/.  Tables of other pairs are built on
demand into the user's cache by ``lossfit tables BOSON OTHER``.
"""

import math
import os
import sys
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from lossfit.mixture import heteronuclear  # noqa: E402
from lossfit.universal.mixture_model import shipped_systems, table_name  # noqa: E402
from lossfit.universal.solver.mixture_tables import blended_transmission, build_table  # noqa: E402

OUT = Path(__file__).resolve().parents[1] / "lossfit" / "universal" / "data"


def repack(path):
    """Rewrite a table's ln T from its stored fitted T and s11 (blended_transmission)."""
    with np.load(path) as d:
        data = {k: d[k] for k in d.files}
    t_fit = data.get("transmission_fit", np.exp(data["log_transmission"]))
    data["transmission_fit"] = t_fit
    data["log_transmission"] = np.log(blended_transmission(t_fit, data["s11"]))
    np.savez(path, **data)
    print(f"{path.name}: T(x_last) = {math.exp(data['log_transmission'][-1]):.5f} (unitarity "
          f"{1 - math.exp(-2 * math.pi * float(data['s0'])):.5f})")


def main(argv):
    pairs = shipped_systems()
    if "--repack" in argv:
        for b, x in pairs:
            repack(OUT / table_name(heteronuclear(b, x)))
        return
    processes = 2
    if "--processes" in argv:
        i = argv.index("--processes")
        processes = int(argv[i + 1])
        del argv[i:i + 2]
    pairs = [tuple(p.split("-")) for p in argv] or pairs
    for b, x in pairs:
        system = heteronuclear(b, x)
        meta = build_table(system, str(OUT / table_name(system)), processes=processes)
        print(f"{table_name(system)}: max fit residual {meta['channel_fit_residual_max']:.1e}, "
              f"max extrapolation error {meta['extrapolation_error_rel_max']:.1e}", flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
