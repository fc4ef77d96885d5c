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
