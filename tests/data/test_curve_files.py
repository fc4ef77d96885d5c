"""DecayCurve validation, the lossfit.campaign HDF5 schema and CSV import.

References: the written arrays themselves (round trips must be bit-exact), h5py for
building foreign/damaged files, and the a(B) formula of Chin et al., RMP 82, 1225
(2010) for the field-to-a conversion.
"""


import math

import h5py
import numpy as np
import pytest

import lossfit as lf
from lossfit.data import LossSpectrum, write_spectra
from lossfit.data.curves import DecayCurve, read_campaign, read_curves_csv, write_campaign
from lossfit.errors import LossfitValueError
from lossfit.experiment.feshbach import FeshbachResonance
from lossfit.simulate import invented_campaign

TRAP = (40.0, 40.0, 8.0)
T = np.linspace(0.0, 1.0, 6)


def _curve(**over):
    kw = dict(t=T, atoms=1e5 * np.exp(-T), atoms_err=np.full(6, 2e3), temperature=np.full(6, 100.0),
              temperature_err=np.full(6, 3.0), a=-1000.0, trap_hz=TRAP)
    kw.update(over)
    return DecayCurve(**kw)


# --- validation ------------------------------------------------------------------------

@pytest.mark.parametrize("over, argument", [
    ({"t": [0.0, 0.2, 0.2, 0.5, 0.7, 1.0]}, "t"),                       # non-increasing times
    ({"t": [0.0, 0.4, 0.3, 0.5, 0.7, 1.0]}, "t"),
    ({"t": [-0.1, 0.2, 0.3, 0.5, 0.7, 1.0]}, "t"),                      # before the jump
    ({"atoms": [1e5, 9e4, -5.0, 7e4, 6e4, 5e4]}, "atoms"),              # negative counts
    ({"atoms": [1e5, 9e4, 8e4]}, "atoms"),                              # mismatched lengths
    ({"atoms_err": np.zeros(6)}, "atoms_err"),
    ({"temperature": np.full(4, 100.0)}, "temperature"),
    ({"temperature": None}, "temperature"),
    ({"temperature_err": None}, "temperature_err"),
    ({"temperature_err": 3.0}, "temperature_err"),                      # scalar error for a series
    ({"trap_hz": None}, "trap_hz"),                                     # missing trap frequencies
    ({"trap_hz": (40.0, 40.0)}, "trap_hz"),
    ({"field": 551.0}, "field"),                                        # both field and a
    ({"a": None}, "field"),                                             # neither
    ({"a": 0.0}, "a"),
    ({"kind": "molecules"}, "kind"),
    ({"kind": "dimers", "a": -800.0, "partner_atoms": 1e5}, "a"),        # beta needs a > 0
    ({"kind": "dimers", "a": 800.0}, "partner_atoms"),
    ({"kind": "dimers", "a": 800.0, "partner_atoms": np.full(6, 1e5)}, "partner_atoms_err"),
    ({"partner_atoms": 1e5}, "partner_atoms"),                          # atoms curves have none
    ({"trap_depth": -500.0}, "trap_depth"),
    ({"trap_depth": 0.0}, "trap_depth"),
    ({"trap_depth": [500.0, 600.0]}, "trap_depth"),
    ({"counts_dimers": "no"}, "counts_dimers"),
    ({"counts_dimers": None}, "counts_dimers"),
])
def test_bad_input_names_the_argument(over, argument):
    with pytest.raises(LossfitValueError) as info:
        _curve(**over)
    assert info.value.argument == argument


def test_field_needs_a_resonance_and_the_right_side_for_dimers():
    res = FeshbachResonance(b0=550.0, width=10.0, a_bg=200.0)
    c = _curve(a=None, field=552.0)
    with pytest.raises(LossfitValueError) as info:
        c.scattering_length()
    assert info.value.argument == "resonance"
    # a(B) = a_bg (1 - width / (B - b0)) (Chin et al. 2010)
    assert c.scattering_length(res) == pytest.approx(200.0 * (1 - 10.0 / 2.0), rel=1e-14)
    dimer = _curve(a=None, field=552.0, kind="dimers", partner_atoms=2e5, partner_atoms_err=5e3)
    with pytest.raises(LossfitValueError) as info:      # a = -800 a0 there: no dimer
        dimer.scattering_length(res)
    assert info.value.argument == "field" and "wrong side" in str(info.value)
    ok = _curve(a=None, field=549.0, kind="dimers", partner_atoms=2e5, partner_atoms_err=5e3)
    assert ok.scattering_length(res) == pytest.approx(200.0 * (1 + 10.0), rel=1e-14)


