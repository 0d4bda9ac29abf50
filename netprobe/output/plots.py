"""Figures written to files with matplotlib's Agg backend; each function stands alone.

Nothing here computes physics: every function takes finished objects (a region layout, a
result), draws them on a fresh figure that is never registered with pyplot, writes one PNG and
returns its path. Functions share only the palette.

Functions
    :func:`plot_layout`  the lattice with the parts of a region layout.
    :func:`plot_cut_spectrum`  entanglement levels at a cylinder cut against momentum, by charge.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure

from netprobe.errors import LatticeError
from netprobe.regions import Layout
from netprobe.fitting import SIZE_FORMS

__all__ = ["PART_COLOURS", "plot_layout", "plot_profiles", "plot_flux", "plot_assessment", "plot_cut_spectrum"]

PART_COLOURS = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#000000")
"""Colours of parts A, B, C, ... in order: the colour-blind-safe set of M. Okabe and K. Ito,
"Color Universal Design" (2008), without its yellow, which is faint on white."""

_SITE_GREY = "#a0a0a0"
_BOND_GREY = "#d4d4d4"
_INK = "#262626"


def _wrapped_segments(lattice):
    """Bond segments in wrapped coordinates; a bond across a seam becomes two half stubs."""
    segments = []
    try:
        bonds = lattice.family("nn")
    except LatticeError:
        return segments
    for bond in bonds:
        for p in range(len(bond.sites) - 1):
            i, j = bond.sites[p], bond.sites[p + 1]
            vec = bond.positions[p + 1] - bond.positions[p]
            a, b = lattice.positions[i], lattice.positions[j]
            if np.allclose(b - a, vec, atol=1e-9):
                segments.append((a, b))
            else:  # drawn up to the seam from both sides
                segments.append((a, a + 0.5 * vec))
                segments.append((b, b - 0.5 * vec))
    return segments


def _label_point(lattice, sites):
    """Where to write a part's letter: its centroid, with the y mean taken around the cylinder."""
    pos = lattice.positions[list(sites)]
    x = float(pos[:, 0].mean())
    if lattice.geometry == "strip" or lattice.circumference == 1:
        return x, float(pos[:, 1].mean())
    c = lattice.circumference_length
    phase = np.exp(2j * np.pi * pos[:, 1] / c).mean()
    if abs(phase) < 0.3:  # spread all around the cylinder: put the letter half way up
        return x, 0.5 * c
    return x, float((np.angle(phase) / (2 * np.pi) * c) % c)


def plot_layout(layout: Layout, path, *, title: str | None = None) -> Path:
    """Draw a lattice with the parts of a region layout and write it as a PNG.

    Sites are small grey dots and nearest-neighbour bonds thin light lines (a bond across the seam
    of a periodic direction is drawn up to the seam from both ends); the sites of each part are
    larger discs in the part's colour, each connected piece of a part carries its letter, the
    layout's centre is marked with a small cross and the seam of the cylinder with dotted lines.

    Parameters
    ----------
    layout : Layout
    path : str or Path
        Output file; its folder is created if missing.
    title : str, optional
        Defaults to the layout in command-line syntax and the lattice description.

    Returns
    -------
    Path
        The file written.
    """
    path = Path(path)
    lat = layout.lattice
    pos = lat.positions
    xmin, xmax = float(pos[:, 0].min()), float(pos[:, 0].max())
    periodic = lat.geometry != "strip" and lat.circumference > 1
    if periodic:
        ymin, ymax = 0.0, lat.circumference_length
    else:
        ymin, ymax = float(pos[:, 1].min()), float(pos[:, 1].max())
    span_x, span_y = max(xmax - xmin, 1.0), max(ymax - ymin, 1.0)
    scale = min(10.0 / span_x, 7.0 / span_y, 0.9)
    fig = Figure(figsize=(max(4.5, span_x * scale + 2.6), max(3.0, span_y * scale + 1.6)))
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()

    segments = _wrapped_segments(lat)
    if segments:
        ax.add_collection(LineCollection(segments, colors=_BOND_GREY, linewidths=0.8, zorder=1))
    ax.scatter(pos[:, 0], pos[:, 1], s=9, c=_SITE_GREY, linewidths=0, zorder=2)
    disc = max(18.0, 160.0 * scale**2)
    for k, (name, sites) in enumerate(layout.parts.items()):
        colour = PART_COLOURS[k % len(PART_COLOURS)]
        p = pos[list(sites)]
        ax.scatter(p[:, 0], p[:, 1], s=disc, c=colour, edgecolors=_INK, linewidths=0.5, zorder=3,
                   label=f"{name}: {len(sites)} sites")
        for piece in layout.components(name):
            lx, ly = _label_point(lat, piece)
            ax.text(lx, ly, name, ha="center", va="center", fontsize=12, fontweight="bold", color=colour,
                    zorder=5, bbox=dict(boxstyle="round,pad=0.15", facecolor="white", edgecolor=colour,
                                        linewidth=0.8, alpha=0.85))
    if layout.center is not None:
        cx, cy = layout.center
        ax.plot([cx], [cy], marker="+", markersize=9, color=_INK, linestyle="none", zorder=4)
    if periodic:
        for y in (0.0, lat.circumference_length):
            ax.axhline(y, color="#8c8c8c", linestyle=":", linewidth=0.8, zorder=0)

    pad = 0.6
    ax.set_xlim(xmin - pad, xmax + pad)
    ax.set_ylim(ymin - pad, ymax + pad)
    ax.set_aspect("equal")
    ax.set_xlabel("x (open)")
    ax.set_ylabel("y (around)" if periodic else "y")
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(direction="out", length=3, labelsize=8)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, fontsize=8, handletextpad=0.3)
    heading = title if title is not None else f"{layout.spec}\n{lat.describe()}"
    ax.set_title(heading, fontsize=9, loc="left")
    fig.tight_layout()
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=110, format="png")
    return path


