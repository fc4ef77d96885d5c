"""Every bad input gets a LossfitValueError that names the argument (or the file).

One table, one row per case a new user can hit: wrong types (booleans and strings are not
numbers), wrong values, broken or foreign files, impossible sampler settings. Each row
names the argument the error must name; a bare numpy/h5py/OS exception fails the row.
"""

import math

import h5py
import numpy as np
import pytest

import lossfit as lf
from lossfit.data import LossSpectrum, read_campaign, read_csv, read_spectra, write_spectra
from lossfit.errors import LossfitValueError

CS = "133Cs"
EF = lf.Efimov.universal(-900.0, 0.1)


def _spectrum(**over):
    kw = dict(a=[-800.0, -1000.0, -1200.0], temperature=50.0, value=[1e-24, 2e-24, 1e-24],
              error=[1e-25, 2e-25, 1e-25], kind="l3")
    kw.update(over)
    return LossSpectrum(kw.pop("a"), kw.pop("temperature"), kw.pop("value"), kw.pop("error"), **kw)


def _curve(**over):
    kw = dict(t=[0.0, 0.1, 0.2, 0.4], atoms=[1e5, 9e4, 8e4, 7e4], atoms_err=[1e3] * 4,
              temperature=100.0, temperature_err=5.0, a=-1000.0, trap_hz=(20.0, 20.0, 80.0))
    kw.update(over)
    return lf.DecayCurve(**kw)


def _spectra_file(tmp_path, edit=None):
    path = tmp_path / "spectra.h5"
    write_spectra(path, _spectrum(), overwrite=True)
    if edit is not None:
        with h5py.File(path, "a") as h5:
            edit(h5["spectra/000"])
    return path


def _l3(**over):
    kw = dict(a=-1000.0, temperature=50.0, species=CS, efimov=EF)
    kw.update(over)
    return lf.l3(kw.pop("a"), kw.pop("temperature"), **kw)


def _fit(**over):
    kw = dict(species=CS, free=["a_minus", "eta_minus"], walkers=8, steps=20, progress=False)
    kw.update(over)
    return lf.fit(kw.pop("data", _spectrum()), **kw)


def _write_text(tmp_path, text, name="data.csv", encoding="utf-8"):
    path = tmp_path / name
    path.write_text(text, encoding=encoding)
    return path


CSV_OK = "a,temperature,value,error\n-800,50,1e-24,1e-25\n-1000,50,2e-24,2e-25\n"

