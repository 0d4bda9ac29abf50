"""Progress reporting of sweeps: one line per sweep, and a live position inside a sweep on terminals.

The per-sweep line has our own layout::

    sweep   4 | D   64/64   | energy -13.997315618341 | change -3.21e-09 | discarded 1.20e-07 |
    S_centre 0.8721 | 1.9 s

(one line in the output; broken here for width)

Inside a sweep, a carriage-return line ``  sweep 4: bond 12/30 >`` is redrawn every few bonds when the
stream is a terminal, and nothing is written otherwise (logs stay clean).
"""

from __future__ import annotations

import math
import sys
import time
from typing import TextIO

__all__ = ["ProgressWriter", "format_sweep"]

_TICK_SECONDS = 0.25  # least time between two redraws of the in-sweep line


def format_sweep(record) -> str:
    """The per-sweep progress line of a :class:`netprobe.engines.dmrg.SweepRecord`."""
    change = "    n/a  " if math.isnan(record.energy_change) else f"{record.energy_change:+.2e}"
    line = (f"sweep {record.sweep:>3} | D {record.max_bond_dimension:>4}/{record.bond_dimension:<4} | "
            f"energy {record.energy:.12f} | change {change} | discarded {record.discarded_weight:.2e} | "
            f"S_centre {record.centre_entropy:.4f} | {record.seconds:.1f} s")
    if record.noise:
        line += f" | noise {record.noise:.0e}"
    return line


class ProgressWriter:
    """Writes progress to a text stream; ``None`` (or ``"none"``) is silent, ``"stderr"`` the default.

    Parameters
    ----------
    stream : file-like, "stderr" or None
    prefix : str
        Put in front of every line (e.g. the ladder stage).
    """

    def __init__(self, stream="stderr", prefix: str = ""):
        if stream == "stderr":
            stream = sys.stderr
        elif stream == "none":
            stream = None
        self.stream: TextIO | None = stream
        self.prefix = prefix
        isatty = getattr(stream, "isatty", None)
        try:
            self.tty = bool(isatty()) if callable(isatty) else False
        except (ValueError, OSError):
            self.tty = False
        self._last_tick = 0.0
        self._ticking = False

    def line(self, text: str) -> None:
        """Write one full line (clearing a live line first)."""
        if self.stream is None:
            return
        self.clear()
        self.stream.write(f"{self.prefix}{text}\n")
        self.stream.flush()

    def sweep(self, record) -> None:
        """Write the line of a finished sweep."""
        self.line(format_sweep(record))

    def tick(self, sweep: int, step: int, total: int) -> None:
        """Redraw the live in-sweep position (terminals only, at most every quarter second)."""
        if self.stream is None or not self.tty:
            return
        now = time.monotonic()
        if now - self._last_tick < _TICK_SECONDS and step < total:
            return
        self._last_tick = now
        self._ticking = True
        self.stream.write(f"\r{self.prefix}  sweep {sweep}: bond {step}/{total} >")
        self.stream.flush()

    def clear(self) -> None:
        """Erase the live line, if one is shown."""
        if self._ticking and self.stream is not None:
            self.stream.write("\r\033[2K")
            self.stream.flush()
            self._ticking = False
