"""Tables of two identical bosons and a third atom built on demand (``lossfit tables``)."""

import os

import numpy as np
import pytest

import lossfit as lf
from lossfit.batch.exit_codes import EXIT_CONFLICT
from lossfit.cli import main
from lossfit.errors import LossfitValueError
from lossfit.mixture import heteronuclear
from lossfit.units import A0
from lossfit.universal.mixture_model import _mixture_model, table_name
from lossfit.universal.solver.mixture_tables import build_table
from lossfit.universal.solver.stm_mixture import MixtureSTM

HBAR = 1.054571817e-34        # J s (CODATA 2018)


@pytest.fixture(autouse=True)
def _forget_models_of_the_temporary_cache():
    # the models of a pair are kept per process and load their tables once: a model that
    # loaded a table from this test's temporary cache would serve later tests in the same
    # worker as if the pair had a table (tests/heteronuclear/test_mixture_rates.py refuses it)
    yield
    _mixture_model.cache_clear()


def test_a_shipped_pair_needs_no_build(capsys):
    assert main(["tables", "133Cs", "6Li"]) == 0
    assert "ships with lossfit" in capsys.readouterr().err


def test_a_missing_table_names_the_command(tmp_path, monkeypatch):
    monkeypatch.setenv("LOSSFIT_CACHE", str(tmp_path))
    system = heteronuclear("87Rb", "7Li", c6_bx=2500.0)      # C6 invented for the test
    with pytest.raises(LossfitValueError, match="lossfit tables 87Rb 7Li"):
        lf.l3(-800.0, 100.0, species=system, efimov=lf.Efimov(a_minus=-500.0, eta_minus=0.1))


@pytest.mark.slow
def test_built_table_is_cached_and_reaches_the_threshold_law(tmp_path, monkeypatch):
    # a coarse table (4 x values, 3 kappa*) of a pair that does not ship: the E -> 0 limit
    # of the thermal rate equals the independent zero-energy solve at the same cutoff
    # (docs/stm-mixture.md section 3), whatever the x grid
    monkeypatch.setenv("LOSSFIT_CACHE", str(tmp_path))
    system = heteronuclear("87Rb", "7Li", c6_bx=2500.0)      # C6 invented for the test
    path = os.path.join(str(tmp_path), table_name(system))
    build_table(system, path, x_grid=np.geomspace(0.05, 0.4, 4), n_theta=3, cutoff=1e4, processes=2,
                progress=False)
    assert os.listdir(tmp_path) == [table_name(system)]          # no partial file left behind
    solver = MixtureSTM(system.mass_ratio, cutoff=1e4, qmin=1e-4)
    a, a_minus, eta = -900.0, -400.0, 0.1
    k3 = solver.recombination(abs(solver.kappa_a_minus()) * a / a_minus, eta, negative_a=True)["deep"]
    expected = k3 * HBAR * (abs(a) * A0) ** 4 / system.mass_boson * 1e12
    value = lf.l3(a, 0.01, species=system, efimov=lf.Efimov(a_minus=a_minus, eta_minus=eta))
    assert value == pytest.approx(expected, rel=1e-3)
    # a second build into the same cache is refused without --overwrite (nothing is lost)
    assert main(["tables", "87Rb", "7Li", "--c6", "2500", "--quiet"]) == EXIT_CONFLICT
