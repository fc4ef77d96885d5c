"""Publication figures: corner plots and loss spectra with posterior bands."""

__all__ = ["corner_plot", "spectrum_plot", "posterior_bands", "save_figure"]

import os

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..errors import LossfitValueError
from ..inference.likelihood import RateBlock
from ..inference.parameters import UNITS
from ._axes import FEATURE_COLOURS, SYMBOLS, feature_intervals, grid_in_inches, temperature_label, tidy_log_axis

_UNIT_LABELS = {"a0": r"$a_0$", "G": "G"}


def _label(name):
    unit = UNITS.get(name, "")
    return SYMBOLS.get(name, name) + (f" ({_UNIT_LABELS.get(unit, unit)})" if unit else "")


def _title(name, interval):
    """``name = median^{+hi}_{-lo} unit`` from (median, lo68, hi68), with the errors to two
    significant digits and the median to the same decimal place (no exponent notation for
    lab-sized numbers)."""
    q50, q16, q84 = interval
    lo, hi = q50 - q16, q84 - q50
    smallest = min(v for v in (lo, hi, abs(q50)) if v > 0) if any(v > 0 for v in (lo, hi, abs(q50))) else 1.0
    decimals = max(0, 1 - int(np.floor(np.log10(smallest))))
    body = f"{q50:.{decimals}f}^{{+{hi:.{decimals}f}}}_{{-{lo:.{decimals}f}}}"
    symbol = SYMBOLS.get(name, name)
    if symbol.startswith("$"):
        symbol = symbol.strip("$")
    else:
        symbol = r"\mathrm{" + symbol.replace(" ", r"\ ") + "}"
    unit = UNITS.get(name, "")
    unit = {"a0": r"\,a_0", "G": r"\,\mathrm{G}"}.get(unit, "")
    return f"${symbol} = {body}{unit}$"


def corner_plot(result, *, truths=None, fig=None, **corner_kwargs):
    """Corner plot of the free parameters (physical units) with optional true values.

    Parameters
    ----------
    result : FitResult
    truths : dict name -> float, optional
        Values drawn as lines (e.g. the truth of a synthetic scenario).
    fig : matplotlib Figure, optional
    **corner_kwargs
        Passed to :func:`corner.corner`.

    Returns
    -------
    matplotlib.figure.Figure
    """
    # corner imports ArviZ whenever it is installed (0.8 s): only this figure needs corner
    import corner

    x = np.column_stack([result.samples[n] for n in result.names])
    kw = dict(labels=[_label(n) for n in result.names], quantiles=[0.16, 0.5, 0.84],
              show_titles=False, levels=(0.68, 0.95), plot_datapoints=False, labelpad=0.05)
    if truths is not None:
        kw["truths"] = [truths.get(n) for n in result.names]
    kw.update(corner_kwargs)
    fig = corner.corner(x, fig=fig, **kw)
    n = len(result.names)
    diagonal = [fig.axes[i * (n + 1)] for i in range(n)]
    for ax, name in zip(diagonal, result.names):
        ax.set_title(_title(name, result.interval(name)), fontsize=10)
    handles = [Line2D([], [], color="k", ls="--", lw=1, label="16, 50, 84 % quantiles")]
    if truths is not None:
        handles.append(Line2D([], [], color=kw.get("truth_color", "#4682b4"), lw=1.5, label="true values"))
    fig.legend(handles=handles, loc="upper right", fontsize=10, frameon=False)
    return fig


def posterior_bands(result, a, temperature, kind, *, draws=200, seed=0, channel=None, trap_depth=None):
    """Median and 68 %/95 % bands of the model, as the data would report it.

    Parameters
    ----------
    result : FitResult
    a : array_like
        Scattering lengths in a0.
    temperature : float
        Temperature in nK.
    kind : {"l3", "beta"}
    draws : int
        Number of posterior draws.
    channel : str, optional
        Loss channel of the curve (None: the model's default, as for the fit).
    trap_depth : float, optional
        Atom trap depth U/k_B in nK for the observed L3 (None: 10 k_B T).

    Returns
    -------
    dict with keys "median", "lo68", "hi68", "lo95", "hi95" (arrays, cm^6/s or cm^3/s)
    """
    if kind not in ("l3", "beta"):
        raise LossfitValueError("kind", f"must be 'l3' or 'beta', got {kind!r}")
    a = np.asarray(a, dtype=float).ravel()
    # the curve's points are fixed: prepare them once, then one pass per draw
    block = RateBlock(kind, a, np.full(a.size, float(temperature)), result.species, result.model,
                      eta_min=result.space.eta_floor(), channel=channel,
                      trap_depth=None if trap_depth is None else np.full(a.size, float(trap_depth)))
    curves = [block.predict(ef) / scale ** block.density_power for ef, scale in result.draws(draws, seed=seed)]
    q = np.percentile(np.array(curves), [2.5, 16, 50, 84, 97.5], axis=0)
    return dict(zip(("lo95", "lo68", "median", "hi68", "hi95"), q))


