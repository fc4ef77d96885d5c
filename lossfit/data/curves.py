"""Raw decay curves, the measurement-campaign HDF5 schema and CSV import.

A :class:`DecayCurve` is what a laboratory records at one field: atom (or Feshbach
dimer) numbers after hold times t, optionally the cloud temperature, and the trap.

HDF5 schema ``lossfit.campaign``, version 2
------------------------------------------
File attributes: ``schema = "lossfit.campaign"``, ``schema_version = 1``,
``lossfit_version``, ``species`` (may be empty), ``metadata`` (JSON object).
Optional group ``/resonance`` with scalar datasets ``b0`` (``units = "G"``), ``width``
(``"G"``), ``a_bg`` (``"a0"``) and optionally ``covariance`` (3 x 3, units
``"G,G,a0"`` for (b0, width, a_bg)). One group per curve under ``/curves/<nnn>`` with
attributes ``kind`` (``"atoms"`` or ``"dimers"``) and ``label``, and datasets ``t``
(``"s"``), ``atoms`` and ``atoms_err`` (``"count"``), ``temperature`` and
``temperature_err`` (``"nK"``; scalar for a single initial-temperature measurement, or
one value per time), ``trap_hz`` and ``dimer_trap_hz`` (3 values, ``"Hz"``), exactly one
of ``field`` (``"G"``) or ``a`` (``"a0"``), and for dimer curves ``partner_atoms``
(``"count"``; scalar initial atom number or one value per time) with
``partner_atoms_err`` when it is an array. Version 2 adds, per curve, the optional
dataset ``trap_depth`` (``"nK"``, the atoms' trap depth U/k_B) and the attribute
``counts_dimers`` (1 or 0: whether the imaging counts atoms bound in shallow dimers).
Version 1 files are read with no trap depth and ``counts_dimers`` True. Readers refuse
files with another schema, a newer version, or missing datasets.

CSV import (:func:`read_curves_csv`): a header line naming the columns; ``#`` starts a
comment line. Required: ``t``, ``atoms``, ``atoms_err``, ``temperature``,
``temperature_err`` and one of ``field`` or ``a``. Optional: ``curve`` (rows with the
same value form one curve, in file order; default: one curve), ``kind``,
``partner_atoms``, ``partner_atoms_err``, ``trap_x_hz``, ``trap_y_hz``, ``trap_z_hz``,
``trap_depth`` (nK) and ``counts_dimers`` (``1``/``0``, ``true``/``false``, ``yes``/``no``),
the last two constant within a curve. Units as in :class:`DecayCurve`.
"""

__all__ = ["DecayCurve", "Campaign", "write_campaign", "read_campaign", "read_curves_csv",
           "CAMPAIGN_SCHEMA", "CAMPAIGN_SCHEMA_VERSION"]

import json
import os
from dataclasses import dataclass
from dataclasses import field as _dc_field

import h5py
import numpy as np

from .._io import atomic_path, open_checked_h5, read_csv_table, write_h5_header
from ..errors import LossfitValueError, check_finite, check_frequencies, check_positive, check_times

CAMPAIGN_SCHEMA = "lossfit.campaign"
CAMPAIGN_SCHEMA_VERSION = 2
KINDS = ("atoms", "dimers")


def _series(name, value, n, *, allow_scalar=False):
    """A non-negative float array of length n (or a scalar if allowed)."""
    arr = check_positive(name, value, allow_zero=True)
    if allow_scalar and arr.ndim == 0:
        return arr.astype(float)
    if arr.ndim != 1 or arr.size != n:
        raise LossfitValueError(name, f"has shape {arr.shape} but t has {n} entries")
    return arr.astype(float)


def _positive_scalar(name, value):
    arr = check_positive(name, value)
    if arr.ndim != 0:
        raise LossfitValueError(name, f"must be a single value, got shape {arr.shape}")
    return float(arr)


def _readonly(*arrays):
    for arr in arrays:
        if arr is not None:
            arr.setflags(write=False)


