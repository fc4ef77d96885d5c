"""File plumbing shared by every reader and writer: atomic replacement, the HDF5 header
(schema, version, writing lossfit version) and its check, CSV tables."""

import contextlib
import csv
import os
import tempfile

import h5py

from ._version import __version__
from .errors import LossfitValueError


def _umask():
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_path(path, *, overwrite=True, argument="path"):
    """Yield a temporary path beside ``path``; on success rename it over ``path``.

    A crash or an exception leaves any existing ``path`` untouched and removes the
    temporary file. With ``overwrite=False`` an existing ``path`` is an error.
    """
    path = os.fspath(path)
    if not overwrite and os.path.exists(path):
        raise LossfitValueError(argument, f"{path!r} exists; pass overwrite=True to replace it")
    folder = os.path.dirname(os.path.abspath(path))
    if os.path.isdir(path):
        raise LossfitValueError(argument, f"{path!r} is a folder; give a file name")
    if not os.path.isdir(folder):
        raise LossfitValueError(argument, f"the folder {folder!r} does not exist (lossfit creates no folders "
                                "for a file)")
    if not os.access(folder, os.W_OK):
        raise LossfitValueError(argument, f"the folder {folder!r} is not writable")
    ext = os.path.splitext(path)[1]
    fd, tmp = tempfile.mkstemp(suffix=ext + ".tmp" if ext not in (".png", ".pdf") else ext,
                               dir=os.path.dirname(os.path.abspath(path)))
    os.close(fd)
    os.chmod(tmp, 0o666 & ~_umask())
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise


def write_h5_header(h5, schema, version):
    """Stamp an open HDF5 file with its schema, schema version and the writing lossfit."""
    h5.attrs["schema"] = schema
    h5.attrs["schema_version"] = version
    h5.attrs["lossfit_version"] = __version__


def open_checked_h5(path, schema, max_version, *, argument="path"):
    """Open a lossfit HDF5 file for reading after checking its schema and version.

    Missing, truncated or foreign files and newer versions raise
    :class:`lossfit.errors.LossfitValueError` naming ``argument``; the caller closes the
    returned :class:`h5py.File` (use it in a ``with`` block).
    """
    path = os.fspath(path)
    if not os.path.exists(path):
        raise LossfitValueError(argument, f"no such file {path!r}")
    try:
        h5 = h5py.File(path, "r")
    except OSError as err:
        raise LossfitValueError(argument, f"{path!r} is truncated or not an HDF5 file that can be "
                                f"read ({err})") from None
    found = h5.attrs.get("schema")
    version = int(h5.attrs.get("schema_version", -1))
    if found != schema:
        h5.close()
        raise LossfitValueError(argument, f"{path!r} has schema {found!r}, expected {schema!r}")
    if not 1 <= version <= max_version:
        h5.close()
        raise LossfitValueError(argument, f"{path!r} has {schema} schema version {version}; this "
                                f"lossfit reads versions 1..{max_version}")
    return h5


def _is_hdf5(path):
    with open(path, "rb") as fh:
        return fh.read(8) == b"\x89HDF\r\n\x1a\n"


def read_csv_table(path, required, rename=None):
    """Rows (dicts of stripped strings) and column names of a CSV file with a header.

    Blank lines and lines starting with ``#`` are skipped; ``rename`` maps each stripped
    header to the name the rows use. Raises LossfitValueError naming ``path`` for a
    missing file or missing ``required`` columns.
    """
    path = os.fspath(path)
    if not os.path.exists(path):
        raise LossfitValueError("path", f"no such file {path!r}")
    if os.path.isdir(path):
        raise LossfitValueError("path", f"{path!r} is a folder, not a CSV file")
    try:
        # utf-8-sig: spreadsheet programs start their CSV files with a byte-order mark
        with open(path, newline="", encoding="utf-8-sig") as fh:
            lines = [ln for ln in fh if ln.strip() and not ln.lstrip().startswith("#")]
    except UnicodeDecodeError:
        kind = "an HDF5 file" if _is_hdf5(path) else "not a text file"
        raise LossfitValueError("path", f"{path!r} is {kind}, not a CSV table"
                                + (" (use read_spectra or read_campaign)" if kind == "an HDF5 file" else "")) from None
    reader = csv.DictReader(lines, skipinitialspace=True)
    rename = rename or (lambda c: c)
    rows = [{rename((k or "").strip()): (v or "").strip() for k, v in r.items()} for r in reader]
    columns = [rename(c.strip()) for c in (reader.fieldnames or [])]
    missing = [c for c in required if c not in columns]
    if missing:
        raise LossfitValueError("path", f"{path!r} lacks column(s) {missing}; header is {columns}")
    return rows, columns
