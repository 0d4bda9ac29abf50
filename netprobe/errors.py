"""Error types shared by every stage of netprobe.

All user-facing problems raise a subclass of :class:`NetprobeError`. The command line turns
these into one line on standard error and exit status 2; anything else is a bug.
"""

__all__ = [
    "NetprobeError",
    "SpecError",
    "ExpressionError",
    "LatticeError",
    "OperatorError",
    "SectorError",
    "HermiticityError",
    "StateFileError",
    "MemoryBudgetError",
    "NotQuadraticError",
    "GaussianStateError",
    "StudyError",
]


class NetprobeError(ValueError):
    """Base class of every error that reports a user mistake or an impossible request."""


class SpecError(NetprobeError):
    """A model, run or study description is malformed (unknown key, bad value, missing entry)."""


class ExpressionError(NetprobeError):
    """A coupling expression cannot be parsed or evaluated with the allowed names."""


class LatticeError(NetprobeError):
    """Unknown lattice, bad size or geometry, or a region that does not fit the lattice."""


class OperatorError(NetprobeError):
    """Unknown local operator, or an operator that does not fit its site space."""


class SectorError(NetprobeError):
    """A requested charge sector is impossible or contains no states."""


class HermiticityError(NetprobeError):
    """The Hamiltonian assembled from the terms is not Hermitian."""


class StateFileError(NetprobeError):
    """A state or checkpoint file is unreadable, foreign or of an unsupported version."""


class MemoryBudgetError(NetprobeError):
    """A computation would exceed the memory budget; the message carries the estimate."""


class NotQuadraticError(NetprobeError):
    """The Hamiltonian is not quadratic in fermion operators, so it has no Gaussian ground state."""


class GaussianStateError(NetprobeError):
    """A quadratic model whose ground state the Gaussian engine cannot build (degenerate, wrong path)."""


class StudyError(NetprobeError):
    """A study cannot run as asked (no ledger, a ledger of another study, an unreachable scheduler)."""
