"""Provenance stored with every result: versions, revision, host, times, seed."""

__all__ = ["provenance", "now_utc", "git_revision"]

import datetime
import os
import platform
import socket
import subprocess

import emcee
import h5py
import numba
import numpy
import scipy

from .._version import __version__


def now_utc():
    """ISO 8601 UTC timestamp."""
    return datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")


def git_revision():
    """Git revision of this checkout (with -dirty for local changes), or None."""
    here = os.path.dirname(os.path.abspath(__file__))
    try:
        out = subprocess.run(["git", "-C", here, "rev-parse", "HEAD"], capture_output=True, text=True,
                             timeout=5)
    except (OSError, subprocess.SubprocessError):
        return None
    if out.returncode != 0:
        return None
    dirty = subprocess.run(["git", "-C", here, "status", "--porcelain", "--untracked-files=no"],
                           capture_output=True, text=True, timeout=5).stdout.strip()
    return out.stdout.strip() + ("-dirty" if dirty else "")


def provenance(**extra):
    """Dict of lossfit version, git revision (when installed from a checkout), versions
    of numpy/scipy/numba/emcee/h5py, Python, host, process id and a UTC timestamp,
    updated with ``extra`` (job text, seed, ...)."""
    info = {"lossfit_version": __version__, "git_revision": git_revision(),
            "numpy": numpy.__version__, "scipy": scipy.__version__, "numba": numba.__version__,
            "emcee": emcee.__version__, "h5py": h5py.__version__, "python": platform.python_version(),
            "host": socket.gethostname(), "pid": os.getpid(), "time_utc": now_utc()}
    info.update(extra)
    return info
