"""Calibration data: measured Feshbach-dimer binding energies against the field.

CSV format: a header naming the columns ``B`` (G), ``E_b`` and ``E_b_err`` (E_b/h and its
one-sigma error in kHz), in any order, extra columns ignored; ``#`` starts a comment line.
"""

__all__ = ["read_binding_energies"]

import os

import numpy as np

from .._io import read_csv_table
from ..errors import LossfitValueError, check_finite, check_positive


def read_binding_energies(path):
    """Read binding energies from a CSV file (module docstring).

    Returns
    -------
    (B, E_b_kHz, E_b_err) : ndarrays
        Fields in G, E_b/h and its error in kHz.
    """
    path = os.fspath(path)
    rows, _ = read_csv_table(path, ("B", "E_b", "E_b_err"))
    if not rows:
        raise LossfitValueError("path", f"{path!r} has no data rows")
    cols = {}
    for c in ("B", "E_b", "E_b_err"):
        try:
            cols[c] = np.array([float(r[c]) for r in rows])
        except (TypeError, ValueError) as err:
            raise LossfitValueError("path", f"{path!r}: column {c!r} has a non-numeric entry ({err})") from None
    return (check_finite("B", cols["B"]), check_positive("E_b", cols["E_b"]),
            check_positive("E_b_err", cols["E_b_err"]))
