"""Memory budget: one policy for every engine and route that can refuse a computation up front.

A computation estimates its peak bytes before any large allocation and calls
:func:`check_memory_budget`; above the budget it raises :class:`~netprobe.errors.MemoryBudgetError`
with one line naming the estimate, the budget and what to shrink. Without an explicit budget the
default is half of the machine's physical memory (:func:`default_memory_budget`).
"""

from __future__ import annotations

import os

from netprobe.errors import MemoryBudgetError

__all__ = ["BUDGET_FRACTION", "default_memory_budget", "resolve_budget", "format_bytes", "check_memory_budget"]

#: Share of the physical memory a single computation may use when no budget is given.
BUDGET_FRACTION = 0.5
_FALLBACK = 8 * 2**30  # where the physical memory cannot be read
_SHRINK = "use fewer sites, a smaller bond dimension, or raise --memory-budget"


def default_memory_budget() -> int:
    """Half of the machine's physical memory, in bytes (8 GiB if it cannot be read)."""
    try:
        return int(os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE") * BUDGET_FRACTION)
    except (ValueError, OSError, AttributeError):
        return _FALLBACK


def resolve_budget(budget: int | None) -> int:
    """``budget`` as bytes, :func:`default_memory_budget` for ``None``."""
    return default_memory_budget() if budget is None else int(budget)


def format_bytes(nbytes: float) -> str:
    """Bytes for a person: ``"1.5 GiB"``, ``"312 MiB"``, ``"20 KiB"``, ``"512 B"`` (three digits).

    Beyond a million TiB the number switches to exponent form (``"3.00e+08 TiB"``).
    """
    value = float(nbytes)
    for unit, size in (("TiB", 2**40), ("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if abs(value) >= size:
            scaled = value / size
            return f"{scaled:.3g} {unit}" if abs(scaled) < 1e6 else f"{scaled:.2e} {unit}"
    return f"{value:.0f} B"


def check_memory_budget(estimate: float, budget: int | None, what: str, hint: str = _SHRINK) -> None:
    """Refuse a computation whose estimated peak exceeds the budget.

    Parameters
    ----------
    estimate : float
        Estimated peak bytes.
    budget : int or None
        Allowed bytes; ``None`` means :func:`default_memory_budget`.
    what : str
        What would be computed, for the message ("rho over 14 sites").
    hint : str
        What to shrink, for the message.

    Raises
    ------
    MemoryBudgetError
        One line with the estimate, the budget and the hint.

    Examples
    --------
    >>> check_memory_budget(2**20, 2**30, "a small matrix")  # fits: nothing happens
    >>> format_bytes(3 * 2**30)
    '3 GiB'
    """
    budget = resolve_budget(budget)
    if estimate > budget:
        raise MemoryBudgetError(
            f"{what} would need about {format_bytes(estimate)}, over the memory budget of "
            f"{format_bytes(budget)}; {hint}"
        )