def _panels(spectra):
    """(kind, side, title, members) per panel; members are (spectrum index, spectrum, mask of
    its points on the panel's side)."""
    panels = []
    for key, title in ((("l3", -1), "three-body loss, a < 0"), (("l3", 1), "three-body loss, a > 0"),
                       (("beta", 1), "atom-dimer relaxation, a > 0")):
        kind, sign = key
        members = [(i, s, s.a * sign > 0) for i, s in enumerate(spectra)
                   if s.kind == kind and (s.a * sign > 0).any()]
        if members:
            panels.append((kind, sign, title, members))
    return panels


# The features each panel marks: those the panel's kind of data shows. The observed L3 at
# a > 0 depends on a* too (trapped dimers relax with an atom, docs/conventions.md).
_PANEL_FEATURES = {("l3", -1): ("a_minus",), ("l3", 1): ("a_star", "a_plus"), ("beta", 1): ("a_star",)}

# marker styles of points outside the validity range: fitted anyway, or left out of the fit
_OUTSIDE_STYLE = dict(fmt="o", ms=4.5, mfc="white", mew=1.1, elinewidth=0.8, capsize=2)
_EXCLUDED_STYLE = dict(fmt="s", ms=4.5, mfc="none", mew=1.0, elinewidth=0.6, capsize=1.5, alpha=0.75)
_OUTSIDE_TEXT = r"outside validity ($|a|<5\,r_\mathrm{vdW}$ or $k_BT>0.1\,E_\mathrm{vdW}$)"


def _legend_marker(style, label):
    """A legend entry in neutral grey for points drawn with an errorbar ``style``."""
    return Line2D([], [], marker=style["fmt"], ms=style["ms"], mfc=style["mfc"], mew=style["mew"], mec="0.3",
                  ls="none", label=label)


def _channel_at(result, spectra, kind, temperature):
    """(channel, mean trap depth in nK or None) of the first fitted spectrum of ``kind``
    with points at ``temperature``, as its fit used them."""
    channels = {c["spectrum"]: c["channel"] for c in getattr(result, "loss_channels", [])}
    for i, s in enumerate(spectra):
        sel = s.temperature == temperature
        if s.kind == kind and sel.any():
            depth = None if s.trap_depth is None else float(np.mean(s.trap_depth[sel]))
            return channels.get(i, s.channel), depth
    return None, None


def _outside_masks(result, spectra):
    """Per fitted spectrum, the points the result flags as outside the validity range
    (``outside_validity`` entries with ``outside_range``)."""
    masks = [np.zeros(len(s), dtype=bool) for s in spectra]
    for finding in getattr(result, "outside_validity", []):
        if finding.get("outside_range"):
            masks[finding["spectrum"]][finding["point"]] = True
    return masks


def _mark_features(ax, result, kind, sign):
    """Dotted line at the posterior median and a shaded 68 % interval of every feature the
    fit determines that this panel's data show; legend handles of those drawn. The x range
    of the data stays (a feature outside it is not drawn)."""
    lo_x, hi_x = ax.get_xlim()
    handles = []
    for name, (med, lo, hi) in feature_intervals(result).items():
        if name not in _PANEL_FEATURES[(kind, sign)] or not lo_x < abs(med) < hi_x:
            continue
        colour = FEATURE_COLOURS[name]
        ax.axvspan(abs(lo), abs(hi), color=colour, alpha=0.18, lw=0, zorder=0)
        ax.axvline(abs(med), color=colour, lw=1.1, ls=":", zorder=1)
        # the symbol just above the frame, clear of the data (the title makes room for it)
        ax.text(abs(med), 1.005, SYMBOLS[name], color=colour, transform=ax.get_xaxis_transform(), ha="center",
                va="bottom", fontsize=10)
        handles.append(Patch(facecolor=colour, alpha=0.35, edgecolor=colour,
                             label=_title(name, (med, lo, hi)) + " (68 %)"))
    ax.set_xlim(lo_x, hi_x)
    return handles


