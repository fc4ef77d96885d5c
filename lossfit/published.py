"""Published Efimov measurements for identical bosons, for placing a fit among them.

:func:`published_results` returns the table: the first Efimov resonance a_- of
three-body loss measured in thermal or nearly thermal gases of identical bosons, with the
Feshbach resonance it was tuned with, the inelasticity eta_- and the temperature where
the paper gives them, and a full citation. a_-/r_vdW is computed from lossfit's own
r_vdW of the species (:mod:`lossfit.species`), so the column always matches
``a_minus / lf.species(species).r_vdw``; a paper's own ratio may differ in the last digit
because it used another C6.

Provenance. No number in the table could be checked against the paper's text in the
sources available to the project: the ``checked`` column says "from memory" for every
value, and names what was checked (authors and title against the paper's abstract, for
all rows but the first). ³⁹K is left out on purpose (the one species whose a_-/r_vdW was
reported to stand apart from the others). Users add rows, their own or other published ones, from a CSV file with the
same columns (``published_results(extra="my_rows.csv")``).

Units: a in a0, fields in G, temperatures in nK.
"""

__all__ = ["COLUMNS", "PUBLISHED_ROWS", "published_results"]

import csv
import math
import os

from .errors import LossfitValueError, is_real
from .species import species as lookup_species

#: Columns of the table, in order. ``a_minus_over_rvdw`` is computed, never typed in.
COLUMNS = ("species", "field_G", "a_minus", "a_minus_err", "a_minus_over_rvdw", "eta_minus", "temperature_nK",
           "citation", "checked")

_FROM_MEMORY = ("values and journal reference from memory (not verified in the paper's text); authors and title "
                "checked in the abstract")
#: Four resonances of one paper (133Cs): its citation once.
_BERNINGER_2011 = ("M. Berninger, A. Zenesini, B. Huang, W. Harm, H.-C. Nägerl, F. Ferlaino, R. Grimm, "
                   "P. S. Julienne and J. M. Hutson, Phys. Rev. Lett. 107, 120401 (2011)")

#: The shipped rows: species, Feshbach resonance (G), a_- and its error (a0), eta_- (None where
#: not recorded here), temperature (nK, None where not recorded here), citation, what was checked.
PUBLISHED_ROWS = (
    ("133Cs", -11.7, -850.0, 20.0, 0.06, 10.0,
     "T. Kraemer, M. Mark, P. Waldburger, J. G. Danzl, C. Chin, B. Engeser, A. D. Lange, K. Pilch, A. Jaakkola, "
     "H.-C. Nägerl and R. Grimm, Nature 440, 315 (2006)",
     "values and citation from memory"),
    ("133Cs", -11.7, -872.0, 22.0, 0.10, None,
     _BERNINGER_2011, _FROM_MEMORY),
    ("133Cs", 548.8, -955.0, 28.0, 0.12, None,
     _BERNINGER_2011, _FROM_MEMORY),
    ("133Cs", 786.8, -1029.0, 58.0, 0.19, None,
     _BERNINGER_2011, _FROM_MEMORY),
    ("133Cs", 853.0, -957.0, 80.0, 0.08, None,
     _BERNINGER_2011, _FROM_MEMORY),
    ("85Rb", 155.0, -759.0, 6.0, 0.057, None,
     "R. J. Wild, P. Makotyn, J. M. Pino, E. A. Cornell and D. S. Jin, Phys. Rev. Lett. 108, 145305 (2012)",
     "values and journal reference from memory (not verified in the paper's text); authors and the located "
     "85Rb Efimov resonance checked in the abstract"),
    ("7Li", 894.0, -264.0, 11.0, None, None,
     "N. Gross, Z. Shotan, S. Kokkelmans and L. Khaykovich, Phys. Rev. Lett. 103, 163202 (2009)",
     "values from memory (not verified in the paper's text); authors, journal, volume and page checked "
     "(abstract, and the citation in a later paper's abstract)"),
)

_NUMERIC = ("field_G", "a_minus", "a_minus_err", "eta_minus", "temperature_nK")
_OPTIONAL = ("eta_minus", "temperature_nK", "checked", "a_minus_over_rvdw")


def _number(value, column, where, *, optional):
    """A float from a table cell; None for an empty optional cell."""
    if value is None or (isinstance(value, str) and value.strip() == "") or (
            is_real(value) and math.isnan(value)):
        if optional:
            return None
        raise LossfitValueError("extra", f"{where}: column {column!r} is empty")
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise LossfitValueError("extra", f"{where}: column {column!r} must be a number, got {value!r}") from None
    if not math.isfinite(number):
        raise LossfitValueError("extra", f"{where}: column {column!r} must be finite, got {value!r}")
    return number


