"""Reports of a study: tables, transition estimates and phase maps from the ledger.

:func:`build_report` reads a study folder and gathers, per point, the probe values at the largest
bond dimension done, the convergence verdict (:mod:`netprobe.study.verdicts`) and the task
bookkeeping; :func:`estimate_boundaries` locates, for every swept parameter and probe, where the
probe changes fastest; :func:`write_report` writes CSV and JSON tables and PNG figures (matplotlib's
Agg backend, figures never registered with pyplot).

Transition estimate (:func:`steepest_change`)
    Along a line of points (one parameter varies, the others fixed), the slopes between neighbours
    ``s_k = (p_(k+1) - p_k) / (x_(k+1) - x_k)`` are compared; the segment with the largest ``|s_k|``
    brackets the estimate, which a parabola through ``|s|`` at that segment's midpoint and its two
    neighbours moves to the vertex (kept within the neighbouring midpoints). The uncertainty is the
    spacing of the bracketing segment. An estimate in the first or last segment is marked
    ``at_edge``: the transition may lie outside the range swept.
"""

from __future__ import annotations

import csv
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
    "write_report",
    "summary_lines",
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


def _finite(value) -> bool:
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
                pairs = [(float(a), float(v)) for a, v in pairs if _finite(v)]
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


# ---- tables ------------------------------------------------------------------------------------


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    return str(value)


