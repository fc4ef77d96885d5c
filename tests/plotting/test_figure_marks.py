"""What the spectrum and decay-curve figures mark, checked on the drawn artists:

* the fitted a_-, a*, a_+ at their posterior medians with the 68 % interval shaded, on
  the panels whose data show them (tied features included);
* points outside the validity range drawn open, points left out by ``exclude`` as open
  squares, exactly where the result's findings put them, each with a legend entry;
* plain tick labels on the log |a| axis (500, 1000, 2000; 10^n on long axes);
* decay curves: the model drawn is the number the likelihood compares the data with
  (N + 2 N_D for atom curves at a > 0 that count atoms in shallow dimers), and the titles
  give the fitted temperature with the measured one in brackets.

Results come without sampling (tests/plotting/conftest.py); figures use few posterior
draws.
"""

import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.colors import same_color, to_hex
from matplotlib.text import Text

import lossfit as lf
from lossfit.constants import UNIVERSAL_A_STAR_OVER_A_MINUS
from lossfit.inference.curve_fits import fit_curves_individually, spectrum_from_curves
from lossfit.inference.global_fit import prepare_curves
from lossfit.inference.posterior import make_result
from lossfit.plotting import curves_plot, efimov_spectrum_plot, spectrum_plot
from lossfit.plotting._axes import temperature_label, tidy_log_axis
from lossfit.simulate import demo_spectra, invented_campaign

FAST = dict(draws=20, points=30, seed=1)


@pytest.fixture(scope="module")
def demo():
    return demo_spectra()


@pytest.fixture(scope="module")
def free_result(demo, synthetic_result):
    spectra, truth = demo
    return synthetic_result([s for s in spectra if s.kind == "l3"], ["a_minus", "eta_minus"],
                            [truth["a_minus"], truth["eta_minus"]], [0.03, 0.15])


def _span(patch):
    """(x0, x1) of an axvspan in data coordinates (a Rectangle or, before matplotlib 3.9, a Polygon)."""
    xs = patch.get_patch_transform().transform(patch.get_path().vertices)[:, 0]
    return float(xs.min()), float(xs.max())


def _feature_marks(ax):
    """{symbol: (x of the dotted median line, shaded span)} of the features marked on ``ax``."""
    texts = {t.get_text(): t.get_position()[0] for t in ax.texts}
    lines = [ln for ln in ax.lines if ln.get_linestyle() == ":"]
    out = {}
    for symbol, x in texts.items():
        line = [ln for ln in lines if np.allclose(ln.get_xdata(), x)]
        span = [_span(p) for p in ax.patches if _span(p)[0] <= x <= _span(p)[1]]
        out[symbol] = (float(line[0].get_xdata()[0]), span[0])
    return out


def _markers(ax, marker, face):
    """Sorted x of every point drawn with ``marker`` and face colour ``face``."""
    xs = [ln.get_xdata() for ln in ax.lines if ln.get_marker() == marker and same_color(ln.get_markerfacecolor(), face)]
    return sorted(float(x) for x in np.concatenate(xs)) if xs else []


def _legend(ax):
    return [t.get_text() for t in ax.get_legend().get_texts()]


def test_log_axis_labels_are_plain_numbers():
    fig, ax = plt.subplots()
    ax.set_xscale("log")
    ax.set_xlim(300.0, 4000.0)
    tidy_log_axis(ax.xaxis)
    fig.canvas.draw()
    major, minor = ax.xaxis.get_major_formatter(), ax.xaxis.get_minor_formatter()
    assert (major(1000.0), minor(500.0), minor(2000.0)) == ("1000", "500", "2000")
    shown = [t.get_text() for t in ax.get_xticklabels(which="both") if t.get_text()]
    assert shown and not any("times" in t or "^" in t for t in shown)
    # a long axis labels the decades only, as 10^n, and leaves the 2x and 5x ticks bare
    ax.set_xlim(100.0, 1e6)
    assert (major(1e3), minor(2e3), minor(5e4)) == ("$10^{3}$", "", "")
    # below one: as many decimals as the tick needs
    ax.set_xlim(0.1, 3.0)
    assert (minor(0.5), major(1.0), minor(2.0)) == ("0.5", "1", "2")
    plt.close(fig)


