"""The package version: the one place it is written (pyproject.toml reads it)."""

__all__ = ["__version__"]

#: The version of lossfit (PEP 440).
__version__ = "0.1.0"
