"""Reports of a study: the data of tables, transition estimates and phase maps, read from the ledger.

:func:`build_report` reads a study folder and gathers, per point, the probe values at the largest
bond dimension done, the convergence verdict (:mod:`netprobe.study.verdicts`) and the task
bookkeeping; :func:`estimate_boundaries` locates, for every swept parameter and probe, where the
probe changes fastest. The tables, figures and text summary are written by
:mod:`netprobe.output.study_report`.

Transition estimate (:func:`steepest_change`)
    Along a line of points (one parameter varies, the others fixed), the slopes between neighbours
    ``s_k = (p_(k+1) - p_k) / (x_(k+1) - x_k)`` are compared; the segment with the largest ``|s_k|``
    brackets the estimate, which a parabola through ``|s|`` at that segment's midpoint and its two
    neighbours moves to the vertex (kept within the neighbouring midpoints). The uncertainty is the
    spacing of the bracketing segment. An estimate in the first or last segment is marked
    ``at_edge``: the transition may lie outside the range swept.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np

from netprobe.errors import StudyError
from netprobe.study.description import StudyDescription
from netprobe.jsonio import encode_json
from netprobe.study.ledger import Ledger, ledger_path
from netprobe.study.verdicts import PointVerdict, point_verdict

__all__ = [
    "Boundary",
    "StudyReport",
    "steepest_change",
    "estimate_boundaries",
    "build_report",
    "finite_value",
    "REPORT_FOLDER",
    "BOUNDARY_METHOD",
]

REPORT_FOLDER = "report"
BOUNDARY_METHOD = (
    "largest |change of probe / change of parameter| between neighbouring points, refined by a "
    "parabola through the three slopes around it; uncertainty: the spacing of that segment"
)


@dataclass(frozen=True)
class Boundary:
    """An estimated transition along one parameter.

    Attributes
    ----------
    parameter : str
        The swept parameter.
    probe : str
    location : float
    uncertainty : float
        The grid spacing at the estimate.
    bracket : (float, float)
        The neighbouring points between which the probe changes fastest.
    at : mapping of str to float
        The other swept parameters, fixed along this line.
    at_edge : bool
        The steepest change lies in the first or last segment of the line.

    """

    parameter: str
    probe: str
    location: float
    uncertainty: float
    bracket: tuple[float, float]
    at: Mapping[str, float] = field(default_factory=dict)
    at_edge: bool = False

    def to_dict(self) -> dict:
        out = asdict(self)
        out["bracket"] = list(self.bracket)
        out["at"] = dict(self.at)
        return out


def steepest_change(x: Sequence[float], y: Sequence[float]):
    """Where ``y(x)`` changes fastest (see the module notes).

    Parameters
    ----------
    x : sequence of float
        Strictly increasing, at least two values.
    y : sequence of float

    Returns
    -------
    (location, uncertainty, (lo, hi), at_edge) or None
        None for fewer than two points or a constant ``y``.

    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    if x.size < 2:
        return None
    dx = np.diff(x)
    slopes = np.abs(np.diff(y) / dx)
    mids = 0.5 * (x[1:] + x[:-1])
    k = int(np.argmax(slopes))
    if not slopes[k] > 0:
        return None
    location = float(mids[k])
    if 0 < k < slopes.size - 1:
        xs, ys = mids[k - 1 : k + 2], slopes[k - 1 : k + 2]
        a, b, _ = np.polyfit(xs - xs[1], ys, 2)
        if a < 0:
            location = float(np.clip(xs[1] - b / (2 * a), xs[0], xs[2]))
    return location, float(dx[k]), (float(x[k]), float(x[k + 1])), k == 0 or k == slopes.size - 1


def finite_value(value) -> bool:
    """True for a finite int or float (not a bool, None, NaN or an infinity)."""
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def estimate_boundaries(
    description: StudyDescription, values: Mapping[int, Mapping[str, float]]
) -> dict[str, list[Boundary]]:
    """Transition estimates for every swept parameter and probe.

    Parameters
    ----------
    description : StudyDescription
    values : mapping of point index to (probe -> value)
        Points without a value for a probe are left out of that probe's lines.

    Returns
    -------
    dict of str to list of Boundary
        By swept parameter; one entry per probe and line (a line: the points that share the values
        of the other swept parameters; lines with fewer than three points are skipped).

    """
    out: dict[str, list[Boundary]] = {}
    for name in description.swept:
        others = [n for n in description.swept if n != name]
        lines: dict[tuple, list] = {}
        for point in description.points:
            if name not in point.values or any(n not in point.values for n in others):
                continue
            key = tuple(point.values[n] for n in others)
            lines.setdefault(key, []).append(point)
        found = []
        for key, members in lines.items():
            members = sorted(members, key=lambda p: p.values[name])
            for probe in description.probes:
                pairs = [(p.values[name], values.get(p.index, {}).get(probe.text)) for p in members]
                pairs = [(float(a), float(v)) for a, v in pairs if finite_value(v)]
                if len(pairs) < 3:
                    continue
                xs, ys = zip(*pairs)
                est = steepest_change(xs, ys)
                if est is None:
                    continue
                location, spacing, bracket, edge = est
                found.append(
                    Boundary(name, probe.text, location, spacing, bracket, dict(zip(others, key)), edge)
                )
        out[name] = found
    return out