class DecayCurve:
    """One decay measurement at a fixed field: N(t) (and T(t)) after a jump to B.

    Parameters
    ----------
    t : array_like, shape (n,)
        Hold times in s, strictly increasing, >= 0. The fit's initial state is at t = 0.
    atoms : array_like, shape (n,)
        Measured numbers (>= 0): atoms for ``kind="atoms"``, dimers for ``kind="dimers"``.
    atoms_err : array_like, shape (n,)
        One-standard-deviation uncertainties of ``atoms`` (> 0).
    temperature : float or array_like, shape (n,)
        Cloud temperature in nK (> 0): one value per time, or a scalar meaning a single
        measurement of the initial temperature. Required (the density depends on it).
    temperature_err : float or array_like
        Uncertainty of ``temperature`` in nK (> 0), same shape.
    field : float, optional
        Magnetic field in G; converting it to a scattering length needs a resonance at
        fit time. Exactly one of ``field`` and ``a``.
    a : float, optional
        Scattering length in a0 (non-zero; > 0 for dimer curves).
    trap_hz : HarmonicTrap or sequence of 3 floats
        Atomic trap frequencies in Hz (a HarmonicTrap also carries dimer frequencies);
        kept as ``trap_hz`` and ``dimer_trap_hz`` (3 floats each, the dimers' equal to the
        atoms' unless given), from which ``lossfit.experiment.trap.as_trap(curve)``
        builds the trap.
    dimer_trap_hz : sequence of 3 floats, optional
        Dimer trap frequencies in Hz, when ``trap_hz`` is a plain triple.
    kind : {"atoms", "dimers"}
        ``"dimers"``: an atom-dimer mixture whose dimer number is in ``atoms``.
    partner_atoms : float or array_like, optional
        Dimer curves only: atom number of the mixture, a scalar (initial number) or one
        value per time.
    partner_atoms_err : float or array_like, optional
        Uncertainty of ``partner_atoms`` (required when it is an array; for a scalar it
        is the uncertainty of the initial atom number).
    label : str, optional
    trap_depth : float, optional
        The atoms' trap depth U/k_B in nK during the hold (> 0); it decides which
        products of recombination into shallow dimers stay trapped (a > 0). None: a fit
        assumes 10 k_B T0 and records that.
    counts_dimers : bool
        Whether the imaging counts atoms bound in shallow Feshbach dimers (the default:
        near resonance a weakly bound dimer images like its two atoms), so that the
        measured number is N + 2 N_D; False: free atoms only. Atom curves at a > 0.
    """

    def __init__(self, *, t, atoms, atoms_err, temperature=None, temperature_err=None, field=None,
                 a=None, trap_hz=None, dimer_trap_hz=None, kind="atoms", partner_atoms=None,
                 partner_atoms_err=None, label=None, trap_depth=None, counts_dimers=True):
        if kind not in KINDS:
            raise LossfitValueError("kind", f"must be 'atoms' or 'dimers', got {kind!r}")
        self.t = check_times("t", t).astype(float)
        n = self.t.size
        self.atoms = _series("atoms", atoms, n)
        self.atoms_err = _series("atoms_err", atoms_err, n)
        if np.any(self.atoms_err <= 0):
            raise LossfitValueError("atoms_err", "must be positive (a zero error gives infinite weight)")
        if temperature is None:
            raise LossfitValueError("temperature", "is required: the density, hence L3, depends on it; "
                                    "give T(t) in nK per point or the initial temperature as a scalar")
        self.temperature = np.asarray(check_positive("temperature", temperature), dtype=float)
        if self.temperature.ndim not in (0, 1) or (self.temperature.ndim == 1 and self.temperature.size != n):
            raise LossfitValueError("temperature", f"must be a scalar or have {n} entries like t, got "
                                    f"shape {self.temperature.shape}")
        if temperature_err is None:
            raise LossfitValueError("temperature_err", "is required with temperature (nK, > 0)")
        terr = np.asarray(check_positive("temperature_err", temperature_err), dtype=float)
        if terr.shape != self.temperature.shape:
            raise LossfitValueError("temperature_err", f"has shape {terr.shape}, temperature has "
                                    f"{self.temperature.shape}")
        self.temperature_err = terr
        if (field is None) == (a is None):
            raise LossfitValueError("field", "give exactly one of field= (G) and a= (a0)")
        self.field = None if field is None else float(check_finite("field", field))
        self.a = None if a is None else float(check_finite("a", a))
        if self.a == 0.0:
            raise LossfitValueError("a", "must be non-zero (the zero-range theory needs |a| > 0)")
        if kind == "dimers" and self.a is not None and self.a <= 0:
            raise LossfitValueError("a", f"dimer curves need a > 0 (a shallow Feshbach dimer), got {self.a:g} a0")
        self.trap_hz, self.dimer_trap_hz = _trap_frequencies(trap_hz, dimer_trap_hz)
        self.trap_depth = None if trap_depth is None else _positive_scalar("trap_depth", trap_depth)
        if not isinstance(counts_dimers, (bool, np.bool_)):
            raise LossfitValueError("counts_dimers", f"must be True or False, got {counts_dimers!r}")
        self.counts_dimers = bool(counts_dimers)
        self.kind = kind
        if kind == "atoms":
            if partner_atoms is not None or partner_atoms_err is not None:
                raise LossfitValueError("partner_atoms", "only dimer curves have partner atoms")
            self.partner_atoms = self.partner_atoms_err = None
        else:
            if partner_atoms is None:
                raise LossfitValueError("partner_atoms", "dimer curves need the atom number of the mixture "
                                        "(scalar initial number or one value per time)")
            self.partner_atoms = _series("partner_atoms", partner_atoms, n, allow_scalar=True)
            if partner_atoms_err is None:
                if self.partner_atoms.ndim == 1:
                    raise LossfitValueError("partner_atoms_err", "is required when partner_atoms is an array")
                self.partner_atoms_err = None
            else:
                self.partner_atoms_err = np.asarray(check_positive("partner_atoms_err", partner_atoms_err),
                                                    dtype=float)
                if self.partner_atoms_err.shape != self.partner_atoms.shape:
                    raise LossfitValueError("partner_atoms_err", f"has shape {self.partner_atoms_err.shape}, "
                                            f"partner_atoms has {self.partner_atoms.shape}")
        self.label = label or (f"{kind} at {self.field:g} G" if self.field is not None
                               else f"{kind} at a = {self.a:g} a0")
        _readonly(self.t, self.atoms, self.atoms_err, self.temperature, self.temperature_err,
                  self.partner_atoms, self.partner_atoms_err)

    # -- derived ---------------------------------------------------------------------
    def __len__(self):
        return self.t.size

    def __repr__(self):
        where = f"B={self.field:g} G" if self.field is not None else f"a={self.a:g} a0"
        return (f"DecayCurve({self.label!r}, kind={self.kind!r}, {len(self)} points, {where}, "
                f"t={self.t[0]:g}..{self.t[-1]:g} s)")

    @property
    def temperature_series(self):
        """True if ``temperature`` has one value per time (not a single initial value)."""
        return self.temperature.ndim == 1

    @property
    def initial_temperature(self):
        """Best guess of the initial temperature in nK (first measured value)."""
        return float(self.temperature if self.temperature.ndim == 0 else self.temperature[0])

    def scattering_length(self, resonance=None):
        """Scattering length of the curve in a0.

        Parameters
        ----------
        resonance : object with ``.a(B)``, optional
            Needed when the curve was given by its field.

        Returns
        -------
        float
        """
        if self.a is not None:
            return self.a
        if resonance is None or not hasattr(resonance, "a"):
            raise LossfitValueError("resonance", f"curve {self.label!r} is given by its field "
                                    f"({self.field:g} G); pass a resonance (e.g. lf.FeshbachResonance) "
                                    "to convert it to a scattering length")
        a = float(resonance.a(self.field))
        if self.kind == "dimers" and a <= 0:
            raise LossfitValueError("field", f"curve {self.label!r}: at {self.field:g} G the resonance gives "
                                    f"a = {a:g} a0 <= 0, where no Feshbach dimer exists (field on the "
                                    "wrong side of the resonance for beta)")
        if a == 0.0:
            raise LossfitValueError("field", f"curve {self.label!r}: a({self.field:g} G) = 0")
        return a