def test_arrays_are_read_only_and_scalar_temperature_is_an_initial_value():
    c = _curve(temperature=95.0, temperature_err=4.0)
    assert not c.temperature_series and c.initial_temperature == 95.0
    with pytest.raises(ValueError):
        c.atoms[0] = 1.0


# --- HDF5 schema --------------------------------------------------------------------------

def _campaign():
    res = FeshbachResonance(550.0, 10.0, 200.0, covariance=np.diag([1e-4, 4e-4, 9.0]))
    curves = [_curve(label="first"),
              _curve(a=None, field=551.3, temperature=90.0, temperature_err=2.0, label="by field",
                     trap_depth=950.0, counts_dimers=False),
              _curve(a=None, field=548.0, kind="dimers", partner_atoms=np.full(6, 2e5),
                     partner_atoms_err=np.full(6, 4e3), trap_hz=(30.0, 35.0, 9.0))]
    return curves, res


def test_campaign_round_trip_is_exact(tmp_path):
    curves, res = _campaign()
    path = tmp_path / "campaign.h5"
    write_campaign(path, curves, species="133Cs", resonance=res, metadata={"scenario": "invented"})
    back = read_campaign(path)
    assert back.species == "133Cs" and back.metadata == {"scenario": "invented"}
    # the data layer hands the resonance back as its record; the experiment layer rebuilds it
    rebuilt = lf.FeshbachResonance(**back.resonance)
    assert rebuilt.params.tolist() == res.params.tolist()
    assert np.array_equal(rebuilt.covariance, res.covariance)
    assert len(back.curves) == 3
    for a, b in zip(curves, back.curves):
        for name in ("t", "atoms", "atoms_err", "temperature", "temperature_err"):
            assert np.array_equal(getattr(a, name), getattr(b, name))
        assert (a.field, a.a, a.kind, a.label) == (b.field, b.a, b.kind, b.label)
        assert (a.trap_depth, a.counts_dimers) == (b.trap_depth, b.counts_dimers)
        assert np.array_equal(a.trap_hz, b.trap_hz) and np.array_equal(a.dimer_trap_hz, b.dimer_trap_hz)
    assert np.array_equal(back.curves[2].partner_atoms, curves[2].partner_atoms)
    with h5py.File(path, "r") as h5:            # units are attributes
        assert h5["curves/000/t"].attrs["units"] == "s"
        assert h5["curves/001/field"].attrs["units"] == "G"
        assert h5["resonance/a_bg"].attrs["units"] == "a0"
        assert h5["curves/001/trap_depth"].attrs["units"] == "nK"
        assert h5.attrs["schema_version"] == 2
    assert back.curves[1].trap_depth == 950.0 and not back.curves[1].counts_dimers
    assert back.curves[0].trap_depth is None and back.curves[0].counts_dimers


def test_version_1_campaigns_are_read_with_the_defaults(tmp_path):
    # a file as version 1 wrote it: no trap depth, no counts_dimers attribute
    curves, res = _campaign()
    path = tmp_path / "v1.h5"
    write_campaign(path, curves, resonance=res)
    with h5py.File(path, "a") as h5:
        h5.attrs["schema_version"] = 1
        del h5["curves/001/trap_depth"]
        for key in h5["curves"]:
            del h5["curves"][key].attrs["counts_dimers"]
    back = read_campaign(path)
    assert all(c.trap_depth is None and c.counts_dimers for c in back.curves)
    assert np.array_equal(back.curves[1].atoms, curves[1].atoms)
    with h5py.File(path, "a") as h5:
        h5["curves/000"].attrs["counts_dimers"] = 7
    with pytest.raises(LossfitValueError, match="counts_dimers") as info:
        read_campaign(path)
    assert info.value.argument == "path"


