"""Offline zero-range solver for three identical bosons (J = 0); see docs/solver.md.

Submodules (imported explicitly; nothing is compiled or run at package import):

* :mod:`.hyperspherical` -- adiabatic potentials and exact couplings
* :mod:`.propagate` -- adiabatic-by-sector log-derivative propagation
* :mod:`.scattering` -- a < 0 universal function s11(k|a|), K3(E)
* :mod:`.boundstates` -- trimer spectrum, kappa* a_-, kappa* a*_0
* :mod:`.atom_dimer` -- a > 0 atom-dimer relaxation below breakup (J = 0)
"""

__all__ = ["hyperspherical", "propagate", "scattering", "boundstates", "atom_dimer"]