def _trap_frequencies(trap_hz, dimer_trap_hz):
    """(atom, dimer) trap frequencies in Hz from 3 floats each (the dimers' default: the
    atoms') or a trap object that carries both (``frequencies_hz``,
    ``dimer_frequencies_hz``, as lossfit.HarmonicTrap does)."""
    if trap_hz is None:
        raise LossfitValueError("trap_hz", "trap frequencies are required: give (f_x, f_y, f_z) in Hz "
                                "or a HarmonicTrap")
    atom = getattr(trap_hz, "frequencies_hz", trap_hz)
    dimer = getattr(trap_hz, "dimer_frequencies_hz", atom) if dimer_trap_hz is None else dimer_trap_hz
    return check_frequencies("trap_hz", atom), check_frequencies("dimer_trap_hz", dimer)


def check_curves(curves, name="curves"):
    """Return ``curves`` as a non-empty list of DecayCurve (a single curve is accepted)."""
    curves = [curves] if isinstance(curves, DecayCurve) else list(curves)
    if not curves or not all(isinstance(c, DecayCurve) for c in curves):
        raise LossfitValueError(name, "must be one or more lossfit DecayCurve objects")
    return curves


@dataclass
class Campaign:
    """A measurement campaign read from (or to be written to) a ``lossfit.campaign`` file.

    Attributes
    ----------
    curves : list of DecayCurve
    species : str or None
    resonance : dict or None
        The file's resonance as ``b0`` (G), ``width`` (G), ``a_bg`` (a0) and ``covariance``
        (3 x 3 or None): ``lossfit.FeshbachResonance(**campaign.resonance)`` rebuilds it.
    metadata : dict
    """

    curves: list
    species: str | None = None
    resonance: dict | None = None
    metadata: dict = _dc_field(default_factory=dict)