CASES = [
    # rates: types
    ("l3 a is a string", lambda p: _l3(a="abc"), "a"),
    ("l3 a is None", lambda p: _l3(a=None), "a"),
    ("l3 a is an array of strings", lambda p: _l3(a=np.array(["-1000", "-900"])), "a"),
    ("l3 a is a boolean", lambda p: _l3(a=True), "a"),
    ("l3 a is complex", lambda p: _l3(a=-1000 + 1j), "a"),
    ("l3 a is ragged", lambda p: _l3(a=[[-1000.0, -900.0], [-800.0]]), "a"),
    ("l3 T is a boolean (not 1 nK)", lambda p: _l3(temperature=True), "temperature"),
    ("l3 T is a string", lambda p: _l3(temperature="50"), "temperature"),
    # rates: values
    ("l3 a = 0", lambda p: _l3(a=0.0), "a"),
    ("l3 a infinite", lambda p: _l3(a=math.inf), "a"),
    ("l3 T negative", lambda p: _l3(temperature=-5.0), "temperature"),
    ("l3 T NaN", lambda p: _l3(temperature=math.nan), "temperature"),
    ("l3 efimov not an Efimov", lambda p: _l3(efimov={"a_minus": -900}), "efimov"),
    ("l3 unknown species", lambda p: _l3(species="Unobtainium-999"), "species"),
    ("l3 unknown model", lambda p: _l3(model="no such model"), "model"),
    ("l3 unknown channel", lambda p: _l3(a=1000.0, channel="deep dimer"), "channel"),
    ("l3 rtol not positive", lambda p: _l3(rtol=-1.0), "rtol"),
    ("beta at a < 0 (no dimer)", lambda p: lf.beta(-1000.0, 50.0, species=CS, efimov=EF), "a"),
    ("k3 negative energy", lambda p: lf.k3(-1000.0, -1.0, species=CS, efimov=EF), "energy"),
    # Efimov parameters
    ("Efimov a_minus > 0", lambda p: lf.Efimov(a_minus=900.0, eta_minus=0.1), "a_minus"),
    ("Efimov eta negative", lambda p: lf.Efimov(a_minus=-900.0, eta_minus=-0.1), "eta_minus"),
    ("Efimov a_minus a string", lambda p: lf.Efimov(a_minus="-900", eta_minus=0.1), "a_minus"),
    # containers
    ("LossSpectrum a strings", lambda p: _spectrum(a=["x", "y", "z"]), "a"),
    ("LossSpectrum negative error", lambda p: _spectrum(error=[1e-25, -1e-25, 1e-25]), "error"),
    ("LossSpectrum kind upper case", lambda p: _spectrum(kind="L3"), "kind"),
    ("LossSpectrum T boolean", lambda p: _spectrum(temperature=True), "temperature"),
    ("DecayCurve times decreasing", lambda p: _curve(t=[0.0, 0.2, 0.1, 0.4]), "t"),
    ("DecayCurve trap with 2 frequencies", lambda p: _curve(trap_hz=(20.0, 80.0)), "trap_hz"),
    ("DecayCurve no temperature error", lambda p: _curve(temperature_err=None), "temperature_err"),
    ("DecayCurve a = 0", lambda p: _curve(a=0.0), "a"),
    ("DecayCurve atoms strings", lambda p: _curve(atoms=["1e5"] * 4), "atoms"),
    ("HarmonicTrap negative frequency", lambda p: lf.HarmonicTrap((-20.0, 20.0, 80.0)), "frequencies_hz"),
    ("FeshbachResonance b0 string", lambda p: lf.FeshbachResonance("550", 1.0, 1000.0), "b0"),
    # files
    ("read_spectra missing file", lambda p: read_spectra(p / "none.h5"), "path"),
    ("read_spectra on a CSV file", lambda p: read_spectra(_write_text(p, CSV_OK)), "path"),
    ("read_spectra without the error dataset",
     lambda p: read_spectra(_spectra_file(p, lambda g: g.__delitem__("error"))), "path"),
    ("read_spectra kind attribute 'L3'",
     lambda p: read_spectra(_spectra_file(p, lambda g: g.attrs.__setitem__("kind", "L3"))), "path"),
    ("read_spectra a in nm", lambda p: read_spectra(_spectra_file(
        p, lambda g: g["a"].attrs.__setitem__("units", "nm"))), "path"),
    ("read_csv on an HDF5 file", lambda p: read_csv(_spectra_file(p)), "path"),
    ("read_csv on a folder", lambda p: read_csv(p), "path"),
    ("read_csv non-numeric entry", lambda p: read_csv(_write_text(p, CSV_OK + "x,50,1e-24,1e-25\n")), "path"),
    ("read_csv missing column", lambda p: read_csv(_write_text(p, "a,temperature,value\n-800,50,1e-24\n")),
     "path"),
    ("read_campaign on a spectra file", lambda p: read_campaign(_spectra_file(p)), "path"),
    ("write_spectra into a missing folder", lambda p: write_spectra(p / "no" / "such.h5", _spectrum()), "path"),
    ("write_spectra over a file", lambda p: write_spectra(_spectra_file(p), _spectrum()), "path"),
    ("write_spectra onto a folder", lambda p: write_spectra(p, _spectrum(), overwrite=True), "path"),
    # fits
    ("fit seed a string", lambda p: _fit(seed="x"), "seed"),
    ("fit walkers boolean", lambda p: _fit(walkers=True), "walkers"),
    ("fit burn as long as the chain", lambda p: _fit(burn=20), "burn"),
    ("fit steps a float", lambda p: _fit(steps=20.0), "steps"),
    ("fit unknown parameter", lambda p: _fit(free=["a_minus", "nope"]), "free"),
    ("fit data a string", lambda p: _fit(data="spectra.h5"), "data"),
]


@pytest.mark.parametrize("case, call, argument", CASES, ids=[c[0] for c in CASES])
def test_bad_input_is_named(case, call, argument, tmp_path):
    with pytest.raises(LossfitValueError) as info:
        call(tmp_path)
    assert info.value.argument == argument, str(info.value)


def test_the_table_is_large():
    assert len(CASES) >= 40


def test_spreadsheet_csv_with_byte_order_mark_reads(tmp_path):
    # spreadsheet programs save UTF-8 CSV with a byte-order mark (common practice, no source)
    path = _write_text(tmp_path, CSV_OK, encoding="utf-8-sig")
    s = read_csv(path)
    assert s.a.tolist() == [-800.0, -1000.0]


def test_a_failed_write_leaves_the_old_file(tmp_path):
    path = _spectra_file(tmp_path)
    before = path.read_bytes()
    with pytest.raises(LossfitValueError):
        write_spectra(path, "not a spectrum", overwrite=True)
    assert path.read_bytes() == before
