"""Loss-spectrum containers, validation, the HDF5 schema and CSV import.

HDF5 schema ``lossfit.spectra``, version 3
-----------------------------------------
File attributes: ``schema = "lossfit.spectra"``, ``schema_version = 3``,
``lossfit_version``. One group per spectrum under ``/spectra/<name>`` with attributes
``kind`` (``"l3"`` or ``"beta"``), ``label``, ``species`` (may be empty), ``channel``
(the loss channel the data measure, empty for the model's default) and datasets
``a`` (attribute ``units = "a0"``), ``temperature`` (``"nK"``), ``value`` and
``error`` (``"cm^6/s"`` for L3, ``"cm^3/s"`` for beta) and, optionally,
``trap_depth`` (``"nK"``, the atoms' trap depth U/k_B per point) and ``temperature_x``
(``"nK"``, the temperature of the third atom X of a mixture where it differs from the
bosons' ``temperature``; version 3). Version 1 files (no ``channel``, no ``trap_depth``)
and version 2 files (no ``temperature_x``) are read as such. Readers refuse files with an
unknown schema or a newer version.

CSV import: a header line naming the columns ``a``, ``temperature``, ``value``,
``error`` (any order, extra columns ignored; ``L3``/``beta`` and ``L3_err``/``beta_err``
stand for value and error); ``#`` starts a comment line. A header may give its unit in
parentheses, ``a (nm)``, ``temperature (uK)``, ``L3 (m^6/s)`` (:data:`lossfit.units.COLUMN_UNITS`),
and the values are converted to a0, nK and cm^6/s or cm^3/s; an unknown unit is an error.
A byte-order mark (spreadsheet programs write one) is ignored.
"""

__all__ = ["LossSpectrum", "write_spectra", "read_spectra", "read_csv", "SCHEMA", "SCHEMA_VERSION"]

import os
import re

import h5py
import numpy as np

from .._io import atomic_path, open_checked_h5, read_csv_table, write_h5_header
from ..errors import LossfitValueError, check_finite, check_nonzero, check_positive
from ..units import COLUMN_UNITS

SCHEMA = "lossfit.spectra"
SCHEMA_VERSION = 3
KINDS = {"l3": "cm^6/s", "beta": "cm^3/s"}
#: Loss channels a spectrum may measure, by kind (None: the model's default, docs/conventions.md).
#: Optional per-point columns, each a temperature in nK (> 0), and why they exist.
OPTIONAL_COLUMNS = {
    "trap_depth": "applies to L3 spectra (the observed three-body loss) only",
    "temperature_x": "applies to L3 spectra of two identical bosons and a third atom only",
}
CHANNELS = {"l3": ("observed", "total", "shallow", "deep"), "beta": ("relaxation", "breakup", "total")}