def _write_csv(path: Path, header: list[str], rows: list[list]) -> Path:
    tmp = path.with_name(f".{path.name}.tmp")
    with open(tmp, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(header)
        writer.writerows([[_cell(v) for v in row] for row in rows])
    tmp.replace(path)
    return path


def _write_tables(report: StudyReport, out: Path) -> list[Path]:
    d = report.description
    probes = [p.text for p in d.probes]
    header = [
        "point",
        "label",
        *d.swept,
        *probes,
        "bond_dimension",
        "energy",
        "energy_extrapolated",
        "energy_error",
        "status",
        "flags",
    ]
    rows = []
    for entry, verdict in zip(report.points, report.verdicts):
        e = verdict.energy
        rows.append(
            [
                entry["index"],
                entry["label"],
                *[entry["parameters"].get(n) for n in d.swept],
                *[entry["values"].get(p) for p in probes],
                entry["bond_dimension"],
                entry["energy"],
                e.extrapolated,
                e.error,
                verdict.status,
                "; ".join(verdict.flags),
            ]
        )
    files = [_write_csv(out / "points.csv", header, rows)]
    task_rows = []
    for entry in report.points:
        for t in entry["tasks"]:
            vals = t["values"] or {}
            task_rows.append(
                [
                    t["task"],
                    entry["index"],
                    entry["label"],
                    t["bond_dimension"],
                    t["status"],
                    t["attempts"],
                    t["seconds"],
                    *[vals.get(p) for p in probes],
                    t["error"],
                ]
            )
    files.append(
        _write_csv(
            out / "tasks.csv",
            ["task", "point", "label", "bond_dimension", "status", "attempts", "seconds", *probes, "error"],
            task_rows,
        )
    )
    b_rows = []
    for name, found in report.boundaries.items():
        for b in found:
            b_rows.append(
                [
                    name,
                    b.probe,
                    json.dumps(dict(b.at)),
                    b.location,
                    b.uncertainty,
                    b.bracket[0],
                    b.bracket[1],
                    b.at_edge,
                ]
            )
    files.append(
        _write_csv(
            out / "boundaries.csv",
            ["parameter", "probe", "at", "location", "uncertainty", "bracket_low", "bracket_high", "at_edge"],
            b_rows,
        )
    )
    path = out / "report.json"
    tmp = path.with_name(f".{path.name}.tmp")
    tmp.write_text(json.dumps(report.to_json(), indent=2, allow_nan=False), encoding="utf-8")
    tmp.replace(path)
    files.append(path)
    return files


# ---- figures -----------------------------------------------------------------------------------

_INK = "#262626"
_FAINT = "#d9d9d9"
_LINE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#56B4E9", "#E69F00", "#000000")


def _figure(width=6.0, height=3.8):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=120, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _tidy(ax):
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(_INK)
    ax.tick_params(colors=_INK, labelsize=8)
    ax.grid(True, color=_FAINT, linewidth=0.6)
    ax.set_axisbelow(True)


def _file_stem(text: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in text)


def _save(fig, path: Path) -> Path:
    tmp = path.with_name(f".{path.stem}.tmp.png")
    fig.savefig(tmp, format="png")
    tmp.replace(path)
    return path


def _line_plot(report: StudyReport, probe: str, out: Path, along: str, stem: str) -> Path | None:
    d = report.description
    name = along
    others = [n for n in d.swept if n != along]
    lines: dict[tuple, list] = {}
    for entry in report.points:
        value = entry["values"].get(probe)
        if _finite(value):
            key = tuple(entry["parameters"].get(n) for n in others)
            error = entry["values"].get(f"{probe}_error")  # assessed probes carry their error bar
            lines.setdefault(key, []).append((entry["parameters"][name], value, error if _finite(error) else 0.0))
    if not lines:
        return None
    fig = _figure()
    ax = fig.add_subplot()
    for k, (key, pts) in enumerate(sorted(lines.items(), key=lambda kv: str(kv[0]))):
        pts.sort()
        colour = _LINE[k % len(_LINE)]
        label = ", ".join(f"{n} = {v:g}" for n, v in zip(others, key)) or None
        ax.errorbar(
            [p[0] for p in pts],
            [p[1] for p in pts],
            yerr=[p[2] for p in pts],
            color=colour,
            marker="o",
            markersize=3.5,
            linewidth=1.2,
            capsize=2,
            label=label,
        )
        for b in report.boundaries.get(name, []):
            if b.probe == probe and tuple(b.at.get(n) for n in others) == key:
                ax.axvspan(
                    b.location - b.uncertainty / 2,
                    b.location + b.uncertainty / 2,
                    color=colour,
                    alpha=0.12,
                    linewidth=0,
                )
                ax.axvline(b.location, color=colour, linestyle=(0, (4, 3)), linewidth=0.9)
    ax.set_xlabel(name, color=_INK)
    ax.set_ylabel(probe, color=_INK)
    ax.set_title(
        f"{d.name}: {probe} against {name} (band: transition estimate +- spacing / 2)",
        fontsize=9,
        color=_INK,
        loc="left",
    )
    if others:
        ax.legend(fontsize=7, frameon=False)
    _tidy(ax)
    return _save(fig, out / f"{stem}_{_file_stem(probe)}.png")


def _edges(values: np.ndarray) -> np.ndarray:
    if values.size == 1:
        return np.array([values[0] - 0.5, values[0] + 0.5])
    mids = 0.5 * (values[1:] + values[:-1])
    return np.concatenate([[2 * values[0] - mids[0]], mids, [2 * values[-1] - mids[-1]]])


def _map_plot(report: StudyReport, probe: str, out: Path) -> Path | None:
    d = report.description
    ya, xa = d.axes[0], d.axes[1]
    grid = np.full((len(ya.values), len(xa.values)), np.nan)
    by_index = {p.index: p.grid_index for p in d.points}
    for entry in report.points:
        value = entry["values"].get(probe)
        if _finite(value):
            i, j = by_index[entry["index"]]
            grid[i, j] = value
    if np.all(np.isnan(grid)):
        return None
    fig = _figure(6.0, 4.2)
    ax = fig.add_subplot()
    xs, ys = np.asarray(xa.values, float), np.asarray(ya.values, float)
    mesh = ax.pcolormesh(_edges(xs), _edges(ys), np.ma.masked_invalid(grid), cmap="cividis", shading="flat")
    bar = fig.colorbar(mesh, ax=ax)
    bar.set_label(probe, fontsize=8)
    bar.ax.tick_params(labelsize=7)
    for b in report.boundaries.get(xa.name, []):
        if b.probe == probe:
            ax.errorbar(
                [b.location],
                [b.at[ya.name]],
                xerr=[[b.uncertainty / 2], [b.uncertainty / 2]],
                fmt="o",
                color="white",
                markeredgecolor=_INK,
                markersize=4,
                capsize=2,
                linewidth=0.8,
            )
    for b in report.boundaries.get(ya.name, []):
        if b.probe == probe:
            ax.errorbar(
                [b.at[xa.name]],
                [b.location],
                yerr=[[b.uncertainty / 2], [b.uncertainty / 2]],
                fmt="s",
                color="white",
                markeredgecolor=_INK,
                markersize=3.5,
                capsize=2,
                linewidth=0.8,
            )
    ax.set_xlabel(xa.name, color=_INK)
    ax.set_ylabel(ya.name, color=_INK)
    ax.set_title(f"{d.name}: {probe} (markers: steepest change)", fontsize=9, color=_INK, loc="left")
    ax.tick_params(colors=_INK, labelsize=8)
    return _save(fig, out / f"phase_{_file_stem(probe)}.png")


def _convergence_plot(report: StudyReport, out: Path) -> Path | None:
    """Per probe: the change between the last two rungs at every point, against the flag threshold."""
    d = report.description
    if d.engine != "dmrg" or len(d.ladder) < 2:
        return None
    probes = [p.text for p in d.probes][:6]
    cols = min(3, len(probes))
    rows = math.ceil(len(probes) / cols)
    fig = _figure(3.4 * cols, 2.8 * rows)
    x = np.arange(len(report.points))
    for k, probe in enumerate(probes):
        ax = fig.add_subplot(rows, cols, k + 1)
        changes = []
        for verdict in report.verdicts:
            pv = verdict.probes.get(probe)
            changes.append(abs(pv.change) if pv is not None and _finite(pv.change) else np.nan)
        changes = np.asarray(changes, float)
        shown = np.where(changes > 0, changes, np.nan)
        ax.semilogy(x, shown, marker="o", markersize=3, linewidth=0, color=_LINE[0])
        is_energy = probe.split("@")[0] in ("energy", "energy_per_site")
        if not is_energy:
            ax.axhline(d.verdicts.change_threshold, color=_LINE[1], linestyle=(0, (4, 3)), linewidth=0.9)
        ax.set_title(
            f"{probe}: |change| D={d.ladder[-2]} -> {d.ladder[-1]}", fontsize=8, color=_INK, loc="left"
        )
        ax.set_xlabel("point", fontsize=8, color=_INK)
        _tidy(ax)
    fig.suptitle(f"{d.name}: last-rung changes (dashed: flag threshold)", fontsize=9, color=_INK)
    return _save(fig, out / "convergence.png")


def _write_plots(report: StudyReport, out: Path) -> list[Path]:
    d = report.description
    files = []
    for probe in [p.text for p in d.probes]:
        if len(d.axes) == 2:
            # the map, and the same data as one line per value of the first parameter
            paths = [_map_plot(report, probe, out), _line_plot(report, probe, out, d.axes[1].name, "lines")]
        elif d.swept:
            paths = [_line_plot(report, probe, out, d.swept[0], "phase")]
        else:
            paths = []
        files += [p for p in paths if p is not None]
    path = _convergence_plot(report, out)
    if path is not None:
        files.append(path)
    return files


def write_report(report: StudyReport, out=None, *, plots: bool = True) -> list[Path]:
    """Write the tables (``points.csv``, ``tasks.csv``, ``boundaries.csv``, ``report.json``) and figures.

    Parameters
    ----------
    report : StudyReport
    out : str or Path, optional
        Folder for the files (default ``<study folder>/report``), created if needed.
    plots : bool
        Also write the PNG figures: ``phase_<probe>.png`` (a line against the swept parameter, or a colour
        map for two), ``lines_<probe>.png`` (two parameters: one line per value of the first) and
        ``convergence.png`` (DMRG: the change between the last two rungs at every point).

    Returns
    -------
    list of Path

    """
    out = Path(out) if out is not None else report.folder / REPORT_FOLDER
    out.mkdir(parents=True, exist_ok=True)
    files = _write_tables(report, out)
    if plots:
        files += _write_plots(report, out)
    return files


def _fmt(value) -> str:
    if not _finite(value):
        return "-"
    return f"{value:.6g}"


def _with_error(values: dict, probe: str) -> str:
    error = values.get(f"{probe}_error")
    text = _fmt(values.get(probe))
    return f"{text} +- {error:.2g}" if _finite(error) else text


def summary_lines(report: StudyReport) -> list[str]:
    """A short text summary: counts, one line per point, the transition estimates."""
    d = report.description
    c = report.counts
    lines = [
        f"study {d.name}: model {d.model}, engine {d.engine}, {len(report.points)} points, "
        f"{c['done']}/{c['total']} tasks done, {c['failed']} failed, {c['pending'] + c['running']} open"
    ]
    probes = [p.text for p in d.probes]
    width = max([len("point")] + [len(e["label"]) for e in report.points])
    cols = [max(18 if p.startswith("assessed_") else 10, len(p)) for p in probes]
    lines.append(
        "  ".join([f"{'point':<{width}}"] + [f"{p:>{w}}" for p, w in zip(probes, cols)] + ["verdict"])
    )
    for entry, verdict in zip(report.points, report.verdicts):
        cells = [f"{_with_error(entry['values'], p):>{w}}" for p, w in zip(probes, cols)]
        status = verdict.status + (f" ({len(verdict.flags)} flag(s))" if verdict.flags else "")
        lines.append("  ".join([f"{entry['label']:<{width}}"] + cells + [status]))
    for name, found in report.boundaries.items():
        for b in found:
            at = ", ".join(f"{k} = {v:g}" for k, v in b.at.items())
            edge = " (at the edge of the range)" if b.at_edge else ""
            lines.append(
                f"transition in {name}{' at ' + at if at else ''}: {b.probe} changes fastest at "
                f"{b.location:.4g} +- {b.uncertainty:.3g} (between {b.bracket[0]:g} and {b.bracket[1]:g})"
                f"{edge}"
            )
    return lines