def spectrum_plot(result, *, draws=200, points=160, seed=0, fig=None):
    """Data with error bars, the posterior median model and 68/95 % bands on log axes.

    One panel per side of the resonance and process present in the data; one colour
    per temperature. The model curves include the fitted density-calibration factor so
    that they compare with the data as reported. The Efimov features the fit determines
    (a_- on the a < 0 L3 panel, a* and a_+ on the a > 0 L3 panel, a* on the beta panel)
    are marked at their posterior medians with shaded 68 % intervals. Points outside the
    zero-range validity range (``result.outside_validity`` with ``outside_range``) are
    drawn open; points the fit left out (``result.excluded``) as open squares, grey
    where no fitted temperature matches theirs.

    Parameters
    ----------
    result : FitResult
    draws : int
        Posterior draws per band.
    points : int
        Scattering lengths per band.
    seed : int
        Seed of the choice of draws.
    fig : matplotlib.figure.Figure, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    spectra = result.likelihood.spectra
    panels = _panels(spectra)
    outside = _outside_masks(result, spectra)
    excluded = getattr(result, "excluded", [])
    if fig is None:
        fig = plt.figure(figsize=(5.2 * len(panels), 4.2))
    # titles with the feature marks above, y labels left (fixed margins: grid_in_inches)
    grid = grid_in_inches(fig, 1, len(panels), left=0.95, right=0.15, bottom=0.6, top=0.55, wspace=0.95)
    axes = [fig.add_subplot(grid[0, j]) for j in range(len(panels))]
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    for ax, (kind, sign, title, members) in zip(axes, panels):
        temps = sorted({float(t) for _, s, m in members for t in s.temperature[m]})
        lo = min(np.abs(s.a[m]).min() for _, s, m in members)
        hi = max(np.abs(s.a[m]).max() for _, s, m in members)
        grid = np.geomspace(lo / 1.15, hi * 1.15, points)
        colour_of = {t: colours[i % len(colours)] for i, t in enumerate(temps)}
        drawn_outside = False
        for t in temps:
            c = colour_of[t]
            channel, depth = _channel_at(result, spectra, kind, t)
            band = posterior_bands(result, sign * grid, t, kind, draws=draws, seed=seed, channel=channel,
                                   trap_depth=depth)
            ax.fill_between(grid, band["lo95"], band["hi95"], color=c, alpha=0.15, lw=0)
            ax.fill_between(grid, band["lo68"], band["hi68"], color=c, alpha=0.3, lw=0)
            ax.plot(grid, band["median"], color=c, lw=1.5, label=temperature_label(t))
            for i, s, m in members:
                at_t = m & (s.temperature == t)
                for sel, style in ((at_t & ~outside[i], dict(fmt="o", ms=4, mec="k", mew=0.4, elinewidth=0.8,
                                                             capsize=2)),
                                   (at_t & outside[i], dict(_OUTSIDE_STYLE, mec=c))):
                    if sel.any():
                        ax.errorbar(np.abs(s.a[sel]), s.value[sel], yerr=s.error[sel], color=c, **style)
                drawn_outside |= bool((at_t & outside[i]).any())
        mine = [p for p in excluded if p["kind"] == kind and p["a"] * sign > 0]
        for p in mine:
            c = colour_of.get(p["temperature_nK"], "0.45")
            ax.errorbar([abs(p["a"])], [p["value"]], yerr=[p["error"]], color=c, mec=c, **_EXCLUDED_STYLE)
        ax.set_xscale("log")
        ax.set_yscale("log")
        tidy_log_axis(ax.xaxis)
        ax.set_xlabel(r"$|a|$ ($a_0$)" + (", $a<0$" if sign < 0 else ", $a>0$"))
        ax.set_ylabel(r"$L_3$ (cm$^6$/s)" if kind == "l3" else r"$\beta$ (cm$^3$/s)")
        handles, _ = ax.get_legend_handles_labels()
        features = _mark_features(ax, result, kind, sign)
        used = sorted({_channel_at(result, spectra, kind, t)[0] for t in temps} - {None})
        ax.set_title(title + (f" ({', '.join(used)})" if kind == "l3" and sign > 0 and used else ""), fontsize=10,
                     pad=16 if features else 6)
        handles += features
        if drawn_outside:
            handles.append(_legend_marker(_OUTSIDE_STYLE, _OUTSIDE_TEXT))
        if mine:
            handles.append(_legend_marker(_EXCLUDED_STYLE, "outside validity, excluded from the fit"))
        ax.legend(handles=handles, fontsize=7, title="median, 68/95 % bands", title_fontsize=7)
    fig.suptitle(f"model: {result.model.label}", fontsize=8)
    return fig


def save_figure(fig, path, *, dpi=150):
    """Save a figure as PNG or PDF (by extension), creating the folder if needed."""
    path = os.fspath(path)
    ext = os.path.splitext(path)[1].lower()
    if ext not in (".png", ".pdf"):
        raise LossfitValueError("path", f"must end in .png or .pdf, got {path!r}")
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    fig.savefig(path, dpi=dpi)
    return path