@dataclass(frozen=True, eq=False)
class StudyReport:
    """Everything a report shows, read from a study folder.

    Attributes
    ----------
    description : StudyDescription
    folder : Path
    counts : mapping of str to int
    points : list of dict
        Per point: ``index``, ``label``, ``parameters``, ``values`` (probe -> value at the largest D
        done), ``bond_dimension`` (that D), ``tasks`` (status, attempts, error per rung), ``verdict``.
    verdicts : list of PointVerdict
    boundaries : mapping of str to list of Boundary

    """

    description: StudyDescription
    folder: Path
    counts: Mapping[str, int]
    points: list[dict]
    verdicts: list[PointVerdict]
    boundaries: Mapping[str, list[Boundary]]

    def to_json(self) -> dict:
        """Plain values for JSON.

        Keys: ``study``, ``description``, ``engine``, ``model``, ``swept``, ``probes``, ``ladder``,
        ``counts``, ``points``, ``boundaries``, ``boundary_method``, ``folder``.
        """
        d = self.description
        payload = {
            "study": d.name,
            "description": d.text,
            "model": d.model,
            "engine": d.engine,
            "swept": list(d.swept),
            "probes": [p.text for p in d.probes],
            "ladder": list(d.ladder),
            "folder": str(self.folder),
            "counts": dict(self.counts),
            "points": self.points,
            "boundaries": {k: [b.to_dict() for b in v] for k, v in self.boundaries.items()},
            "boundary_method": BOUNDARY_METHOD,
        }
        return json.loads(encode_json(payload))  # NaN and infinities become null

    def __repr__(self) -> str:
        c = self.counts
        n = sum(len(v) for v in self.boundaries.values())
        return (
            f"StudyReport('{self.description.name}', {len(self.points)} points, {c['done']}/{c['total']} "
            f"tasks done, {n} boundary estimate(s))"
        )


def build_report(folder) -> StudyReport:
    """Read a study folder into a :class:`StudyReport`.

    Raises
    ------
    StudyError
        If the folder holds no ledger.

    """
    folder = Path(folder)
    path = ledger_path(folder)
    if not path.is_file():
        raise StudyError(
            f"{folder} holds no study ledger ({path.name}); run 'netprobe study SPEC --out {folder}' "
            "first, or give the folder of a study"
        )
    with Ledger(path) as ledger:
        description = ledger.description()
        rows = ledger.tasks()
        counts = ledger.counts()
    by_point: dict[int, list] = {}
    for row in rows:
        by_point.setdefault(row.point, []).append(row)
    points, verdicts, values = [], [], {}
    for point in description.points:
        mine = sorted(by_point.get(point.index, []), key=lambda r: r.bond_dimension)
        if not mine:
            continue
        verdict = point_verdict(description, mine)
        verdicts.append(verdict)
        done = [r for r in mine if r.status == "done" and r.result is not None]
        best = done[-1] if done else None
        vals = {} if best is None else dict(best.result.get("probes", {}))
        values[point.index] = vals
        points.append(
            {
                "index": point.index,
                "label": point.label,
                "parameters": dict(point.values),
                "values": vals,
                "energy": None if best is None else best.result.get("energy"),
                "bond_dimension": None if best is None else best.bond_dimension,
                "tasks": [
                    {
                        "task": r.id,
                        "bond_dimension": r.bond_dimension,
                        "status": r.status,
                        "attempts": r.attempts,
                        "seconds": r.seconds,
                        "error": r.error,
                        "state_file": r.state_file,
                        "values": None if r.result is None else r.result.get("probes"),
                    }
                    for r in mine
                ],
                "verdict": verdict.to_dict(),
            }
        )
    return StudyReport(
        description, folder, counts, points, verdicts, estimate_boundaries(description, values)
    )
