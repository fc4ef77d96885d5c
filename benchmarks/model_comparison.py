"""Figure: the three models over a map of (a, T) (docs/model-comparison.png).

Top row a < 0, bottom row a > 0. Left: L3 against |a| at three temperatures for
"threshold", "capped" (an approximation) and "zero-range". At a > 0 the zero-range model
is drawn in its default channel, "observed" (what a trapped gas with U = 10 k_B T loses,
docs/conventions.md), and in the formal "total" (shallow + deep dimers) and "deep"
channels. Right: log10 of capped / zero-range over (|a|, T), like with like: the capped
law approximates the total rate, so at a > 0 it is compared with "total". The line
k_B T = 240 E_b marks where the shallow-dimer J >= 1 sum passes from the three-body
table's solves to its high-energy extension (docs/stm.md section 7c).
133Cs, a_- = -1000 a0, eta = 0.05, a > 0 features tied universally (an invented
parameter set).

Run: python benchmarks/model_comparison.py
"""

import os
import warnings

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import scipy.constants as sc  # noqa: E402

import lossfit as lf  # noqa: E402

warnings.simplefilter("ignore", lf.errors.ValidityWarning)
CS = lf.species("133Cs")
EF = lf.Efimov.universal(-1000.0, 0.05)
OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "docs", "model-comparison.png")


def _ratio_map(fig, ax, a, t, ratio, xlabel, title):
    im = ax.pcolormesh(a, t, np.log10(ratio), cmap="RdBu_r", vmin=-1.5, vmax=1.5, shading="auto")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel(xlabel)
    ax.set_ylabel("T (nK)")
    ax.set_title(title, fontsize=9)
    fig.colorbar(im, ax=ax)


def main():
    fig, ((ax, bx), (cx, dx)) = plt.subplots(2, 2, figsize=(11, 8.4), layout="constrained")
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
    _ratio_map(fig, bx, -aa, tt, ratio, r"$|a|$ ($a_0$), $a<0$", "log10( capped / zero-range )")
    print(f"a < 0: capped/zero-range ranges {ratio.min():.3g} .. {ratio.max():.3g}")

    # a > 0: shallow + deep everywhere; the deep channel alone, which is continuous through unitarity
    from lossfit.thermal import U_MAX
    from lossfit.universal.tables import load_recombination_table
    t_solved = load_recombination_table().energy_max / U_MAX ** 2        # k_B T / E_b

    def binding_nk(a):
        a_m = a * sc.physical_constants["Bohr radius"][0]
        return sc.hbar ** 2 / (CS.mass * a_m ** 2 * sc.k) * 1e9

    a = np.geomspace(200.0, 2e5, 300)
    cx.loglog(a, lf.l3_threshold(a, species=CS, efimov=EF), ":", color="k", label="threshold (any T)")
    for t, c in zip((10.0, 100.0, 1000.0), ("C0", "C1", "C2")):
        cx.loglog(a, lf.l3(a, t, species=CS, efimov=EF, model="capped", rtol=1e-7), "--", color=c,
                  label=f"capped, {t:g} nK")
        cx.loglog(a, lf.l3(a, t, species=CS, efimov=EF, model="zero-range"), "-", color=c, lw=2,
                  label=f"zero-range observed, {t:g} nK")
        cx.loglog(a, lf.l3(a, t, species=CS, efimov=EF, model="zero-range", channel="total", rtol=1e-7), "-",
                  color=c, lw=0.7, label=f"zero-range total, {t:g} nK")
        cx.loglog(a, lf.l3(a, t, species=CS, efimov=EF, model="zero-range", channel="deep", rtol=1e-7), "-.",
                  color=c, lw=0.9, label=f"zero-range deep only, {t:g} nK")
        # the a < 0 value at |a| = 2e5 a0: observed and deep loss are continuous through unitarity
        cx.plot(a[-1], lf.l3(-a[-1], t, species=CS, efimov=EF, model="zero-range"), "o", color=c, ms=4)
    cx.axvline(EF.a_plus, color="0.6", lw=0.8)
    cx.set_xlabel(r"$a$ ($a_0$), $a>0$ (grey: $a_+$; dots: $L_3$ at $a=-2\times10^5\,a_0$)")
    cx.set_ylabel(r"$L_3$ (cm$^6$/s)")
    cx.set_ylim(1e-28, 1e-17)
    cx.legend(fontsize=6, ncol=2)
    aa = np.geomspace(200.0, 2e5, 130)
    A, T = np.meshgrid(aa, tt)
    ratio = (lf.l3(A, T, species=CS, efimov=EF, model="capped", rtol=1e-7)
             / lf.l3(A, T, species=CS, efimov=EF, model="zero-range", channel="total", rtol=1e-7))
    _ratio_map(fig, dx, aa, tt, ratio, r"$a$ ($a_0$), $a>0$",
               r"log10( capped / zero-range total ); line: $k_BT = 240\,E_b$ (solved J sum below)")
    dx.contour(aa, tt, (T <= t_solved * binding_nk(A)).astype(float), levels=[0.5], colors="k",
               linewidths=0.8)
    fig.savefig(OUT, dpi=130)
    print(f"a > 0: capped/zero-range ranges {ratio.min():.3g} .. {ratio.max():.3g}; wrote {os.path.abspath(OUT)}")


if __name__ == "__main__":
    main()