class LossSpectrum:
    """Measured loss coefficients against scattering length, one temperature per point.

    Parameters
    ----------
    a : array_like
        Scattering lengths in a0 (non-zero; > 0 for ``kind="beta"``).
    temperature : float or array_like
        Temperature of each point in nK (> 0); a scalar applies to every point.
    value : array_like
        Measured L3 in cm^6/s (``kind="l3"``) or beta in cm^3/s (``kind="beta"``).
    error : array_like
        One-standard-deviation uncertainty of ``value``, same units (> 0).
    kind : {"l3", "beta"}
    label : str, optional
        Name used in plots and files.
    species : str, optional
        Species name, recorded with the data.
    channel : str, optional
        Which loss the data measure. L3: ``"observed"`` (what a trapped gas loses: the
        default of ``model="zero-range"``), or the formal ``"total"``, ``"shallow"``,
        ``"deep"``; beta: ``"relaxation"`` (default), ``"breakup"``, ``"total"``. None:
        the model's default (docs/conventions.md).
    trap_depth : float or array_like, optional
        Trap depth of the atoms, U/k_B in nK (> 0), per point or one value; used by the
        observed L3 channel. None: the fit assumes 10 k_B T and records that.
    temperature_x : float or array_like, optional
        For two identical bosons B and a third atom X: the temperature of X in nK, per
        point or one value, where it differs from ``temperature`` (that of B). None: X
        shares the bosons' temperature.
    """

    def __init__(self, a, temperature, value, error, kind="l3", label=None, species=None, channel=None,
                 trap_depth=None, temperature_x=None):
        if kind not in KINDS:
            raise LossfitValueError("kind", f"must be one of {list(KINDS)}, got {kind!r}")
        if channel is not None and channel not in CHANNELS[kind]:
            raise LossfitValueError("channel", f"a {kind} spectrum measures one of {list(CHANNELS[kind])} "
                                    f"(or None: the model's default), got {channel!r}")
        a = np.atleast_1d(check_nonzero("a", a)).astype(float)
        if a.ndim != 1 or a.size == 0:
            raise LossfitValueError("a", f"must be a non-empty 1-D sequence, got shape {a.shape}")
        n = a.size
        arrays = {}
        for name, raw, check in (("temperature", temperature, check_positive),
                                 ("value", value, check_finite),
                                 ("error", error, check_positive)):
            arr = np.atleast_1d(check(name, raw)).astype(float)
            if arr.size == 1 and name == "temperature":
                arr = np.full(n, arr.item())
            if arr.shape != (n,):
                raise LossfitValueError(name, f"has {arr.size} entries but a has {n}")
            arrays[name] = arr
        if kind == "beta" and (a <= 0).any():
            raise LossfitValueError("a", "beta (atom-dimer relaxation) needs a > 0 (a shallow dimer); "
                                    f"got {a[a <= 0][:5]!r}")
        for name, raw in (("trap_depth", trap_depth), ("temperature_x", temperature_x)):
            if raw is None:
                continue
            if kind != "l3":
                raise LossfitValueError(name, OPTIONAL_COLUMNS[name])
            column = np.atleast_1d(check_positive(name, raw)).astype(float)
            if column.size == 1:
                column = np.full(n, column.item())
            if column.shape != (n,):
                raise LossfitValueError(name, f"has {column.size} entries but a has {n}")
            arrays[name] = column
        for arr in (a, *arrays.values()):
            arr.setflags(write=False)
        self.a = a
        self.channel = channel
        self.trap_depth = arrays.get("trap_depth")
        self.temperature_x = arrays.get("temperature_x")
        self.temperature = arrays["temperature"]
        self.value = arrays["value"]
        self.error = arrays["error"]
        self.kind = kind
        self.label = label or f"{kind} spectrum"
        self.species = species

    @property
    def units(self):
        """Units of ``value`` and ``error``."""
        return KINDS[self.kind]

    def __len__(self):
        return self.a.size

    def __repr__(self):
        t = np.unique(self.temperature)
        temps = f"{t[0]:g} nK" if t.size == 1 else f"{t.min():g}-{t.max():g} nK"
        return (f"LossSpectrum({self.label!r}, kind={self.kind!r}, {len(self)} points, "
                f"a={self.a.min():g}..{self.a.max():g} a0, T={temps})")

    def select(self, mask):
        """A new spectrum with only the points where ``mask`` is true."""
        mask = np.asarray(mask, dtype=bool)
        optional = {name: None if getattr(self, name) is None else getattr(self, name)[mask]
                    for name in OPTIONAL_COLUMNS}
        return LossSpectrum(self.a[mask], self.temperature[mask], self.value[mask],
                            self.error[mask], kind=self.kind, label=self.label, species=self.species,
                            channel=self.channel, **optional)


def write_spectra(path, spectra, *, overwrite=False):
    """Write spectra to an HDF5 file in the ``lossfit.spectra`` schema (module docstring).

    Parameters
    ----------
    path : str or path-like
    spectra : LossSpectrum or sequence of LossSpectrum
    overwrite : bool
        Replace an existing file; otherwise an existing file is an error.
    """
    spectra = [spectra] if isinstance(spectra, LossSpectrum) else list(spectra)
    if not spectra or not all(isinstance(s, LossSpectrum) for s in spectra):
        raise LossfitValueError("spectra", "must be one or more LossSpectrum objects")

    def fill(h5):
        write_h5_header(h5, SCHEMA, SCHEMA_VERSION)
        root = h5.create_group("spectra")
        for i, s in enumerate(spectra):
            g = root.create_group(f"{i:03d}")
            g.attrs["kind"] = s.kind
            g.attrs["label"] = s.label
            g.attrs["species"] = s.species or ""
            g.attrs["channel"] = s.channel or ""
            columns = [("a", s.a, "a0"), ("temperature", s.temperature, "nK"), ("value", s.value, s.units),
                       ("error", s.error, s.units)]
            columns += [(name, getattr(s, name), "nK") for name in OPTIONAL_COLUMNS if getattr(s, name) is not None]
            for name, arr, unit in columns:
                g.create_dataset(name, data=arr).attrs["units"] = unit

    with atomic_path(path, overwrite=overwrite) as tmp:
        with h5py.File(tmp, "w") as h5:
            fill(h5)


