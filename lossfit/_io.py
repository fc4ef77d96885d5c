"""Atomic file replacement shared by every writer of results."""

import contextlib
import os
import tempfile


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
    from .errors import LossfitValueError
    path = os.fspath(path)
    if not overwrite and os.path.exists(path):
        raise LossfitValueError(argument, f"{path!r} exists; pass overwrite=True to replace it")
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


def open_checked_h5(path, schema, max_version, *, argument="path"):
    """Open a lossfit HDF5 file for reading after checking its schema and version.

    Missing, truncated or foreign files and newer versions raise
    :class:`lossfit.errors.LossfitValueError` naming ``argument``; the caller closes the
    returned :class:`h5py.File` (use it in a ``with`` block).
    """
    import h5py
    from .errors import LossfitValueError
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
