"""Tables, figures and the text summary of a study report (:class:`netprobe.study.report.StudyReport`).

:func:`write_report` writes CSV and JSON tables and PNG figures (matplotlib's Agg backend, figures
never registered with pyplot); :func:`summary_lines` is the short text for the terminal. Nothing here
computes: the values and transition estimates come finished from :func:`netprobe.study.report.build_report`.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np

from netprobe.study.report import REPORT_FOLDER, StudyReport, finite_value

__all__ = ["write_report", "summary_lines"]


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
    # matplotlib only when a figure is drawn: `report --no-plots` and the CLI start-up stay light (measured, RESULTS.md)
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
        if finite_value(value):
            key = tuple(entry["parameters"].get(n) for n in others)
            error = entry["values"].get(f"{probe}_error")  # assessed probes carry their error bar
            lines.setdefault(key, []).append((entry["parameters"][name], value, error if finite_value(error) else 0.0))
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
        if finite_value(value):
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
    # transitions along x (circles, horizontal bars) and along y (squares, vertical bars)
    for along, other, marker, size in ((xa, ya, "o", 4), (ya, xa, "s", 3.5)):
        for b in report.boundaries.get(along.name, []):
            if b.probe == probe:
                bar = [[b.uncertainty / 2], [b.uncertainty / 2]]
                x, y = (b.location, b.at[other.name]) if along is xa else (b.at[other.name], b.location)
                ax.errorbar([x], [y], xerr=bar if along is xa else None, yerr=None if along is xa else bar,
                            fmt=marker, color="white", markeredgecolor=_INK, markersize=size, capsize=2,
                            linewidth=0.8)
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
            changes.append(abs(pv.change) if pv is not None and finite_value(pv.change) else np.nan)
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
    if not finite_value(value):
        return "-"
    return f"{value:.6g}"


def _with_error(values: dict, probe: str) -> str:
    error = values.get(f"{probe}_error")
    text = _fmt(values.get(probe))
    return f"{text} +- {error:.2g}" if finite_value(error) else text


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