def _resonance_record(resonance):
    """b0, width, a_bg (finite floats) and covariance (3 x 3 or None) of a resonance given as
    an object or a mapping."""
    get = resonance.get if isinstance(resonance, dict) else (lambda k, d=None: getattr(resonance, k, d))
    record = {}
    for name in ("b0", "width", "a_bg"):
        value = get(name)
        if value is None:
            raise LossfitValueError("resonance", f"needs {name!r} (a FeshbachResonance or a dict with b0, "
                                    f"width, a_bg, covariance); got {type(resonance).__name__}")
        record[name] = float(check_finite(f"resonance.{name}", value))
    cov = get("covariance")
    record["covariance"] = None if cov is None else np.asarray(check_finite("resonance.covariance", cov))
    if record["covariance"] is not None and record["covariance"].shape != (3, 3):
        raise LossfitValueError("resonance", f"covariance must be 3 x 3, got {record['covariance'].shape}")
    return record


def _dataset(g, name, value, units):
    g.create_dataset(name, data=np.asarray(value, dtype=float)).attrs["units"] = units


def write_campaign(path, curves, *, species=None, resonance=None, metadata=None, overwrite=False):
    """Write a campaign to HDF5 in the ``lossfit.campaign`` schema (module docstring).

    The file is written to a temporary file and renamed into place, so an existing file
    is never left half-written; without ``overwrite=True`` an existing file is an error.

    Parameters
    ----------
    path : str or path-like
    curves : DecayCurve or sequence of DecayCurve
    species : str or Species, optional
        Recorded by name.
    resonance : FeshbachResonance or dict, optional
        Recorded with its covariance, if any (anything with ``b0``, ``width``, ``a_bg``
        and ``covariance``, as attributes or keys).
    metadata : dict, optional
        JSON-serialisable notes (apparatus, date, scenario, ...).
    overwrite : bool
    """
    curves = check_curves(curves)
    if resonance is not None:
        resonance = _resonance_record(resonance)
    sp_name = "" if species is None else getattr(species, "name", str(species))
    try:
        meta = json.dumps(metadata or {})
    except TypeError as err:
        raise LossfitValueError("metadata", f"must be JSON-serialisable ({err})") from None
    with atomic_path(path, overwrite=overwrite) as tmp, h5py.File(tmp, "w") as h5:
        write_h5_header(h5, CAMPAIGN_SCHEMA, CAMPAIGN_SCHEMA_VERSION)
        h5.attrs["species"] = sp_name
        h5.attrs["metadata"] = meta
        if resonance is not None:
            r = h5.create_group("resonance")
            _dataset(r, "b0", resonance["b0"], "G")
            _dataset(r, "width", resonance["width"], "G")
            _dataset(r, "a_bg", resonance["a_bg"], "a0")
            if resonance["covariance"] is not None:
                _dataset(r, "covariance", resonance["covariance"], "G,G,a0")
        root = h5.create_group("curves")
        for i, c in enumerate(curves):
            g = root.create_group(f"{i:03d}")
            g.attrs["kind"] = c.kind
            g.attrs["label"] = c.label
            _dataset(g, "t", c.t, "s")
            _dataset(g, "atoms", c.atoms, "count")
            _dataset(g, "atoms_err", c.atoms_err, "count")
            _dataset(g, "temperature", c.temperature, "nK")
            _dataset(g, "temperature_err", c.temperature_err, "nK")
            _dataset(g, "trap_hz", c.trap_hz, "Hz")
            _dataset(g, "dimer_trap_hz", c.dimer_trap_hz, "Hz")
            if c.field is not None:
                _dataset(g, "field", c.field, "G")
            else:
                _dataset(g, "a", c.a, "a0")
            if c.trap_depth is not None:
                _dataset(g, "trap_depth", c.trap_depth, "nK")
            g.attrs["counts_dimers"] = int(c.counts_dimers)
            if c.partner_atoms is not None:
                _dataset(g, "partner_atoms", c.partner_atoms, "count")
                if c.partner_atoms_err is not None:
                    _dataset(g, "partner_atoms_err", c.partner_atoms_err, "count")


