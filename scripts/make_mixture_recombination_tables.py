"""Build the shipped a > 0, J = 0 recombination tables of two identical bosons and a third atom.

Run:  OMP_NUM_THREADS=1 python scripts/make_mixture_recombination_tables.py [B-X ...]
      (default: the four shipped systems; 2-5 min each on one core)

The method is in lossfit.universal.solver.mixture_recombination (docs/heteronuclear-rates.md,
"Three-body recombination at a > 0"); the phase convention (kappa* a*) is read from the shipped
atom-dimer table of the same pair. Writes lossfit/universal/data/k3_positive_mixture_<B>_<X>.npz
and prints the measured checks.
"""

import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from lossfit.mixture import heteronuclear  # noqa: E402
from lossfit.universal.mixture_model import atom_dimer_table_name, recombination_table_name  # noqa: E402
from lossfit.universal.solver.mixture_recombination import build_table  # noqa: E402

OUT = Path(__file__).resolve().parents[1] / "lossfit" / "universal" / "data"
SHIPPED = (("87Rb", "41K"), ("133Cs", "6Li"), ("87Rb", "40K"), ("133Cs", "7Li"))


def main(argv):
    pairs = [tuple(p.split("-")) for p in argv] or SHIPPED
    for b, x in pairs:
        system = heteronuclear(b, x)
        with np.load(OUT / atom_dimer_table_name(system)) as d:
            kappa_a_star = float(d["kappa_star_a_star"])
        start = time.time()
        meta = build_table(system, str(OUT / recombination_table_name(system)), kappa_a_star)
        print(f"{system.name} ({time.time() - start:.0f} s): {meta}", flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
