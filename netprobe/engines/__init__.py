"""Ground-state engines behind one protocol (see :mod:`netprobe.engines.registry`)."""

from netprobe.engines.registry import ENGINES, GroundState, SolveSettings, get_engine, ground_state, solve

__all__ = ["ENGINES", "GroundState", "SolveSettings", "get_engine", "ground_state", "solve"]
