"""Published Efimov measurements for identical bosons, for placing a fit among them.

:func:`published_results` returns the table: the first Efimov resonance a_- of
three-body loss measured in thermal or nearly thermal gases of identical bosons, with the
Feshbach resonance it was tuned with, the inelasticity eta_- and the temperature where
the paper gives them, and a full citation. a_-/r_vdW is computed from lossfit's own
r_vdW of the species (:mod:`lossfit.species`), so the column always matches
``a_minus / lf.species(species).r_vdw``; a paper's own ratio may differ in the last digit
because it used another C6.

Provenance. Each shipped row records, item by item, where it was verified: the citation's
authors, its journal reference (journal, volume, page, year), and each number of the row
(``field_G``, ``a_minus``, ``a_minus_err``, and ``eta_minus`` and ``temperature_nK``
where the row gives them). An item is either verified, with the address of the page that
states it (the last element of each entry of :data:`PUBLISHED_ROWS`), or
:data:`FROM_MEMORY`. The rule: a number counts as verified only where the paper's own
abstract or text states it. None of the four papers states its numbers in its abstract,
and the pages that could be read showed abstracts and opening paragraphs only, so every
number is still from memory; the authors of every row and the journal references of
three papers are verified (the ``checked`` column says which, ``source_checked`` lists
the addresses). ³⁹K is left out on purpose (the one species whose a_-/r_vdW was reported
to stand apart from the others). Users add rows, their own or other published ones, from
a CSV file with the same columns (``published_results(extra="my_rows.csv")``).

Units: a in a0, fields in G, temperatures in nK.
"""

__all__ = ["COLUMNS", "FROM_MEMORY", "PROVENANCE_ITEMS", "PUBLISHED_ROWS", "published_results"]

import csv
import math
import os

from .errors import LossfitValueError, is_real
from .species import species as lookup_species

#: Columns of the table, in order. ``a_minus_over_rvdw`` is computed, never typed in;
#: ``checked`` and ``source_checked`` are rendered from a shipped row's provenance.
COLUMNS = ("species", "field_G", "a_minus", "a_minus_err", "a_minus_over_rvdw", "eta_minus", "temperature_nK",
           "citation", "checked", "source_checked")

#: The mark of an item that could not be verified in the paper's abstract or text.
FROM_MEMORY = "from memory"

#: The items a shipped row's provenance accounts for, with the words ``checked`` uses:
#: the citation's authors, its journal reference, and each number of the row
#: (``eta_minus`` and ``temperature_nK`` only where the row gives them).
PROVENANCE_ITEMS = {
    "authors": "authors",
    "journal_ref": "journal reference (journal, volume, page, year)",
    "field_G": "field_G",
    "a_minus": "a_minus",
    "a_minus_err": "a_minus_err",
    "eta_minus": "eta_minus",
    "temperature_nK": "temperature_nK",
}

#: Four resonances of one paper (133Cs): its citation and provenance once.
_BERNINGER_2011 = ("M. Berninger, A. Zenesini, B. Huang, W. Harm, H.-C. Nägerl, F. Ferlaino, R. Grimm, "
                   "P. S. Julienne and J. M. Hutson, Phys. Rev. Lett. 107, 120401 (2011)")
# the publisher's abstract page: authors, title, Phys. Rev. Lett. 107, 120401, published 14 September 2011
_APS_BERNINGER = "http://link.aps.org/doi/10.1103/PhysRevLett.107.120401"
_NUMBERS_FROM_MEMORY = {"field_G": FROM_MEMORY, "a_minus": FROM_MEMORY, "a_minus_err": FROM_MEMORY}


def _provenance(authors, journal_ref, **numbers):
    """One row's provenance: every number from memory unless given an address."""
    return {"authors": authors, "journal_ref": journal_ref, **_NUMBERS_FROM_MEMORY, **numbers}


