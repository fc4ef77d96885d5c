"""lossfit: thermally averaged zero-range fits of three-body and atom-dimer loss."""

__version__ = "0.1.0"