def test_campaign_write_refuses_to_overwrite(tmp_path):
    curves, res = _campaign()
    path = tmp_path / "c.h5"
    write_campaign(path, curves[:1])
    before = path.read_bytes()
    with pytest.raises(LossfitValueError) as info:
        write_campaign(path, curves)
    assert info.value.argument == "path" and "overwrite=True" in str(info.value)
    assert path.read_bytes() == before
    write_campaign(path, curves, overwrite=True)
    assert len(read_campaign(path).curves) == 3


def test_truncated_foreign_and_damaged_files_are_rejected(tmp_path):
    curves, res = _campaign()
    good = tmp_path / "good.h5"
    write_campaign(good, curves, resonance=res)
    data = good.read_bytes()
    cut = tmp_path / "cut.h5"
    cut.write_bytes(data[: len(data) // 3])
    with pytest.raises(LossfitValueError, match="truncated|damaged"):
        read_campaign(cut)
    spectra = tmp_path / "spectra.h5"
    write_spectra(spectra, LossSpectrum([-900.0, -800.0], 50.0, [1e-24, 2e-24], [1e-25, 1e-25]))
    with pytest.raises(LossfitValueError, match="lossfit.spectra"):
        read_campaign(spectra)
    text = tmp_path / "notes.h5"
    text.write_text("not hdf5")
    with pytest.raises(LossfitValueError, match="truncated or not an HDF5"):
        read_campaign(text)
    with h5py.File(good, "a") as h5:
        del h5["curves/001/atoms_err"]
    with pytest.raises(LossfitValueError, match="curves/001/atoms_err is missing"):
        read_campaign(good)
    newer = tmp_path / "newer.h5"
    write_campaign(newer, curves)
    with h5py.File(newer, "a") as h5:
        h5.attrs["schema_version"] = 99
    with pytest.raises(LossfitValueError, match="version 99"):
        read_campaign(newer)
    with pytest.raises(LossfitValueError, match="no such file"):
        read_campaign(tmp_path / "absent.h5")


# --- CSV ----------------------------------------------------------------------------------

def test_csv_import_groups_rows_into_curves(tmp_path):
    path = tmp_path / "curves.csv"
    path.write_text("# invented numbers\n"
                    "curve, t, atoms, atoms_err, temperature, temperature_err, field\n"
                    "A, 0.0, 100000, 2000, 100, 3, 551.0\n"
                    "A, 0.5, 80000, 2000, 104, 3, 551.0\n"
                    "A, 1.0, 65000, 2000, 108, 3, 551.0\n"
                    "A, 1.5, 55000, 2000, 111, 3, 551.0\n"
                    "B, 0.0, 90000, 1500, 200, 5, 552.5\n"
                    "B, 2.0, 70000, 1500, 205, 5, 552.5\n"
                    "B, 4.0, 60000, 1500, 209, 5, 552.5\n")
    curves = read_curves_csv(path, trap_hz=TRAP)
    assert [c.label for c in curves] == ["A", "B"]
    assert curves[0].atoms.tolist() == [100000, 80000, 65000, 55000]
    assert curves[1].t.tolist() == [0.0, 2.0, 4.0] and curves[1].field == 552.5
    assert curves[1].temperature_err.tolist() == [5.0, 5.0, 5.0]
    with pytest.raises(LossfitValueError) as info:
        read_curves_csv(path)
    assert info.value.argument == "trap_hz"


def test_csv_import_reads_trap_depth_and_counting_per_curve(tmp_path):
    path = tmp_path / "depth.csv"
    path.write_text("curve, t, atoms, atoms_err, temperature, temperature_err, a, trap_depth, counts_dimers\n"
                    "A, 0.0, 100000, 2000, 100, 3, 1200, 1000, no\n"
                    "A, 0.5, 80000, 2000, 104, 3, 1200, 1000, no\n"
                    "B, 0.0, 90000, 1500, 200, 5, 1500, , \n"
                    "B, 2.0, 70000, 1500, 205, 5, 1500, , \n")
    a, b = read_curves_csv(path, trap_hz=TRAP)
    assert (a.trap_depth, a.counts_dimers) == (1000.0, False)
    assert (b.trap_depth, b.counts_dimers) == (None, True)
    path.write_text("t, atoms, atoms_err, temperature, temperature_err, a, counts_dimers\n"
                    "0.0, 100000, 2000, 100, 3, 1200, maybe\n")
    with pytest.raises(LossfitValueError, match="counts_dimers"):
        read_curves_csv(path, trap_hz=TRAP)


def test_csv_errors_are_clear(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("t, atoms, temperature, temperature_err, a\n0, 1e5, 100, 3, -900\n")
    with pytest.raises(LossfitValueError, match="atoms_err"):
        read_curves_csv(bad, trap_hz=TRAP)
    mixed = tmp_path / "mixed.csv"
    mixed.write_text("t, atoms, atoms_err, temperature, temperature_err, a\n"
                     "0, 1e5, 2e3, 100, 3, -900\n0.5, 9e4, 2e3, 100, 3, -950\n1, 8e4, 2e3, 100, 3, -900\n")
    with pytest.raises(LossfitValueError, match="constant within curve"):
        read_curves_csv(mixed, trap_hz=TRAP)
    word = tmp_path / "word.csv"
    word.write_text("t, atoms, atoms_err, temperature, temperature_err, a\n0, lots, 2e3, 100, 3, -900\n")
    with pytest.raises(LossfitValueError, match="not a number"):
        read_curves_csv(word, trap_hz=TRAP)


def test_invented_campaign_is_on_the_requested_side():
    curves, res, truth = invented_campaign(3, n_fields=4)
    assert len(curves) == 8
    a = np.array([c.scattering_length(res) for c in curves])
    assert np.all(a < 0) and a.min() == pytest.approx(-3500.0, rel=1e-9)


def test_invented_campaign_with_atom_curves_on_both_sides():
    curves, res, truth = invented_campaign(3, n_fields=2, positive_fields=3)
    assert len(curves) == 10
    positive = [c for c in curves if c.scattering_length(res) > 0]
    assert len(positive) == 6 and all(c.kind == "atoms" for c in positive)
    a = np.array([c.scattering_length(res) for c in positive])
    assert a.min() == pytest.approx(400.0, rel=1e-9) and a.max() == pytest.approx(3000.0, rel=1e-9)
    # each temperature's trap is 10 x its nominal temperature deep, recorded in the curve
    assert sorted({c.trap_depth for c in positive}) == [800.0, 2500.0]
    assert all(c.trap_depth is None for c in curves if c not in positive)
    assert all(c.counts_dimers for c in curves)
    assert truth["a_star"] > 0 and truth["eta_star"] == truth["eta_minus"]
    for c in positive:
        if c.scattering_length(res) > 1000.0:                 # (at 400 a0 the 8 s hold loses less)
            assert c.atoms[-1] < 0.8 * c.atoms[0]


def test_invented_campaign_with_atom_dimer_mixtures():
    import warnings

    from lossfit.errors import ValidityWarning
    from lossfit.inference.curve_fits import fit_curve
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        curves, res, truth = invented_campaign(3, n_fields=2, dimer_fields=3)
    dimers = [c for c in curves if c.kind == "dimers"]
    assert len(curves) == 10 and len(dimers) == 6
    a = np.array([c.scattering_length(res) for c in dimers])
    assert np.all(a > 0) and a.max() == pytest.approx(3000.0, rel=1e-9)
    # the a > 0 truth is tied to a_- = -900 a0: a* = (0.0707645 x 22.694 / 1.50763) |a_-|
    # (Gogolin, Mora & Egger, PRL 100, 140404 (2008); Braaten & Hammer, Phys. Rep. 428, 259 (2006))
    assert truth["a_star"] == pytest.approx(900.0 * 0.0707645 * 22.6944 / 1.50763, rel=1e-4)
    for c in dimers:
        assert c.partner_atoms.shape == c.t.shape
        assert c.atoms[-1] < 0.7 * c.atoms[0]                  # the dimers really decay
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ValidityWarning)
            fit = fit_curve(c, species="133Cs", resonance=res)
        # the constant-beta model describes a mixture curve to within noise
        assert fit.chi2 < fit.dof + 4 * math.sqrt(2 * fit.dof)
    with pytest.raises(LossfitValueError, match="n_dimers0"):
        from lossfit.simulate import simulate_curve
        simulate_curve(np.linspace(0, 0.1, 5), species="133Cs", trap_hz=TRAP, efimov=lf.Efimov(a_star=900.0,
                       eta_star=0.1), n0=1e4, t0_nK=100.0, a=1000.0, rng=np.random.default_rng(0),
                       kind="dimers")
