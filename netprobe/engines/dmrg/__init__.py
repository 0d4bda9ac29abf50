"""Two-site DMRG ground states.

Modules
-------
``engine``
    :class:`SweepSettings`, the steppable :class:`GroundStateSearch`, :class:`SweepRecord`, :class:`DmrgResult`,
    :func:`find_ground_state`.
``environments``
    Left and right environments, updated one site at a time.
``effective``
    The two-site effective Hamiltonian as an operator that only applies itself.
``solvers``
    Local eigensolvers by name (:data:`EIGENSOLVERS`: Lanczos with full reorthogonalisation, ARPACK).
``progress``
    Per-sweep progress lines and the live in-sweep indicator.
``ladder``
    Runs over a ladder of bond dimensions with state files, checkpoints, resume, and the
    energy-versus-discarded-weight extrapolation.
"""

from netprobe.engines.dmrg.engine import (ConvergenceWarning, GroundStateSearch, DmrgResult, SweepRecord, SweepSettings,
                                  default_ramp, find_ground_state)
from netprobe.engines.dmrg.ladder import (CHECKPOINT_NAME, Extrapolation, LadderResult, LadderSettings, StageResult,
                                  extrapolate_energy, resume_ladder, run_ladder, stage_file_name)
from netprobe.engines.dmrg.solvers import EIGENSOLVERS

__all__ = ["SweepSettings", "SweepRecord", "DmrgResult", "GroundStateSearch", "ConvergenceWarning",
           "find_ground_state", "default_ramp", "EIGENSOLVERS", "LadderSettings", "StageResult",
           "Extrapolation", "LadderResult", "extrapolate_energy", "run_ladder", "resume_ladder",
           "CHECKPOINT_NAME", "stage_file_name"]
