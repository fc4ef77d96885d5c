"""The universality chart: a fitted a_-/r_vdW among the published measurements.

Published a_- of identical bosons (:func:`lossfit.published_results`, or rows of the
same columns) by species, in units of lossfit's r_vdW of the species, with the van der
Waals universality value a_- = -9.73 r_vdW (Wang, D'Incao, Esry & Greene, PRL 108,
263001 (2012); ``lossfit.constants.VDW_A_MINUS_OVER_RVDW``) drawn as a line inside a
band of relative half-width ``band``, and each fit's posterior median with its 68 % and
95 % intervals.
"""

__all__ = ["universality_plot"]

import math
import re

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..constants import VDW_A_MINUS_OVER_RVDW
from ..errors import LossfitValueError, is_real
from ..published import published_results
from ..species import species as lookup_species

# the project's palette for the published species (cycled), and the mark of a fit
_SPECIES_COLOURS = ("#1f5f8b", "#b5532f", "#4f7942", "#7a4f86", "#a07a1e", "#3c7a7a")
_PUBLISHED_MARKERS = ("D", "s", "^", "v", "p", "h")
_FIT_COLOUR = "#111111"
_BAND_COLOUR = "#cfd6de"


def _typeset(name):
    """``"133Cs"`` -> ``"$^{133}$Cs"``."""
    found = re.fullmatch(r"(\d+)([A-Za-z]+)", name)
    return f"$^{{{found.group(1)}}}${found.group(2)}" if found else name


def _is_frame(table):
    """True for a pandas DataFrame (duck-typed: pandas is optional)."""
    return hasattr(table, "columns") and hasattr(table, "to_dict") and hasattr(table, "iterrows")


def _as_rows(rows):
    """A list of dicts from a DataFrame, a list of dicts, or None (the published table)."""
    if rows is None:
        rows = published_results(as_frame=False)
    if _is_frame(rows):                               # a pandas DataFrame of the same columns
        rows = rows.to_dict("records")
    if not isinstance(rows, (list, tuple)) or not all(isinstance(r, dict) for r in rows):
        raise LossfitValueError("rows", "must be a table of published_results() columns (a DataFrame or a list "
                                        f"of dicts), got {type(rows).__name__}")
    out = []
    for i, r in enumerate(rows):
        try:
            sp = lookup_species(str(r["species"]))
            a, err = float(r["a_minus"]), float(r["a_minus_err"])
        except KeyError as exc:
            raise LossfitValueError("rows", f"row {i + 1} has no column {exc.args[0]!r}") from None
        if not (math.isfinite(a) and a < 0 and math.isfinite(err) and err >= 0):
            raise LossfitValueError("rows", f"row {i + 1}: a_minus must be negative and a_minus_err >= 0 (a0), "
                                            f"got {a!r} and {err!r}")
        out.append({"species": sp.name, "ratio": a / sp.r_vdw, "err": err / sp.r_vdw,
                    "citation": str(r.get("citation", ""))})
    return out


def _fit_points(source, label):
    """(label, species name, median, lo68, hi68, lo95, hi95) of a_-/r_vdW for each fit."""
    if source is None:
        return []
    if isinstance(source, dict):
        items = list(source.items())
    elif isinstance(source, (list, tuple)):
        items = [(None, s) for s in source]
    else:
        items = [(label, source)]
    points = []
    for i, (name, result) in enumerate(items):
        if not (hasattr(result, "summary") and hasattr(result, "species")):
            raise LossfitValueError("source", f"must be a fit result (lf.fit), a list or dict of them, or a table "
                                              f"of published rows, got {type(result).__name__}")
        rows = {r["name"]: r for r in result.summary()}
        if "a_minus/r_vdw" not in rows:
            raise LossfitValueError("source", "the fit has no a_minus (free, tied or fixed): nothing to place "
                                              "on the universality chart")
        r = rows["a_minus/r_vdw"]
        text = name if name is not None else ("this fit" if len(items) == 1 else f"fit {i + 1}")
        points.append((str(text), result.species.name, r["median"], r["lo68"], r["hi68"], r["lo95"], r["hi95"]))
    return points