def plot_profiles(profiles, path, *, title=None) -> Path:
    """Plot named profiles (site or bond index -> value) in stacked panels and write a PNG.

    Parameters
    ----------
    profiles : mapping of str to array_like
        One panel per entry, in order.
    path : str or Path
        Output file; missing folders are created.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    n = max(len(profiles), 1)
    fig = Figure(figsize=(6.0, 1.9 * n + 0.6), dpi=120)
    FigureCanvasAgg(fig)
    for k, (label, values) in enumerate(profiles.items()):
        ax = fig.add_subplot(n, 1, k + 1)
        values = np.asarray(values, dtype=float)
        ax.plot(np.arange(len(values)), values, marker="o", ms=3, lw=1.2, color=PART_COLOURS[k % len(PART_COLOURS)])
        ax.set_ylabel(label)
        ax.grid(alpha=0.25)
        if k == n - 1:
            ax.set_xlabel("site (MPS order)" if not label.startswith("S(") else "bond")
    if title:
        fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    fig.savefig(path)
    return path


def plot_flux(result, path, *, title=None) -> Path:
    """Two panels against the flux theta / 2 pi: <Q_L> at the cut, and the entanglement levels by charge."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fig = Figure(figsize=(6.0, 5.2), dpi=120)
    FigureCanvasAgg(fig)
    x = np.asarray(result.thetas) / (2 * np.pi)
    ax = fig.add_subplot(2, 1, 1)
    ax.plot(x, result.left_charge, marker="o", color=PART_COLOURS[0])
    ax.set_ylabel("<Q_L>")
    ax.grid(alpha=0.25)
    ax.set_title(f"pumped {result.pumped:+.3f} per flux quantum", fontsize=9)
    ax2 = fig.add_subplot(2, 1, 2, sharex=ax)
    charges = sorted({q for s in result.spectra for q in s["levels"]}, key=int)
    for k, q in enumerate(charges):
        for s, xv in zip(result.spectra, x):
            levels = s["levels"].get(q, [])
            ax2.scatter([xv] * len(levels), levels, s=10, color=PART_COLOURS[k % len(PART_COLOURS)],
                        label=f"Q_L = {q}" if s is result.spectra[0] else None)
    ax2.set_ylim(bottom=0, top=min(14, ax2.get_ylim()[1]))
    ax2.set_xlabel("flux theta / 2 pi")
    ax2.set_ylabel("-2 ln lambda")
    ax2.legend(fontsize=7, frameon=False, ncol=3)
    if title:
        fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    fig.savefig(path)
    return path


