"""The figures against small committed reference images (matplotlib's image comparison).

Each figure is drawn from fixed inputs: the demo's invented spectra with a synthetic,
seeded chain (no sampling), and least-squares fits of invented decay curves. Text is
removed before the pixels are compared (font rasterisation differs between machines and
matplotlib releases; matplotlib's own tests do the same with remove_ticks_and_titles,
common practice, no source) and checked on its own against what it must say.

To accept a deliberate change of a figure: LOSSFIT_UPDATE_FIGURES=1 pytest tests/plotting,
then look at the new images in tests/plotting/reference/ before committing them.
"""

import os

import matplotlib.pyplot as plt
import pytest
from matplotlib.testing.compare import compare_images
from matplotlib.testing.decorators import remove_ticks_and_titles
from matplotlib.text import Text

import lossfit as lf
from lossfit.inference.curve_fits import fit_curves_individually, spectrum_from_curves
from lossfit.plotting import corner_plot, curves_plot, derived_spectrum_plot, efimov_spectrum_plot, spectrum_plot
from lossfit.simulate import demo_spectra, invented_campaign

REFERENCE = os.path.join(os.path.dirname(os.path.abspath(__file__)), "reference")
UPDATE = os.environ.get("LOSSFIT_UPDATE_FIGURES") == "1"
# RMS difference of 0-255 pixel values; a moved band or marker gives > 5
TOLERANCE = 2.0


@pytest.fixture(scope="module")
def spectrum_result(synthetic_result):
    spectra, truth = demo_spectra()
    result = synthetic_result([s for s in spectra if s.kind == "l3"], ["a_minus", "eta_minus"],
                              [truth["a_minus"], truth["eta_minus"]], [0.03, 0.15])
    return result, truth


@pytest.fixture(scope="module")
def curve_fits():
    curves, resonance, _ = invented_campaign(5, n_fields=4)
    return fit_curves_individually(curves[:4], species="133Cs", resonance=resonance), curves[:4], resonance


def _check(fig, name, out_dir):
    """Compare ``fig`` without its text with tests/plotting/reference/<name>.png."""
    remove_ticks_and_titles(fig)
    for ax in fig.axes:
        if ax.get_legend() is not None:
            ax.get_legend().remove()
    for text in fig.findobj(Text):            # labels, colour-bar labels, annotations
        text.set_visible(False)
    expected = os.path.join(REFERENCE, name + ".png")
    if UPDATE:
        os.makedirs(REFERENCE, exist_ok=True)
        fig.savefig(expected, dpi=40)
        plt.close(fig)
        pytest.skip(f"wrote {expected}")
    actual = os.path.join(out_dir, name + ".png")      # the diff image lands beside it
    fig.savefig(actual, dpi=40)
    plt.close(fig)
    err = compare_images(expected, actual, tol=TOLERANCE)
    assert err is None, err


def test_spectrum_plot(spectrum_result, tmp_path):
    result, _ = spectrum_result
    fig = spectrum_plot(result, draws=30, points=40, seed=1)
    # the text it must carry: one panel a < 0 with a log scattering-length axis
    ax = fig.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    assert "a" in ax.get_xlabel() and "L" in ax.get_ylabel()
    assert len(ax.get_legend().get_texts()) >= 3          # one entry per temperature at least
    _check(fig, "spectrum_plot", tmp_path)


def test_corner_plot(spectrum_result, tmp_path):
    result, truth = spectrum_result
    fig = corner_plot(result, truths={"a_minus": truth["a_minus"], "eta_minus": truth["eta_minus"]})
    assert len(fig.axes) == 4
    # readable titles: typeset symbol and unit, no exponent notation; truths in a legend
    title = fig.axes[0].get_title()
    assert title.startswith("$a_- = -9") and r"\,a_0$" in title and "e+" not in title
    assert r"($a_0$)" in fig.axes[2].get_xlabel()
    assert "true values" in [t.get_text() for t in fig.legends[0].get_texts()]
    _check(fig, "corner_plot", tmp_path)


def test_curves_plot(curve_fits, tmp_path):
    fits, _, _ = curve_fits
    fig = curves_plot(fits=fits, species="133Cs", ncols=2)
    assert len(fig.axes) == 8                             # data and residuals per curve
    _check(fig, "curves_plot", tmp_path)


def test_derived_spectrum_plot(curve_fits, tmp_path):
    fits, curves, resonance = curve_fits
    fig = derived_spectrum_plot(spectrum_from_curves(curves, species="133Cs", resonance=resonance, fits=fits))
    assert fig.axes[0].get_xscale() == "log"
    _check(fig, "derived_spectrum_plot", tmp_path)


def test_efimov_spectrum_plot(spectrum_result, tmp_path):
    result, _ = spectrum_result
    fig = efimov_spectrum_plot(lf.Efimov.universal(-900.0, 0.1), branches=3)
    ax = fig.axes[0]
    assert "|^{-1/2}" in ax.get_xlabel() and "^{1/4}" in ax.get_ylabel()      # the scaling is stated
    assert [t.get_text() for t in ax.texts] == ["$a_-$", "$a_*$", "$a_+$"]
    _check(fig, "efimov_spectrum_plot", tmp_path)
    # from a fit: the features carry their 68 % bands
    fig = efimov_spectrum_plot(result)
    assert len(fig.axes[0].patches) == 1                   # a_- only was fitted
    plt.close(fig)