def universality_plot(source=None, *, rows=None, label=None, band=0.15, ax=None):
    """a_-/r_vdW of published measurements by species, the van der Waals universality band,
    and fitted values with their 68 % and 95 % intervals.

    Parameters
    ----------
    source : FitResult, list or dict of FitResult, or table, optional
        The fit(s) to place on the chart (a dict labels them), or, instead of a fit, a
        table of published rows to draw (as ``rows``). A fit needs a_- (free, or tied
        universally); a_-/r_vdW uses the fit's species.
    rows : pandas.DataFrame or list of dict, optional
        Published rows with the columns of :func:`lossfit.published_results` (species,
        a_minus and a_minus_err in a0, citation); by default that table.
    label : str, optional
        Legend label of a single fit (default "this fit").
    band : float
        Relative half-width of the band drawn around a_- = -9.73 r_vdW (0.15: ±15 %,
        a guide to the eye for the spread of the measurements, not a theory uncertainty).
    ax : matplotlib.axes.Axes, optional
        Axes to draw into; a new figure otherwise.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if source is not None and (_is_frame(source) or (
            isinstance(source, (list, tuple)) and source and all(isinstance(s, dict) for s in source))):
        if rows is not None:
            raise LossfitValueError("rows", "give published rows either as source or as rows, not both")
        source, rows = None, source
    if not (is_real(band) and 0 <= band < 1):
        raise LossfitValueError("band", f"must be a fraction in [0, 1), got {band!r}")
    published = _as_rows(rows)
    fits = _fit_points(source, label)

    names = {r["species"] for r in published} | {f[1] for f in fits}
    order = sorted(names, key=lambda n: lookup_species(n).r_vdw)          # light to heavy (by r_vdW)
    slot = {n: i for i, n in enumerate(order)}
    if ax is None:
        fig, ax = plt.subplots(figsize=(6.4, 5.0))
    else:
        fig = ax.figure

    centre = VDW_A_MINUS_OVER_RVDW
    ax.axhspan(centre * (1 - band), centre * (1 + band), color=_BAND_COLOUR, lw=0, zorder=0)
    ax.axhline(centre, color="0.35", lw=1.0, ls="--", zorder=1)

    handles = [Patch(facecolor=_BAND_COLOUR, edgecolor="0.35", ls="--",
                     label=f"van der Waals universality $a_-={centre:g}\\,r_\\mathrm{{vdW}}$ "
                           f"(±{100 * band:g} %)")]
    for name in order:
        mine = [r for r in published if r["species"] == name]
        if not mine:
            continue
        k = slot[name]
        colour = _SPECIES_COLOURS[k % len(_SPECIES_COLOURS)]
        marker = _PUBLISHED_MARKERS[k % len(_PUBLISHED_MARKERS)]
        offsets = np.linspace(-0.22, 0.22, len(mine)) if len(mine) > 1 else np.zeros(1)
        ax.errorbar(k + offsets, [r["ratio"] for r in mine], yerr=[r["err"] for r in mine], fmt=marker, ms=5,
                    color=colour, mec="k", mew=0.4, elinewidth=0.9, capsize=2, zorder=3)
        handles.append(Line2D([], [], color=colour, marker=marker, mec="k", mew=0.4, ls="none",
                              label=f"published, {_typeset(name)} ({len(mine)})"))
    for j, (text, name, med, lo68, hi68, lo95, hi95) in enumerate(fits):
        x = slot[name] + 0.36 + 0.08 * j
        ax.vlines(x, lo95, hi95, color=_FIT_COLOUR, lw=1.0, zorder=4)
        ax.vlines(x, lo68, hi68, color=_FIT_COLOUR, lw=3.2, zorder=4)
        ax.plot([x], [med], marker="*", ms=12, color="#f2c14e", mec=_FIT_COLOUR, mew=0.8, ls="none", zorder=5)
        handles.append(Line2D([], [], color=_FIT_COLOUR, marker="*", ms=11, mfc="#f2c14e", mec=_FIT_COLOUR, lw=1.0,
                              label=f"{text}: {med:.2f} [{lo68:.2f}, {hi68:.2f}] (68 %, thick; 95 %, thin)"))

    ax.set_xticks(range(len(order)), [_typeset(n) for n in order])
    ax.set_xlim(-0.6, len(order) - 0.4)
    ax.set_ylabel(r"$a_-/r_\mathrm{vdW}$")
    ax.set_xlabel(r"species (ordered by $r_\mathrm{vdW}$)")
    ax.legend(handles=handles, fontsize=7.5, loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=2,
              frameon=False)
    ax.set_title("Efimov resonance positions and van der Waals universality", fontsize=10)
    fig.text(0.01, 0.005, "band: Wang, D'Incao, Esry & Greene, PRL 108, 263001 (2012); "
                          "published values: lf.published_results()", fontsize=6, color="0.35")
    fig.tight_layout(rect=(0, 0.03, 1, 1))
    return fig