def plot_assessment(assessment, path, *, title=None) -> Path:
    """J, gamma and the CMI against region size with the size fits; J against 1/D per size.

    Parameters
    ----------
    assessment : netprobe.pipeline.assess.Assessment
    path : str or Path
    title : str, optional
    """
    sizes = assessment.sizes
    fig = Figure(figsize=(11, 7.5))
    FigureCanvasAgg(fig)
    axes = fig.subplots(2, 2)
    r = np.array([e.linear_size for e in sizes])
    r_fine = np.linspace(max(r.min() * 0.9, 1e-3), r.max() * 1.6, 200) if len(r) else np.zeros(0)
    for ax, key, label in ((axes[0, 0], "J", "J(A,B,C)"), (axes[0, 1], "gamma", "gamma (Kitaev-Preskill)")):
        for flag, marker, name in ((True, "o", "certified"), (False, "s", "uncertified")):
            pick = [e for e in sizes if e.certified == flag]
            if pick:
                ax.errorbar([e.linear_size for e in pick], [getattr(e, key) for e in pick],
                            yerr=[getattr(e, f"{key}_error") for e in pick], fmt=marker, ms=4, capsize=2,
                            color=_INK if flag else _SITE_GREY, label=name)
        for (form, fit), colour in zip((assessment.fits.get(key) or {}).items(), PART_COLOURS):
            if not fit or form not in SIZE_FORMS:
                continue
            shape = SIZE_FORMS[form][0]
            theta = next(iter(fit["params"].values()))
            ax.plot(r_fine, fit["value"] + fit["slope"] * shape(r_fine, theta), color=colour, lw=1.2,
                    label=f"{form}: {fit['value']:.4f} +- {fit['error']:.2g}")
            ax.axhline(fit["value"], color=colour, lw=0.6, ls=":")
        ax.set_xlabel("linear size R (nearest-neighbour lengths)")
        ax.set_ylabel(label)
        ax.legend(fontsize=7, frameon=False)
    ax = axes[1, 0]
    markov = assessment.markov
    if markov.get("widths"):
        ax.semilogy(markov["widths"], np.maximum(markov["cmi"], 1e-16), "o-", color=PART_COLOURS[0])
    xi = assessment.markov_length
    ax.set_title("Markov length: " + ("n/a" if xi is None else f"{xi:.3f}"), fontsize=9)
    ax.set_xlabel("shield width w (nearest-neighbour lengths)")
    ax.set_ylabel("I(A:C|B)")
    ax = axes[1, 1]
    drawn = False
    for e, colour in zip(sizes[-len(PART_COLOURS):], PART_COLOURS):
        rungs = (e.placements[0] or {}).get("by_bond_dimension") if e.placements else None
        if rungs:
            ax.plot([1.0 / p["bond_dimension"] for p in rungs], [p["J"] for p in rungs], "o-", color=colour,
                    ms=3, label=f"{e.sites} sites")
            drawn = True
    if drawn:
        ax.legend(fontsize=7, frameon=False)
    else:
        ax.text(0.5, 0.5, f"{assessment.engine}: exact in the bond dimension", ha="center", va="center",
                transform=ax.transAxes, fontsize=9, color=_INK)
    ax.set_xlabel("1/D")
    ax.set_ylabel("J (first placement)")
    c = assessment.c_minus
    head = title or ""
    verdict = (f"{assessment.verdict}" + ("" if c is None else f": c- = {c:+.3f} +- {assessment.c_minus_error:.3f}")
               + (", certified" if assessment.certified else ", uncertified"))
    fig.suptitle(f"{head}\n{verdict}" if head else verdict, fontsize=10)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    return Path(path)


def plot_cut_spectrum(result: dict, path, *, title=None, sectors: int = 5, height: float = 8.0) -> Path:
    """Levels -ln(lambda^2) against momentum m (k = 2 pi m / L_y), one panel per charge of the left part.

    Parameters
    ----------
    result : dict
        The JSON result of ``netprobe edge`` (``spectrum``, ``counting_details``, ``circumference``).
    sectors : int
        At most this many charge sectors, those with the lowest levels.
    height : float
        Levels up to this far above the lowest of each panel are drawn.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    per_charge: dict = {}
    for entry in result["spectrum"]:
        key = "none" if entry["charge"] is None else (",".join(map(str, entry["charge"]))
                                                      if isinstance(entry["charge"], list) else str(entry["charge"]))
        per_charge.setdefault(key, []).append((entry["momentum"], entry["level"]))
    details = {s["charge"]: s for s in result["counting_details"]["sectors"]}
    keys = sorted(per_charge, key=lambda k: min(level for _, level in per_charge[k]))[:sectors]
    keys = sorted(keys, key=lambda k: [int(x) for x in k.split(",")] if k != "none" else [0])
    w = int(result["circumference"])
    fig = Figure(figsize=(2.4 * len(keys) + 0.8, 3.6), dpi=120)
    FigureCanvasAgg(fig)
    axes = []
    for n, key in enumerate(keys):
        ax = fig.add_subplot(1, len(keys), n + 1, sharey=axes[0] if axes else None)
        axes.append(ax)
        points = np.array(per_charge[key], dtype=float)
        low = points[:, 1].min()
        keep = points[:, 1] <= low + height
        ax.scatter(points[keep, 0], points[keep, 1], s=22, marker="_", linewidths=1.6,
                   color=PART_COLOURS[n % len(PART_COLOURS)])
        sector = details.get(key)
        label = f"charge {key}" if key != "none" else "all states"
        if sector is not None:
            label += "\ncounts " + " ".join(map(str, sector["counts"]))
        ax.set_title(label, fontsize=8)
        ax.set_xlim(-(w // 2) - 0.5, w // 2 + 0.5)
        ax.set_xlabel("momentum m (k = 2 pi m / L_y)", fontsize=7)
        ax.grid(alpha=0.25)
        ax.tick_params(labelsize=7)
    if axes:
        axes[0].set_ylabel("-ln(lambda^2)")
    if title:
        fig.suptitle(title, fontsize=9)
    fig.tight_layout()
    fig.savefig(path)
    return path
