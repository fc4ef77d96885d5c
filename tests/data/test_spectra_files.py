"""LossSpectrum validation, the HDF5 schema round trip, CSV import, safe writes."""

import h5py
import numpy as np
import pytest

import lossfit as lf
from lossfit.errors import LossfitValueError


def _spec(**kw):
    args = dict(a=[-500.0, -900.0, -1500.0], temperature=50.0, value=[1e-24, 5e-23, 2e-23],
                error=[1e-25, 5e-24, 2e-24], kind="l3", label="test")
    args.update(kw)
    return lf.LossSpectrum(**args)


def test_scalar_temperature_broadcasts_and_arrays_are_read_only():
    s = _spec()
    assert np.array_equal(s.temperature, [50.0, 50.0, 50.0])
    with pytest.raises(ValueError):
        s.a[0] = 1.0
    assert s.units == "cm^6/s" and len(s) == 3


@pytest.mark.parametrize("kw, argument", [
    (dict(a=[-500.0, 0.0, -1500.0]), "a"),
    (dict(a=[-500.0, np.nan, -1500.0]), "a"),
    (dict(temperature=[50.0, -1.0, 50.0]), "temperature"),
    (dict(temperature=[50.0, 50.0]), "temperature"),
    (dict(temperature=np.inf), "temperature"),
    (dict(value=[1e-24, 5e-23]), "value"),
    (dict(value=[1e-24, np.nan, 1.0]), "value"),
    (dict(error=[1e-25, -5e-24, 2e-24]), "error"),
    (dict(error=[1e-25, 0.0, 2e-24]), "error"),
    (dict(kind="l4"), "kind"),
    (dict(kind="beta"), "a"),          # beta needs a > 0
])
def test_bad_input_names_the_argument(kw, argument):
    with pytest.raises(LossfitValueError) as info:
        _spec(**kw)
    assert info.value.argument == argument
    assert argument in str(info.value)


def test_hdf5_round_trip_with_units(tmp_path):
    s1 = _spec()
    s2 = lf.LossSpectrum([300.0, 900.0], [40.0, 45.0], [1e-10, 3e-10], [1e-11, 3e-11], kind="beta",
                         label="ad", species="133Cs")
    path = tmp_path / "spectra.h5"
    lf.write_spectra(path, [s1, s2])
    back = lf.read_spectra(path)
    assert [b.kind for b in back] == ["l3", "beta"]
    for orig, new in zip((s1, s2), back):
        for name in ("a", "temperature", "value", "error"):
            assert np.array_equal(getattr(orig, name), getattr(new, name))
        assert new.label == orig.label
    with h5py.File(path) as h5:
        assert h5.attrs["schema"] == "lossfit.spectra" and h5.attrs["schema_version"] == 3
        assert h5["spectra/000/a"].attrs["units"] == "a0"
        assert h5["spectra/001/value"].attrs["units"] == "cm^3/s"
        assert h5["spectra/000/temperature"].attrs["units"] == "nK"


def test_channel_and_trap_depth_round_trip_and_version_1_files_still_read(tmp_path):
    s = lf.LossSpectrum([2e3, 2e4], 100.0, [1e-24, 1e-23], [1e-25, 1e-24], channel="total", trap_depth=[900.0, 1100.0])
    path = tmp_path / "spectra.h5"
    lf.write_spectra(path, s)
    back = lf.read_spectra(path)[0]
    assert back.channel == "total" and np.array_equal(back.trap_depth, [900.0, 1100.0])
    assert back.select([False, True]).trap_depth.tolist() == [1100.0]
    # a file written before channels existed: version 1, no channel, no trap_depth
    with h5py.File(path, "r+") as h5:
        h5.attrs["schema_version"] = 1
        del h5["spectra/000"].attrs["channel"]
        del h5["spectra/000/trap_depth"]
    old = lf.read_spectra(path)[0]
    assert old.channel is None and old.trap_depth is None


def test_channel_and_trap_depth_are_checked():
    with pytest.raises(LossfitValueError, match="channel"):
        lf.LossSpectrum([2e3], 100.0, [1e-24], [1e-25], channel="relaxation")
    with pytest.raises(LossfitValueError, match="trap_depth"):
        lf.LossSpectrum([2e3], 100.0, [1e-24], [1e-25], trap_depth=-5.0)
    with pytest.raises(LossfitValueError, match="trap_depth"):
        lf.LossSpectrum([2e3], 100.0, [1e-10], [1e-11], kind="beta", trap_depth=500.0)


