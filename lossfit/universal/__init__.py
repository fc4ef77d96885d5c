"""Zero-range theory at fixed energy: threshold laws, energy-resolved models, tables."""

__all__ = []
