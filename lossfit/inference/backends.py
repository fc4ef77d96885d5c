"""Chain storage: an in-memory emcee backend that checkpoints to HDF5 atomically.

emcee's own HDF5 backend appends to the file at every step; a job killed during a
write can leave a damaged file. :class:`CheckpointBackend` keeps the chain in memory
(emcee's :class:`emcee.backends.Backend`) and every ``every`` steps writes a complete
snapshot to a temporary file beside the target, then renames it over the target, so
the file on disk is always a complete, consistent chain that ends at a checkpoint.

File schema ``lossfit.chains``, version 1: attributes ``schema``, ``schema_version``,
``iteration``, ``names`` (JSON list), ``metadata`` (JSON object: job text, provenance);
datasets ``chain`` (steps, walkers, ndim; sampling coordinates theta = ln|value|),
``log_prob`` (steps, walkers), ``accepted`` (walkers) and ``random_state/*`` (the
state of emcee's numpy RandomState after the last stored step, so that a resumed run
continues exactly as an uninterrupted one).
"""

__all__ = ["CheckpointBackend", "read_chain_file", "CHAIN_SCHEMA", "CHAIN_SCHEMA_VERSION"]

import json
import os

import emcee
import h5py
import numpy as np

from .._io import atomic_path
from ..errors import LossfitValueError

CHAIN_SCHEMA = "lossfit.chains"
CHAIN_SCHEMA_VERSION = 1


def _open_checked(path):
    try:
        h5 = h5py.File(path, "r")
    except OSError as err:
        raise LossfitValueError("backend", f"{path!r} is truncated or not an HDF5 file ({err}); "
                                "move it away to start afresh") from None
    if h5.attrs.get("schema") != CHAIN_SCHEMA:
        h5.close()
        raise LossfitValueError("backend", f"{path!r} is not a lossfit chain file "
                                f"(schema {h5.attrs.get('schema')!r})")
    version = int(h5.attrs.get("schema_version", -1))
    if not 1 <= version <= CHAIN_SCHEMA_VERSION:
        h5.close()
        raise LossfitValueError("backend", f"{path!r} has chain schema version {version}")
    return h5


def read_chain_file(path):
    """Read a chain file: dict with chain, log_prob, accepted, iteration, names, metadata."""
    path = os.fspath(path)
    if not os.path.exists(path):
        raise LossfitValueError("backend", f"no such chain file {path!r}")
    with _open_checked(path) as h5:
        try:
            n = int(h5.attrs["iteration"])
            out = {"chain": h5["chain"][:n], "log_prob": h5["log_prob"][:n],
                   "accepted": h5["accepted"][()], "iteration": n,
                   "names": json.loads(h5.attrs["names"]),
                   "metadata": json.loads(h5.attrs["metadata"])}
            rs = h5["random_state"]
            out["random_state"] = (str(rs.attrs["name"]), rs["key"][()], int(rs.attrs["pos"]),
                                   int(rs.attrs["has_gauss"]), float(rs.attrs["cached_gaussian"]))
        except (KeyError, OSError, ValueError) as err:
            raise LossfitValueError("backend", f"{path!r} is damaged ({err}); move it away to "
                                    "start afresh") from None
    if out["chain"].shape[0] != n or out["log_prob"].shape[0] != n:
        raise LossfitValueError("backend", f"{path!r} is damaged: {n} steps announced, "
                                f"{out['chain'].shape[0]} stored")
    return out


class CheckpointBackend(emcee.backends.Backend):
    """In-memory emcee backend with atomic HDF5 checkpoints.

    Parameters
    ----------
    path : str or path-like
        Chain file. An existing file is loaded (and then extended); a damaged one is an
        error naming ``backend``.
    every : int
        Steps between checkpoints (the final state is always written by :meth:`flush`).
    names : sequence of str, optional
        Parameter names, stored in the file.
    metadata : dict, optional
        JSON-serialisable provenance stored in the file (job text, versions, ...).
    """

    def __init__(self, path, *, every=100, names=None, metadata=None):
        super().__init__()
        if not isinstance(every, (int, np.integer)) or every < 1:
            raise LossfitValueError("every", f"must be a positive integer, got {every!r}")
        self.path = os.fspath(path)
        self.every = int(every)
        self.names = list(names or [])
        self.metadata = dict(metadata or {})
        self._since_flush = 0
        #: The sampler's live numpy RandomState while it runs (lossfit.inference.sampling):
        #: its state is read when a checkpoint is written, not copied at every step.
        self.generator = None
        if os.path.exists(self.path):
            stored = read_chain_file(self.path)
            if stored["iteration"]:
                nwalkers, ndim = stored["chain"].shape[1:]
                super().reset(nwalkers, ndim)
                self.chain = stored["chain"].copy()
                self.log_prob = stored["log_prob"].copy()
                self.accepted = stored["accepted"].astype(float)
                self.iteration = stored["iteration"]
                self.random_state = stored["random_state"]
                self.stored_names = stored["names"]
                self.names = self.names or stored["names"]
                self.stored_metadata = stored["metadata"]

    def reset(self, nwalkers, ndim):
        super().reset(nwalkers, ndim)
        self._since_flush = 0

    def save_step(self, state, accepted):
        super().save_step(state, accepted)
        self._since_flush += 1
        if self._since_flush >= self.every:
            self.flush()

    def flush(self):
        """Write the chain so far to the file (temporary file, then atomic rename)."""
        if not self.initialized:
            return
        if self.generator is not None:
            self.random_state = self.generator.get_state()
        n = self.iteration
        with atomic_path(self.path) as tmp, h5py.File(tmp, "w") as h5:
            h5.attrs["schema"] = CHAIN_SCHEMA
            h5.attrs["schema_version"] = CHAIN_SCHEMA_VERSION
            h5.attrs["iteration"] = n
            h5.attrs["names"] = json.dumps(self.names)
            h5.attrs["metadata"] = json.dumps(self.metadata, default=str)
            h5.create_dataset("chain", data=self.chain[:n])
            h5.create_dataset("log_prob", data=self.log_prob[:n])
            h5.create_dataset("accepted", data=self.accepted)
            g = h5.create_group("random_state")
            if self.random_state is not None:
                name, key, pos, has_gauss, cached = self.random_state
                g.attrs["name"] = name
                g.create_dataset("key", data=np.asarray(key))
                g.attrs["pos"] = int(pos)
                g.attrs["has_gauss"] = int(has_gauss)
                g.attrs["cached_gaussian"] = float(cached)
        self._since_flush = 0