def _row(entry, where):
    """One checked row (a dict of :data:`COLUMNS`) from a mapping of its columns."""
    missing = [c for c in COLUMNS if c not in _OPTIONAL and c not in entry]
    if missing:
        raise LossfitValueError("extra", f"{where}: missing column(s) {', '.join(missing)}; "
                                         f"columns: {', '.join(COLUMNS)}")
    unknown = [c for c in entry if c not in COLUMNS]
    if unknown:
        raise LossfitValueError("extra", f"{where}: unknown column(s) {', '.join(map(str, unknown))}; "
                                         f"columns: {', '.join(COLUMNS)}")
    row = {"species": str(entry["species"]).strip()}
    for column in _NUMERIC:
        row[column] = _number(entry.get(column), column, where, optional=column in _OPTIONAL)
    if row["a_minus"] >= 0:
        raise LossfitValueError("extra", f"{where}: a_minus must be negative (a0), got {row['a_minus']:g}")
    if row["a_minus_err"] < 0:
        raise LossfitValueError("extra", f"{where}: a_minus_err must be >= 0 (a0), got {row['a_minus_err']:g}")
    citation = str(entry["citation"]).strip()
    if not citation:
        raise LossfitValueError("extra", f"{where}: every row needs a citation")
    try:
        r_vdw = lookup_species(row["species"]).r_vdw
    except LossfitValueError as exc:
        raise LossfitValueError("extra", f"{where}: {exc}") from None
    row["a_minus_over_rvdw"] = row["a_minus"] / r_vdw
    row["citation"] = citation
    checked = entry.get("checked")
    row["checked"] = "" if checked is None or (is_real(checked) and math.isnan(checked)) else str(checked)
    return {c: row[c] for c in COLUMNS}


def _read_rows(path):
    """The rows of a CSV file with a header of :data:`COLUMNS` (``a_minus_over_rvdw`` optional
    and recomputed)."""
    if not os.path.isfile(path):
        raise LossfitValueError("extra", f"no such file: {path!r}")
    with open(path, newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        if reader.fieldnames is None:
            raise LossfitValueError("extra", f"{path}: the file is empty; columns: {', '.join(COLUMNS)}")
        return [_row({k.strip(): v for k, v in entry.items() if k is not None}, f"{path}, line {i + 2}")
                for i, entry in enumerate(reader)]


def published_results(extra=None, *, as_frame=None):
    """Published Efimov resonances a_- of identical bosons, with lossfit's a_-/r_vdW.

    Parameters
    ----------
    extra : str, os.PathLike or list of dict, optional
        More rows: a CSV file whose header names the columns (``species``, ``field_G``,
        ``a_minus``, ``a_minus_err``, ``citation`` required; ``eta_minus``,
        ``temperature_nK``, ``checked`` optional; ``a_minus_over_rvdw`` is recomputed),
        or a list of dicts with the same keys. a in a0, fields in G, temperatures in nK.
    as_frame : bool, optional
        True for a pandas DataFrame, False for a list of dicts; by default a DataFrame when
        pandas is installed.

    Returns
    -------
    pandas.DataFrame or list of dict
        One row per measurement, columns :data:`COLUMNS`: species (a name
        :func:`lossfit.species` knows), field_G (the Feshbach resonance, G), a_minus and
        a_minus_err (a0), a_minus_over_rvdw (a_minus over lossfit's r_vdW of the species),
        eta_minus (None where not given), temperature_nK (None where not given), citation
        (authors, journal, volume, page, year) and checked (what was verified, and what is
        quoted from memory).

    Raises
    ------
    LossfitValueError
        For a missing or unknown column, a non-numeric or non-finite value, a_minus >= 0,
        a negative error, an empty citation or an unknown species (the message names the
        file and line).
    """
    rows = [_row(dict(zip(("species", "field_G", "a_minus", "a_minus_err", "eta_minus", "temperature_nK",
                           "citation", "checked"), entry)), f"shipped row {i + 1}")
            for i, entry in enumerate(PUBLISHED_ROWS)]
    if extra is not None:
        if isinstance(extra, (str, os.PathLike)):
            rows += _read_rows(os.fspath(extra))
        elif isinstance(extra, (list, tuple)) and all(isinstance(e, dict) for e in extra):
            rows += [_row(e, f"extra row {i + 1}") for i, e in enumerate(extra)]
        else:
            raise LossfitValueError("extra", f"must be a CSV path or a list of dicts, got {type(extra).__name__}")
    if as_frame is None or as_frame:
        # pandas is optional: without it the table is a list of dicts
        try:
            import pandas as pd
        except ImportError:
            if as_frame:
                raise LossfitValueError("as_frame", "True needs pandas (pip install pandas)") from None
            return rows
        return pd.DataFrame(rows, columns=list(COLUMNS))
    return rows
