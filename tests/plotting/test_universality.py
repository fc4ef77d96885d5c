"""The universality chart against a committed reference image (text removed before the
pixels are compared, as in tests/plotting/test_figures.py), and what its text must say.

To accept a deliberate change: LOSSFIT_UPDATE_FIGURES=1 pytest tests/plotting, then look at
tests/plotting/reference/universality_plot.png before committing it.
"""

import os

import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.testing.compare import compare_images
from matplotlib.testing.decorators import remove_ticks_and_titles
from matplotlib.text import Text

import lossfit as lf
from lossfit.errors import LossfitValueError
from lossfit.plotting import universality_plot
from lossfit.simulate import demo_spectra

REFERENCE = os.path.join(os.path.dirname(os.path.abspath(__file__)), "reference")
UPDATE = os.environ.get("LOSSFIT_UPDATE_FIGURES") == "1"
TOLERANCE = 2.0          # RMS of 0-255 pixel values, as tests/plotting/test_figures.py


@pytest.fixture(scope="module")
def result(synthetic_result):
    """The demo's invented a < 0 spectra with a synthetic, seeded chain around the truth
    (no sampling; tests/plotting/conftest.py)."""
    spectra, truth = demo_spectra()
    return synthetic_result([s for s in spectra if s.kind == "l3"], ["a_minus", "eta_minus"],
                            [truth["a_minus"], truth["eta_minus"]], [0.03, 0.15])


def _texts(fig):
    return [t.get_text() for t in fig.findobj(Text)]


def test_universality_plot_image_and_text(result, tmp_path):
    fig = universality_plot(result)
    ax = fig.axes[0]
    texts = _texts(fig)
    # the band's source is on the figure; the species are the tick labels, light to heavy
    assert any("Wang, D'Incao, Esry & Greene, PRL 108, 263001 (2012)" in t for t in texts)
    assert [t.get_text() for t in ax.get_xticklabels()] == ["$^{7}$Li", "$^{85}$Rb", "$^{133}$Cs"]
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any("-9.73" in t and "15 %" in t for t in legend)
    row = {r["name"]: r for r in result.summary()}["a_minus/r_vdw"]
    fit_entry = [t for t in legend if t.startswith("this fit")]
    assert fit_entry and f"{row['median']:.2f}" in fit_entry[0] and "68 %" in fit_entry[0]
    # the fit's 95 % and 68 % intervals are drawn at its values (a_-/r_vdW of 133Cs)
    spans = sorted((float(np.ptp(seg[:, 1])), seg[:, 1].min(), seg[:, 1].max())
                   for c in ax.collections if hasattr(c, "get_segments") and c.get_linewidth()[0] > 0.95
                   for seg in c.get_segments() if len(seg) == 2 and seg[0, 0] == seg[1, 0] and
                   abs(seg[0, 0] - 2.36) < 1e-9)
    assert len(spans) == 2
    assert spans[0][1:] == pytest.approx((row["lo68"], row["hi68"]))
    assert spans[1][1:] == pytest.approx((row["lo95"], row["hi95"]))
    # the published points: one per row, at a_minus / r_vdW of the species
    published = lf.published_results(as_frame=False)
    ys = np.concatenate([line.get_ydata() for line in ax.lines if line.get_linestyle() == "None"
                         and line.get_marker() in ("D", "s", "^")])
    assert sorted(ys) == pytest.approx(sorted(r["a_minus_over_rvdw"] for r in published))

    remove_ticks_and_titles(fig)
    ax.get_legend().remove()
    for text in fig.findobj(Text):
        text.set_visible(False)
    expected = os.path.join(REFERENCE, "universality_plot.png")
    if UPDATE:
        fig.savefig(expected, dpi=40)
        plt.close(fig)
        pytest.skip(f"wrote {expected}")
    actual = os.path.join(tmp_path, "universality_plot.png")
    fig.savefig(actual, dpi=40)
    plt.close(fig)
    assert compare_images(expected, actual, tol=TOLERANCE) is None


def test_universality_plot_takes_rows_and_labelled_fits(result):
    rows = [{"species": "87Rb", "a_minus": -800.0, "a_minus_err": 40.0, "citation": "an invented row"}]
    fig = universality_plot(rows)                                  # rows alone: no fit drawn
    ticks = [t.get_text() for t in fig.axes[0].get_xticklabels()]
    assert ticks == ["$^{87}$Rb"]
    plt.close(fig)
    fig = universality_plot({"run A": result, "run B": result}, band=0.1)
    legend = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert sum(t.startswith("run ") for t in legend) == 2 and any("±10 %" in t for t in legend)
    plt.close(fig)


def test_universality_plot_refuses_bad_input(result):
    with pytest.raises(LossfitValueError, match="band"):
        universality_plot(result, band=1.5)
    with pytest.raises(LossfitValueError, match="rows"):
        universality_plot(result, rows=[{"species": "133Cs", "a_minus": 900.0, "a_minus_err": 10.0}])
    with pytest.raises(LossfitValueError, match="source"):
        universality_plot(42)
    plt.close("all")
