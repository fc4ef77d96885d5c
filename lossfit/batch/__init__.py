"""Batch work: job files (:mod:`.jobs`), running them to a results folder (:mod:`.runner`),
provenance records (:mod:`.provenance`) and the built-in demo (:mod:`.demo`).

Import the modules themselves; this package loads none of them, so that the command line
starts fast (docs/architecture.md).
"""

__all__ = []