_UNITS = {"t": "s", "atoms": "count", "atoms_err": "count", "temperature": "nK",
          "temperature_err": "nK", "trap_hz": "Hz", "dimer_trap_hz": "Hz", "field": "G", "a": "a0",
          "partner_atoms": "count", "partner_atoms_err": "count", "b0": "G", "width": "G", "a_bg": "a0",
          "covariance": "G,G,a0", "trap_depth": "nK"}


def _get(g, name, path, where, optional=False):
    if name not in g:
        if optional:
            return None
        raise LossfitValueError("path", f"{path!r}: {where}/{name} is missing (truncated or foreign file?)")
    units = g[name].attrs.get("units")
    if units != _UNITS[name]:
        raise LossfitValueError("path", f"{path!r}: {where}/{name} has units {units!r}, "
                                f"expected {_UNITS[name]!r}")
    return g[name][()]


def read_campaign(path):
    """Read a ``lossfit.campaign`` HDF5 file.

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    Campaign
    """
    path = os.fspath(path)
    with open_checked_h5(path, CAMPAIGN_SCHEMA, CAMPAIGN_SCHEMA_VERSION) as h5:
        try:
            metadata = json.loads(h5.attrs.get("metadata", "{}"))
            resonance = None
            if "resonance" in h5:
                r = h5["resonance"]
                resonance = {name: _get(r, name, path, "resonance") for name in ("b0", "width", "a_bg")}
                resonance["covariance"] = _get(r, "covariance", path, "resonance", optional=True)
            if "curves" not in h5:
                raise LossfitValueError("path", f"{path!r} has no /curves group (truncated file?)")
            curves = []
            for key in sorted(h5["curves"]):
                g = h5["curves"][key]
                where = f"curves/{key}"
                kw = {name: _get(g, name, path, where) for name in
                      ("t", "atoms", "atoms_err", "temperature", "temperature_err")}
                for name in ("field", "a", "partner_atoms", "partner_atoms_err", "trap_depth"):
                    value = _get(g, name, path, where, optional=True)
                    if value is not None:
                        scalar = np.ndim(value) == 0 and name in ("field", "a", "trap_depth")
                        kw[name] = float(value) if scalar else value
                counts = g.attrs.get("counts_dimers", 1)          # version 1: always counted
                if int(counts) not in (0, 1):
                    raise LossfitValueError("path", f"{path!r}: {where} has counts_dimers = {counts!r}, "
                                            "expected 1 or 0")
                curves.append(DecayCurve(trap_hz=_get(g, "trap_hz", path, where),
                                         dimer_trap_hz=_get(g, "dimer_trap_hz", path, where), kind=str(g.attrs["kind"]),
                                         label=str(g.attrs["label"]), counts_dimers=bool(int(counts)), **kw))
        except (KeyError, OSError) as err:
            raise LossfitValueError("path", f"{path!r} is damaged ({err})") from None
        species = str(h5.attrs.get("species", "")) or None
    if not curves:
        raise LossfitValueError("path", f"{path!r} holds no curves")
    return Campaign(curves=curves, species=species, resonance=resonance, metadata=metadata)