def test_spectrum_marks_the_fitted_a_minus_and_open_points_outside_validity(free_result):
    fig = spectrum_plot(free_result, **FAST)
    ax = fig.axes[0]
    med, lo, hi = free_result.interval("a_minus")
    marks = _feature_marks(ax)
    assert list(marks) == ["$a_-$"]
    x, span = marks["$a_-$"]
    assert x == pytest.approx(abs(med)) and span == pytest.approx((abs(hi), abs(lo)))
    assert any(t.startswith("$a_- = -9") and t.endswith("(68 %)") for t in _legend(ax))
    # the demo's lowest |a| (450 a0) lies below 5 r_vdW = 505 a0 at each temperature: those
    # three points, and only they, are drawn open
    outside = sorted(abs(p["a"]) for p in free_result.outside_validity if p["outside_range"])
    assert outside == [450.0, 450.0, 450.0]
    assert _markers(ax, "o", "white") == outside
    filled = [x for ln in ax.lines if ln.get_marker() == "o" and not same_color(ln.get_markerfacecolor(), "white")
              for x in ln.get_xdata()]
    assert len(filled) == sum(len(s) for s in free_result.likelihood.spectra) - 3 and 450.0 not in filled
    assert any(t.startswith("outside validity") for t in _legend(ax))
    # the symbol sits above the frame, not on the data
    assert ax.texts[0].get_position()[1] > 1.0
    plt.close(fig)


def test_points_left_out_by_exclude_are_drawn_as_open_squares(demo, synthetic_result):
    spectra, truth = demo
    result = synthetic_result([s for s in spectra if s.kind == "l3"], ["a_minus", "eta_minus"],
                              [truth["a_minus"], truth["eta_minus"]], [0.03, 0.15], exclude="outside-validity")
    assert [(p["a"], p["temperature_nK"]) for p in result.excluded] == [(-450.0, 15.0), (-450.0, 60.0),
                                                                          (-450.0, 250.0)]
    fig = spectrum_plot(result, **FAST)
    ax = fig.axes[0]
    assert _markers(ax, "s", "none") == [450.0, 450.0, 450.0]
    assert _markers(ax, "o", "white") == []                  # nothing outside the range was fitted
    legend = _legend(ax)
    assert "outside validity, excluded from the fit" in legend
    assert not any(t.startswith("outside validity (") for t in legend)
    # each square in its temperature's colour
    colours = {ln.get_label(): to_hex(ln.get_color()) for ln in ax.lines if ln.get_label().endswith("nK")}
    squares = [to_hex(ln.get_markeredgecolor()) for ln in ax.lines if ln.get_marker() == "s"]
    assert sorted(squares) == sorted(colours[k] for k in ("15 nK", "60 nK", "250 nK"))
    plt.close(fig)


def test_tied_features_are_marked_on_the_panels_that_show_them(demo, synthetic_result):
    spectra, _ = demo
    result = synthetic_result(spectra, ["a_minus", "eta"], [-920.0, 0.08], [0.03, 0.15], tie="universal")
    fig = spectrum_plot(result, **FAST)
    l3_panel, beta_panel = fig.axes[:2]
    assert list(_feature_marks(l3_panel)) == ["$a_-$"]
    assert list(_feature_marks(beta_panel)) == ["$a_*$"]
    # the universal tie: a* = a_- x (kappa* a*_0 lambda)/(kappa* a_-) exactly (zero-range
    # theory, Braaten & Hammer, Phys. Rep. 428, 259 (2006); lossfit.constants), so the marked
    # a* interval is a_-'s interval scaled by that ratio
    med, lo, hi = result.interval("a_minus")
    x, span = _feature_marks(beta_panel)["$a_*$"]
    ratio = UNIVERSAL_A_STAR_OVER_A_MINUS
    assert x == pytest.approx(med * ratio, rel=1e-9)
    assert span == pytest.approx(sorted((lo * ratio, hi * ratio)), rel=1e-9)
    plt.close(fig)
    # the Efimov spectrum draws the tied features with their intervals as well
    fig = efimov_spectrum_plot(result)
    assert len(fig.axes[0].patches) == 3
    plt.close(fig)


@pytest.fixture(scope="module")
def global_result():
    """A global fit of two a < 0 and two a > 0 (400 and 5000 a0) atom curves at 80 nK
    (invented campaign; the a > 0 curves run the explicit dimer kinetics and count atoms in
    dimers), with a synthetic chain around the truth."""
    scenario = {"temperatures_nK": [80.0], "positive_a_range_a0": (400.0, 5000.0)}
    curves, resonance, truth = invented_campaign(3, n_fields=2, positive_fields=2, scenario=scenario)
    space, likelihood, _ = prepare_curves(curves, species="133Cs", free=["a_minus", "eta"], tie="universal",
                                          resonance=resonance)
    chain = np.log([abs(truth["a_minus"]), truth["eta_minus"]]) + \
        np.array([0.01, 0.05]) * np.random.default_rng(3).standard_normal((40, 8, 2))
    return make_result(space, likelihood, chain, np.zeros((40, 8)), np.full(8, 0.4), burn=10)


