"""netprobe: ground states of lattice models on cylinders and bulk probes of chiral topological order.

Themes
------
Model description
    ``spec`` (TOML model files), ``expr`` (safe coupling expressions), ``lattice`` (cylinders,
    strips, tori and their bond families), ``sites`` (local spaces and operators), ``terms``
    (the Hamiltonian as a sum of operator strings, fermion signs handled once).
Engines
    ``exact`` (exact diagonalisation in a charge sector), ``tensor`` (block-sparse tensors with
    abelian charges), ``mpo`` (operator strings to MPO), ``mps`` (matrix product states, measurements,
    Schmidt spectra), ``dmrg`` (two-site DMRG, bond-dimension ladders, checkpoints), ``store`` (HDF5
    state files), ``gaussian`` (free fermions: correlation matrix and Majorana covariance).
Bulk probes
    ``regions`` (disks, three-sector disks, rings, shielded layouts), ``rdm`` (reduced density matrices
    of site sets, fermion-correct), ``probes`` (entropies, CMI, topological entanglement entropy,
    modular commutator J and c-), ``bulk`` (ground state + probes for any engine), ``flux`` (flux
    threading and the pumped charge).
Output
    ``plots`` (PNG figures), ``cli`` (the ``netprobe`` command), ``demo`` (the bundled scenario).
Errors
    ``errors`` (every user mistake raises a subclass of :class:`NetprobeError`).
"""

__version__ = "0.1.0"

from netprobe.errors import NetprobeError

__all__ = ["NetprobeError", "__version__"]