_CSV_REQUIRED = ("t", "atoms", "atoms_err", "temperature", "temperature_err")
_CSV_PER_CURVE = ("field", "a", "kind", "trap_x_hz", "trap_y_hz", "trap_z_hz", "trap_depth", "counts_dimers")
_CSV_FLAGS = {"1": True, "true": True, "yes": True, "0": False, "false": False, "no": False}


def read_curves_csv(path, *, trap_hz=None, kind=None):
    """Import decay curves from a CSV file (columns in the module docstring).

    Parameters
    ----------
    path : str or path-like
    trap_hz : HarmonicTrap or 3 floats in Hz, optional
        Trap of every curve; required unless the file has trap_x_hz, trap_y_hz, trap_z_hz.
    kind : {"atoms", "dimers"}, optional
        Kind of every curve, unless the file has a ``kind`` column (default "atoms").

    Returns
    -------
    list of DecayCurve
    """
    path = os.fspath(path)
    rows, columns = read_csv_table(path, _CSV_REQUIRED)
    if ("field" in columns) == ("a" in columns):
        raise LossfitValueError("path", f"{path!r} needs exactly one of the columns 'field' (G) and 'a' (a0)")
    has_trap = all(c in columns for c in ("trap_x_hz", "trap_y_hz", "trap_z_hz"))
    if not has_trap and trap_hz is None:
        raise LossfitValueError("trap_hz", "trap frequencies are required: pass trap_hz=(f_x, f_y, f_z) in Hz "
                                "or add trap_x_hz, trap_y_hz, trap_z_hz columns")
    if not rows:
        raise LossfitValueError("path", f"{path!r} has no data rows")
    groups = {}
    for i, r in enumerate(rows):
        groups.setdefault(r.get("curve", ""), []).append((i, r))

    def num(i, r, c):
        try:
            return float(r[c])
        except (TypeError, ValueError):
            raise LossfitValueError("path", f"{path!r} data row {i + 1}: column {c!r} is not a number "
                                    f"({r[c]!r})") from None

    curves = []
    for name, members in groups.items():
        per_curve = {}
        for c in _CSV_PER_CURVE:
            if c in columns:
                values = {r[c] for _, r in members}
                if len(values) > 1:
                    raise LossfitValueError("path", f"{path!r}: column {c!r} must be constant within curve "
                                            f"{name!r}, got {sorted(values)}")
                per_curve[c] = values.pop()
        kw = {c: [num(i, r, c) for i, r in members] for c in _CSV_REQUIRED}
        for c in ("partner_atoms", "partner_atoms_err"):
            if c in columns:
                kw[c] = [num(i, r, c) for i, r in members]
        where = "field" if "field" in columns else "a"
        kw[where] = num(members[0][0], members[0][1], where)
        trap = ([num(members[0][0], members[0][1], c) for c in ("trap_x_hz", "trap_y_hz", "trap_z_hz")]
                if has_trap else trap_hz)
        if per_curve.get("trap_depth"):
            kw["trap_depth"] = num(members[0][0], members[0][1], "trap_depth")
        if per_curve.get("counts_dimers"):
            flag = per_curve["counts_dimers"].lower()
            if flag not in _CSV_FLAGS:
                raise LossfitValueError("path", f"{path!r}: column 'counts_dimers' of curve {name!r} must be "
                                        f"1/0, true/false or yes/no, got {per_curve['counts_dimers']!r}")
            kw["counts_dimers"] = _CSV_FLAGS[flag]
        curves.append(DecayCurve(trap_hz=trap, kind=per_curve.get("kind") or kind or "atoms",
                                 label=name or None, **kw))
    return curves