def test_curves_draw_what_the_likelihood_compares_with(global_result):
    lik = global_result.likelihood
    assert lik.explicit.tolist() == [False, False, True, True]
    assert all(c.counts_dimers for c in lik.curves)
    # the likelihood's model of every datum at the posterior medians, the nuisances after
    # its chord steps (CurvesLikelihood.nuisances)
    values = global_result.median_values()
    tables = lik.tables(global_result.efimov(), values)
    x = lik.x_ref
    for _ in range(max(lik.inner_steps, 1)):
        r, _ = lik.residuals(x, tables, 1.0)
        x = lik._chord_step(x, r)
    _, solved = lik.residuals(x, tables, 1.0)
    fig = curves_plot(result=global_result, ncols=2)
    offsets = np.cumsum([0] + [len(c) for c in lik.curves])
    trapped_dimers = []          # largest |counted - free atoms| per curve, in error bars
    for j, c in enumerate(lik.curves):
        data_ax, resid_ax = fig.axes[2 * j], fig.axes[2 * j + 1]
        drawn = c.atoms - resid_ax.lines[0].get_ydata() * c.atoms_err
        part = slice(offsets[j], offsets[j + 1])
        # (two integrators of the same equations at rtol 1e-8: equal to well below an error bar)
        assert np.max(np.abs(drawn - solved.counted[part]) / c.atoms_err) < 1e-3
        trapped_dimers.append(np.max(np.abs(solved.counted[part] - solved.atoms[part]) / c.atoms_err))
        # the title: the fitted temperature (time average of the fitted T(t)) and, in brackets,
        # the measured one
        fitted = float(np.mean(solved.temperature[part]))
        second = data_ax.get_title().split("\n")[1]
        assert second == (rf"$\langle T\rangle$ {temperature_label(fitted)} fitted "
                          rf"({temperature_label(float(np.mean(c.temperature)))} measured)")
    # a < 0 and the deeply bound dimer at 400 a0 hold no trapped dimers; at 5000 a0 the
    # free atoms alone would sit several error bars off, so the check tells the two apart
    assert max(trapped_dimers[:3]) < 1e-6 and trapped_dimers[3] > 3.0
    plt.close(fig)


def test_curve_titles_give_the_temperature_of_the_derived_spectrum():
    curves, resonance, _ = invented_campaign(5, n_fields=2, scenario={"temperatures_nK": [80.0]})
    fits = fit_curves_individually(curves, species="133Cs", resonance=resonance)
    derived = spectrum_from_curves(curves, species="133Cs", resonance=resonance, fits=fits)[0]
    fig = curves_plot(fits=fits, species="133Cs", ncols=2)
    titles = [ax.get_title() for ax in fig.axes[::2]]
    for title, c, t in zip(titles, curves, derived.temperature):
        label, line = title.split("\n")
        assert label == c.label                                    # the lab's label stays
        assert line.startswith(rf"$\langle T\rangle$ {temperature_label(t)} fitted (")
    # the invented campaign's nominal 80 nK heats to a higher fitted average
    assert all(t > 80.0 for t in derived.temperature)
    assert not any(isinstance(t, Text) and "5×10" in t.get_text() for t in fig.findobj(Text))
    plt.close(fig)


def test_a_single_temperature_is_bracketed_as_the_initial_measurement():
    curve = lf.DecayCurve(t=np.linspace(0.0, 0.5, 8), atoms=1e5 * np.exp(-np.linspace(0.0, 0.5, 8)),
                          atoms_err=np.full(8, 2e3), temperature=150.0, temperature_err=5.0, a=-1500.0,
                          trap_hz=(60.0, 60.0, 12.0), label="run 7")
    fit = fit_curves_individually([curve], species="133Cs")[0]
    fig = curves_plot(fits=[fit], species="133Cs")
    assert fig.axes[0].get_title() == (f"run 7\n$\\langle T\\rangle$ {temperature_label(fit.temperature)} fitted "
                                       "($T_0$ 150 nK measured)")
    plt.close(fig)
