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
    modular commutator J and c-), ``flux`` (flux threading and the pumped charge), ``cut`` and
    ``edge`` (momentum-resolved entanglement spectra and momentum polarization at a cylinder cut).
Pipeline
    ``engines`` (one registry of ground-state engines and their protocol), ``pipeline`` (one probe
    registry by state kind, one point of coupling space, the assessment), ``region_ladders``
    (regions of growing size, Markov series), ``fitting`` (every extrapolation).
Output
    ``plots`` (PNG figures), ``cli`` (the ``netprobe`` command), ``demo`` (the bundled scenario).
Errors
    ``errors`` (every user mistake raises a subclass of :class:`NetprobeError`).


Python API (the command line is a thin layer over it)
    :func:`load_model` (a bundled name or a file, with ``--set``-style overrides), :func:`ground_state`
    and :func:`solve` (any engine, :class:`SolveSettings`), :func:`probe_model` (probes on a region),
    :func:`assess_model` (c- and gamma with error bars, certificate and verdict).
"""

__version__ = "0.1.0"

from netprobe.engines import SolveSettings, ground_state, solve
from netprobe.errors import NetprobeError
from netprobe.pipeline import probe_model
from netprobe.pipeline.assess import assess_model, assess_states
from netprobe.model.spec import load_model

__all__ = ["NetprobeError", "__version__", "load_model", "SolveSettings", "solve", "ground_state", "probe_model",
           "assess_model", "assess_states"]