def test_existing_file_is_never_overwritten_without_consent(tmp_path):
    path = tmp_path / "spectra.h5"
    lf.write_spectra(path, _spec())
    before = path.read_bytes()
    with pytest.raises(LossfitValueError, match="exists"):
        lf.write_spectra(path, _spec(label="other"))
    assert path.read_bytes() == before
    lf.write_spectra(path, _spec(label="other"), overwrite=True)
    assert lf.read_spectra(path)[0].label == "other"


def test_failed_write_leaves_no_partial_file(tmp_path):
    path = tmp_path / "spectra.h5"
    with pytest.raises(LossfitValueError):
        lf.write_spectra(path, ["not a spectrum"])
    assert not path.exists()
    assert list(tmp_path.iterdir()) == []


def test_reader_rejects_foreign_truncated_and_newer_files(tmp_path):
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as h5:
        h5.attrs["schema"] = "something-else"
    with pytest.raises(LossfitValueError, match="schema"):
        lf.read_spectra(foreign)
    good = tmp_path / "good.h5"
    lf.write_spectra(good, _spec())
    truncated = tmp_path / "truncated.h5"
    truncated.write_bytes(good.read_bytes()[:500])
    with pytest.raises(LossfitValueError, match="truncated or not an HDF5"):
        lf.read_spectra(truncated)
    with h5py.File(good, "a") as h5:
        h5.attrs["schema_version"] = 99
    with pytest.raises(LossfitValueError, match="version 99"):
        lf.read_spectra(good)
    with pytest.raises(LossfitValueError, match="no such file"):
        lf.read_spectra(tmp_path / "missing.h5")


def test_csv_import(tmp_path):
    path = tmp_path / "run7.csv"
    path.write_text("# invented test data\n temperature, a, value, error, note\n"
                    "50, -500, 1e-24, 1e-25, x\n60, -900, 5e-23, 5e-24, y\n")
    s = lf.read_csv(path)
    assert np.array_equal(s.a, [-500.0, -900.0])
    assert np.array_equal(s.temperature, [50.0, 60.0])
    assert s.label == "run7"
    bad = tmp_path / "bad.csv"
    bad.write_text("a,temperature,value\n-500,50,1e-24\n")
    with pytest.raises(LossfitValueError, match="error"):
        lf.read_csv(bad)
    worse = tmp_path / "worse.csv"
    worse.write_text("a,temperature,value,error\n-500,fifty,1e-24,1e-25\n")
    with pytest.raises(LossfitValueError, match="non-numeric"):
        lf.read_csv(worse)


def test_csv_units_in_headers_are_converted(tmp_path):
    # "a (nm)", "temperature (uK)", "L3 (m^6/s)": converted to a0, nK, cm^6/s
    # (1 nm = 18.8973 a0, CODATA; 1 m^6/s = 1e12 cm^6/s)
    path = tmp_path / "units.csv"
    path.write_text("a (nm),temperature (uK),L3 (m^6/s),L3_err (m^6/s)\n-50,0.05,1e-36,1e-37\n")
    s = lf.read_csv(path)
    assert s.a[0] == pytest.approx(-50 * 18.8972612, rel=1e-8)
    assert s.temperature[0] == pytest.approx(50.0) and s.value[0] == pytest.approx(1e-24)
    path.write_text("a (furlong),temperature,value,error\n-50,50,1e-24,1e-25\n")
    with pytest.raises(lf.LossfitValueError, match="furlong"):
        lf.read_csv(path)


def test_third_atom_temperature_round_trips_in_hdf5_and_csv(tmp_path):
    # version 3: the X temperature of a mixture, per point, in nK
    s = lf.LossSpectrum([-400.0, -900.0], 100.0, [1e-24, 1e-23], [1e-25, 1e-24], temperature_x=[150.0, 160.0])
    path = tmp_path / "mixture.h5"
    lf.write_spectra(path, s)
    back = lf.read_spectra(path)[0]
    assert back.temperature_x.tolist() == [150.0, 160.0] and back.trap_depth is None
    assert back.select([True, False]).temperature_x.tolist() == [150.0]
    csv = tmp_path / "mixture.csv"
    csv.write_text("a,temperature (uK),temperature_x (uK),value,error\n-400,0.1,0.15,1e-24,1e-25\n")
    assert lf.read_csv(csv).temperature_x.tolist() == pytest.approx([150.0])
    with pytest.raises(lf.errors.LossfitValueError, match="temperature_x"):
        lf.LossSpectrum([400.0], 100.0, [1e-10], [1e-11], kind="beta", temperature_x=120.0)
