"""Figure: the three models over a map of (a, T) for a < 0 (docs/model-comparison.png).

Left: L3 against |a| at three temperatures for "threshold", "capped" (an approximation)
and "zero-range". Right: log10 of capped / zero-range over (|a|, T). 133Cs,
a_- = -1000 a0, eta_- = 0.05 (an invented parameter set).

Run: python benchmarks/model_comparison.py
"""

import os
import warnings

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

import lossfit as lf  # noqa: E402

warnings.simplefilter("ignore", lf.errors.ValidityWarning)
CS = lf.species("133Cs")
EF = lf.Efimov(a_minus=-1000.0, eta_minus=0.05)
OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "docs", "model-comparison.png")


def main():
    fig, (ax, bx) = plt.subplots(1, 2, figsize=(11, 4.2), layout="constrained")
    a = -np.geomspace(200.0, 2e5, 300)
    ax.loglog(-a, lf.l3_threshold(a, species=CS, efimov=EF), ":", color="k", label="threshold (any T)")
    for t, c in zip((10.0, 100.0, 1000.0), ("C0", "C1", "C2")):
        for model, ls in (("capped", "--"), ("zero-range", "-")):
            ax.loglog(-a, lf.l3(a, t, species=CS, efimov=EF, model=model, rtol=1e-7), ls, color=c,
                      label=f"{model}, {t:g} nK")
    ax.set_xlabel(r"$|a|$ ($a_0$), $a<0$")
    ax.set_ylabel(r"$L_3$ (cm$^6$/s)")
    ax.set_ylim(1e-26, 1e-17)
    ax.legend(fontsize=7)
    ax.set_title(r"$^{133}$Cs, $a_-=-1000\,a_0$, $\eta=0.05$ (capped is an approximation)", fontsize=9)
    aa = -np.geomspace(200.0, 1e5, 120)
    tt = np.geomspace(1.0, 3000.0, 90)
    A, T = np.meshgrid(aa, tt)
    ratio = (lf.l3(A, T, species=CS, efimov=EF, model="capped", rtol=1e-7)
             / lf.l3(A, T, species=CS, efimov=EF, model="zero-range", rtol=1e-7))
    im = bx.pcolormesh(-aa, tt, np.log10(ratio), cmap="RdBu_r", vmin=-1.5, vmax=1.5, shading="auto")
    bx.set_xscale("log")
    bx.set_yscale("log")
    bx.set_xlabel(r"$|a|$ ($a_0$), $a<0$")
    bx.set_ylabel("T (nK)")
    bx.set_title("log10( capped / zero-range )", fontsize=9)
    fig.colorbar(im, ax=bx)
    fig.savefig(OUT, dpi=130)
    print(f"wrote {os.path.abspath(OUT)}; capped/zero-range ranges {ratio.min():.3g} .. {ratio.max():.3g}")


if __name__ == "__main__":
    main()
