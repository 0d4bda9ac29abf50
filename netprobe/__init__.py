"""netprobe: ground states of lattice models on cylinders and bulk probes of chiral topological order.

Themes
------
Model description
    ``spec`` (TOML model files), ``expr`` (safe coupling expressions), ``lattice`` (cylinders,
    strips, tori and their bond families), ``sites`` (local spaces and operators), ``terms``
    (the Hamiltonian as a sum of operator strings, fermion signs handled once).
Engines
    ``exact`` (exact diagonalisation in a charge sector).
Errors
    ``errors`` (every user mistake raises a subclass of :class:`NetprobeError`).
"""

__version__ = "0.1.0"

from netprobe.errors import NetprobeError

__all__ = ["NetprobeError", "__version__"]