def read_spectra(path):
    """Read every spectrum of a ``lossfit.spectra`` HDF5 file.

    Returns
    -------
    list of LossSpectrum
    """
    path = os.fspath(path)
    with open_checked_h5(path, SCHEMA, SCHEMA_VERSION) as h5:
        if "spectra" not in h5:
            raise LossfitValueError("path", f"{path!r} has no /spectra group (truncated file?)")
        out = []
        for key in sorted(h5["spectra"]):
            g = h5["spectra"][key]
            kind = g.attrs.get("kind")
            if kind not in KINDS:
                raise LossfitValueError("path", f"{path!r}: spectra/{key} has kind {kind!r}; the schema "
                                        f"allows {sorted(KINDS)} (lower case)")
            units = {"a": "a0", "temperature": "nK", "value": KINDS[kind], "error": KINDS[kind]}
            for name, unit in units.items():
                if name not in g:
                    raise LossfitValueError("path", f"{path!r}: spectra/{key} lacks the dataset {name!r}")
                if g[name].attrs.get("units") != unit:
                    raise LossfitValueError("path", f"{path!r}: spectra/{key}/{name} has units "
                                            f"{g[name].attrs.get('units')!r}, expected {unit!r} (lossfit "
                                            "converts nothing on reading)")
            for name in OPTIONAL_COLUMNS:
                if name in g and g[name].attrs.get("units") != "nK":
                    raise LossfitValueError("path", f"{path!r}: spectra/{key}/{name} has units "
                                            f"{g[name].attrs.get('units')!r}, expected 'nK'")
            out.append(LossSpectrum(g["a"][()], g["temperature"][()], g["value"][()], g["error"][()],
                                    kind=kind, label=g.attrs.get("label", key),
                                    species=g.attrs.get("species", "") or None,
                                    channel=g.attrs.get("channel", "") or None,
                                    **{name: g[name][()] if name in g else None for name in OPTIONAL_COLUMNS}))
        return out


def read_csv(path, *, kind="l3", label=None, species=None, channel=None, trap_depth=None):
    """Import one spectrum from a CSV file with columns a, temperature, value, error and,
    optionally, trap_depth (the atoms' trap depth U/k_B per point, a temperature) and
    temperature_x (the third atom's temperature in a mixture).

    Units as in :class:`LossSpectrum` (a0, nK, cm^6/s or cm^3/s); ``channel`` and
    ``trap_depth`` (nK, used where the file has no such column) as there.
    """
    path = os.fspath(path)
    if kind not in KINDS:
        raise LossfitValueError("kind", f"must be one of {sorted(KINDS)}, got {kind!r}")
    factors = {}
    aliases = {kind: "value", f"{kind}_err": "error"}

    def rename(header):
        m = re.fullmatch(r"\s*([^()]*?)\s*(?:\(([^()]*)\))?\s*", header)
        name, unit = m.group(1), m.group(2)
        canonical = aliases.get(name.lower(), name)
        if unit is not None and canonical in ("a", "temperature", "value", "error", *OPTIONAL_COLUMNS):
            table = COLUMN_UNITS["a" if canonical == "a" else "temperature"
                                 if canonical in ("temperature", *OPTIONAL_COLUMNS) else kind]
            key = unit.strip().lower().replace(" ", "")
            if key not in table:
                raise LossfitValueError("path", f"{path!r}: column {header!r} has unit {unit!r}; known: "
                                        f"{sorted(table)}")
            factors[canonical] = table[key]
        return canonical

    rows, _ = read_csv_table(path, ("a", "temperature", "value", "error"), rename=rename)
    cols = {}
    names = ("a", "temperature", "value", "error") + tuple(c for c in OPTIONAL_COLUMNS if rows and c in rows[0])
    for c in names:
        try:
            cols[c] = [float(r[c]) * factors.get(c, 1.0) for r in rows]
        except (TypeError, ValueError) as err:
            raise LossfitValueError("path", f"{path!r}: column {c!r} has a non-numeric entry ({err})") from None
    return LossSpectrum(cols["a"], cols["temperature"], cols["value"], cols["error"], kind=kind,
                        label=label or os.path.splitext(os.path.basename(path))[0], species=species,
                        channel=channel, trap_depth=cols.get("trap_depth", trap_depth),
                        temperature_x=cols.get("temperature_x"))