#: The shipped rows: species, Feshbach resonance (G), a_- and its error (a0), eta_- (None where
#: not recorded here), temperature (nK, None where not recorded here), citation, and the
#: provenance: for each item of :data:`PROVENANCE_ITEMS` the row has, the address (or
#: addresses) of the page where it was read, or :data:`FROM_MEMORY`.
PUBLISHED_ROWS = (
    ("133Cs", -11.7, -850.0, 20.0, 0.06, 10.0,
     "T. Kraemer, M. Mark, P. Waldburger, J. G. Danzl, C. Chin, B. Engeser, A. D. Lange, K. Pilch, A. Jaakkola, "
     "H.-C. Nägerl and R. Grimm, Nature 440, 315 (2006)",
     # authors and title: the arXiv abstract page; the journal, the title and the abstract
     # (no numbers): the publisher's page; "Nature (London) 440, 315 (2006)": the abstract
     # of a later paper (M. D. Lee, T. Köhler and P. S. Julienne) that discusses this one
     _provenance(authors="https://arxiv.org/abs/cond-mat/0512394",
                 journal_ref=("https://www.nature.com/articles/nature04626",
                              "https://tomesphere.com/paper/cond-mat/0702178"),
                 eta_minus=FROM_MEMORY, temperature_nK=FROM_MEMORY)),
    ("133Cs", -11.7, -872.0, 22.0, 0.10, None,
     _BERNINGER_2011, _provenance(_APS_BERNINGER, _APS_BERNINGER, eta_minus=FROM_MEMORY)),
    ("133Cs", 548.8, -955.0, 28.0, 0.12, None,
     _BERNINGER_2011, _provenance(_APS_BERNINGER, _APS_BERNINGER, eta_minus=FROM_MEMORY)),
    ("133Cs", 786.8, -1029.0, 58.0, 0.19, None,
     _BERNINGER_2011, _provenance(_APS_BERNINGER, _APS_BERNINGER, eta_minus=FROM_MEMORY)),
    ("133Cs", 853.0, -957.0, 80.0, 0.08, None,
     _BERNINGER_2011, _provenance(_APS_BERNINGER, _APS_BERNINGER, eta_minus=FROM_MEMORY)),
    ("85Rb", 155.0, -759.0, 6.0, 0.057, None,
     "R. J. Wild, P. Makotyn, J. M. Pino, E. A. Cornell and D. S. Jin, Phys. Rev. Lett. 108, 145305 (2012)",
     # authors and the arXiv abstract (1112.0362: an Efimov resonance of 85Rb located with
     # loss measurements, no numbers); no page read states the journal reference
     _provenance(authors="https://tomesphere.com/paper/1112.0362", journal_ref=FROM_MEMORY,
                 eta_minus=FROM_MEMORY)),
    ("7Li", 894.0, -264.0, 11.0, None, None,
     "N. Gross, Z. Shotan, S. Kokkelmans and L. Khaykovich, Phys. Rev. Lett. 103, 163202 (2009)",
     # authors and title: the opening of the paper's arXiv text (0906.4731); "Phys. Rev. Lett. 103
     # 163202, (2009)": the abstract of the same authors' next paper (1003.4891)
     _provenance(authors="https://www.arxiv-vanity.com/papers/0906.4731/",
                 journal_ref="https://www.arxiv-vanity.com/papers/1003.4891/")),
)

_NUMERIC = ("field_G", "a_minus", "a_minus_err", "eta_minus", "temperature_nK")
_OPTIONAL = ("eta_minus", "temperature_nK", "checked", "source_checked", "a_minus_over_rvdw")
_TEXT = ("checked", "source_checked")


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
    for column in _TEXT:
        text = entry.get(column)
        row[column] = "" if text is None or (is_real(text) and math.isnan(text)) else str(text).strip()
    return {c: row[c] for c in COLUMNS}


def _addresses(where):
    """The addresses of one provenance item, as a tuple (empty for :data:`FROM_MEMORY`)."""
    if where == FROM_MEMORY:
        return ()
    return (where,) if isinstance(where, str) else tuple(where)


def _render_provenance(provenance, values):
    """The ``checked`` and ``source_checked`` texts of a shipped row from its provenance.

    ``checked`` names each verified item with the address(es) it was read at (items read
    at the same pages together), then the items from memory; ``source_checked`` lists
    every address read, once, in order.
    ``values`` holds the row's numbers: eta_minus and temperature_nK count only where given.
    """
    items = [k for k in PROVENANCE_ITEMS if k in ("authors", "journal_ref") or values.get(k) is not None]
    if set(items) != set(provenance):
        raise RuntimeError(f"shipped row provenance must name exactly {items}, got {sorted(provenance)}")
    verified = []                                     # [labels, addresses], items read at the same pages joined
    for k in items:
        if provenance[k] == FROM_MEMORY:
            continue
        if verified and verified[-1][1] == _addresses(provenance[k]):
            verified[-1][0].append(PROVENANCE_ITEMS[k])
        else:
            verified.append([[PROVENANCE_ITEMS[k]], _addresses(provenance[k])])
    remembered = [PROVENANCE_ITEMS[k] for k in items if provenance[k] == FROM_MEMORY]
    parts = []
    if verified:
        parts.append("verified: " + "; ".join(f"{', '.join(labels)} at {' and '.join(addresses)}"
                                              for labels, addresses in verified))
    if remembered:
        parts.append(f"{FROM_MEMORY} (stated by no page read): " + ", ".join(remembered))
    sources = []
    for k in items:
        sources += [a for a in _addresses(provenance[k]) if a not in sources]
    return ". ".join(parts), " ".join(sources)


def _shipped_row(entry, where):
    """One row of :data:`PUBLISHED_ROWS` as a checked dict, its provenance rendered."""
    species, field, a_minus, err, eta, temperature, citation, provenance = entry
    values = {"species": species, "field_G": field, "a_minus": a_minus, "a_minus_err": err, "eta_minus": eta,
              "temperature_nK": temperature, "citation": citation}
    values["checked"], values["source_checked"] = _render_provenance(provenance, values)
    return _row(values, where)


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
        ``temperature_nK``, ``checked``, ``source_checked`` optional, free text;
        ``a_minus_over_rvdw`` is recomputed), or a list of dicts with the same keys. a in a0,
        fields in G, temperatures in nK.
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
        (authors, journal, volume, page, year), checked (for a shipped row: each verified
        item with the address it was read at, then the items marked "from memory") and
        source_checked (the addresses read, separated by spaces; empty where none).

    Raises
    ------
    LossfitValueError
        For a missing or unknown column, a non-numeric or non-finite value, a_minus >= 0,
        a negative error, an empty citation or an unknown species (the message names the
        file and line).
    """
    rows = [_shipped_row(entry, f"shipped row {i + 1}") for i, entry in enumerate(PUBLISHED_ROWS)]
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
