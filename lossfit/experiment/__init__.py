"""The apparatus side: what turns lab quantities into the rates' inputs and back.

:mod:`.trap` (harmonic trap: densities and temperatures), :mod:`.feshbach` (the Feshbach
resonance: the only a(B) of the package, binding energies, field calibration) and
:mod:`.decay` (the rate equations of atom and dimer numbers and their integrator).
Import the modules themselves; this package loads none of them (docs/architecture.md).
"""

__all__ = []
