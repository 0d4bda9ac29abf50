"""Assessment: from finite measurements to c- and gamma with error bars, a certificate and a verdict.

What a region of n sites gives is J(n, D), not c- (design notes, section 11). The assessment takes
both limits and shows them:

1. bond dimension: at every region, J and gamma on every rung of the DMRG ladder, extrapolated
   linearly in 1/D (:func:`netprobe.fitting.extrapolate_to_zero`); other engines are exact in D;
2. region size: a region ladder (:func:`netprobe.regions.ladders.region_ladder`: several placements
   per site count), the mean over placements per size, extrapolated to R -> infinity in two forms
   (exponential and power law in the linear size R, :func:`netprobe.fitting.extrapolate_in_size`);
3. the certificate: the CMI of shielded layouts against the width w of the shield, fitted to
   ``CMI ~ exp(-w / xi_M)``, gives the Markov length xi_M; a size is certified when its linear size
   is at least :data:`CERTIFY_MULTIPLE` xi_M. The fits use certified sizes only when three or more
   are certified; otherwise every size, and the result says so (``certified`` false) and its error
   is at least the distance between the limit and the largest region's value.

Error bar of c- = 3 J_inf / pi (and of gamma): the fit error, the spread between the two forms, the
spread between placements at the largest sizes and the bond-dimension error, added in quadrature.

Verdict: ``chiral`` (J of one sign at every size, ``|J|`` growing towards its limit, c- nonzero beyond
three error bars), ``non-chiral`` (c- within three error bars of 0 and ``|J|`` falling or negligible),
or ``inconclusive`` with the reason in words.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from netprobe.engines import GroundState, SolveSettings, solve
from netprobe.errors import MemoryBudgetError
from netprobe.fitting import Fit, extrapolate_in_size, extrapolate_to_zero, least_squares_line
from netprobe.pipeline.measure import measure
from netprobe.probes import DEFAULT_EPS, c_minus_from_j
from netprobe.rdm import estimate_rdm_memory
from netprobe.resources import default_memory_budget
from netprobe.regions.ladders import RegionRung, linear_size, markov_series, region_ladder

__all__ = ["CERTIFY_MULTIPLE", "GAMMA_CANDIDATES", "SizeEntry", "Assessment", "assess_model", "assess_states"]

CERTIFY_MULTIPLE = 5.0
"""A size is certified when its linear size is at least this many Markov lengths. Calibrated with the
free-fermion engine on 24 x 24 cylinders (Haldane t2 = 0.3: xi_M = 0.75; square Chern insulator m = 1,
twist 0.3: xi_M about 0.4-0.5, in nearest-neighbour lengths): from five Markov lengths on, ``|J|/(pi/3)`` is
above 0.94 and its corrections fall exponentially, so that size fits over certified sizes alone land
within 0.5% of 1 with errors of about 1%; at three Markov lengths they do not yet."""

_GAUSSIAN_MARKOV_SITES = 400  # free-fermion CMIs of a few hundred sites take milliseconds

GAMMA_CANDIDATES = {"0": 0.0, "ln 2 / 2": 0.5 * math.log(2), "ln sqrt 3": 0.5 * math.log(3),
                    "ln D_Fibonacci": 0.5 * math.log(2 + (1 + math.sqrt(5)) / 2), "ln 2": math.log(2),
                    "ln 3": math.log(3)}
"""Topological entanglement entropies ln(total quantum dimension) of common theories: trivial,
semion / U(1)_2 (Kalmeyer-Laughlin), Z_3, Fibonacci, toric code / Ising, Z_3 x Z_3 (common practice)."""

_CMI_FLOOR = 1e-10  # CMI below this is rounding of entropies of order 1-10 nats (a few hundred ulps)
_J_FLOOR = 1e-6  # |J| below this at every size counts as vanishing (rounding of J sums over ~1e3 terms)


@dataclass(frozen=True)
class SizeEntry:
    """The probes at one site count, averaged over placements.

    Attributes
    ----------
    sites : int
    linear_size : float
        In nearest-neighbour lengths.
    J, J_error : float
        Mean over placements; the error combines the spread between placements and the
        bond-dimension extrapolation error.
    gamma, gamma_error : float
    certified : bool
    placements : list of dict
        Per placement: layout spec, parts, J and gamma (extrapolated in D), per-rung values.
    """

    sites: int
    linear_size: float
    J: float
    J_error: float
    gamma: float
    gamma_error: float
    certified: bool
    J_bond_error: float = 0.0
    placements: list = field(default_factory=list)

    def to_json(self) -> dict:
        return {"sites": self.sites, "linear_size": self.linear_size, "J": self.J, "J_error": self.J_error,
                "c_minus": c_minus_from_j(self.J), "gamma": self.gamma, "gamma_error": self.gamma_error,
                "certified": self.certified, "J_bond_error": self.J_bond_error, "placements": self.placements}


@dataclass(frozen=True)
class Assessment:
    """The assessment of one ground state (or DMRG ladder); see the module notes."""

    c_minus: float | None
    c_minus_error: float | None
    gamma: float | None
    gamma_error: float | None
    verdict: str
    reason: str
    certified: bool
    markov_length: float | None
    sizes: list
    fits: dict
    markov: dict
    engine: str
    model: Any = field(repr=False, default=None)
    notes: list = field(default_factory=list)
    seconds: float = 0.0
    polarization: dict | None = None

    def with_polarization(self, fit: dict) -> "Assessment":
        """This assessment with the momentum-polarization c- of the cylinder cut beside it.

        ``fit`` is the ``polarization`` object of ``netprobe edge --circumferences`` (vacuum sector:
        ``c_minus``, ``c_minus_error``, defined mod 24). The two routes agree when they differ by at
        most twice their combined error, after the polarization value is brought to the multiple of
        24 nearest the bulk one.
        """
        c_pol, e_pol = fit.get("c_minus"), fit.get("c_minus_error")
        entry = {"c_minus": c_pol, "c_minus_error": e_pol, "circumferences": fit.get("circumferences"),
                 "agrees": None, "h_minus_c_over_24": fit.get("h_minus_c_over_24"), "error": fit.get("error"),
                 "note": fit.get("note", "")}
        statement = "no bulk c- to compare with"
        if c_pol is not None and self.c_minus is not None:
            shifted = c_pol + 24 * round((self.c_minus - c_pol) / 24)
            error = math.hypot(self.c_minus_error or 0.0, e_pol or 0.0)
            agrees = bool(abs(shifted - self.c_minus) <= 2 * error)
            entry.update(c_minus_nearest_bulk=shifted, agrees=agrees)
            statement = (f"{'agrees' if agrees else 'disagrees'} with the bulk c- = {self.c_minus:+.3f} +- "
                         f"{self.c_minus_error or 0.0:.3f} (difference {shifted - self.c_minus:+.3f} after the "
                         f"multiple of 24 nearest the bulk value; agreement means within twice the combined "
                         f"error {error:.3f})")
        entry["statement"] = statement
        return Assessment(**{**self.__dict__, "polarization": entry})

    @property
    def nearest(self) -> dict:
        """Nearest candidate values: c- in multiples of 1/2, gamma among :data:`GAMMA_CANDIDATES`."""
        out = {}
        if self.c_minus is not None:
            out["c_minus"] = round(2 * self.c_minus) / 2
        if self.gamma is not None:
            name = min(GAMMA_CANDIDATES, key=lambda k: abs(GAMMA_CANDIDATES[k] - self.gamma))
            out["gamma"] = {"name": name, "value": GAMMA_CANDIDATES[name]}
        return out

    def to_json(self) -> dict:
        """The JSON object of ``netprobe assess``."""
        out = {"c_minus": self.c_minus, "c_minus_error": self.c_minus_error, "gamma": self.gamma,
               "gamma_error": self.gamma_error, "verdict": self.verdict, "reason": self.reason,
               "certified": self.certified, "markov_length": self.markov_length,
               "certify_multiple": CERTIFY_MULTIPLE, "nearest": self.nearest,
               "sizes": [s.to_json() for s in self.sizes], "fits": self.fits, "markov": self.markov,
               "engine": self.engine, "notes": list(self.notes), "seconds": self.seconds}
        if self.polarization is not None:
            out["polarization"] = self.polarization
        if self.model is not None:
            out.update(model=self.model.name, sites=self.model.num_sites,
                       parameters=self.model.numeric_parameters())
        return out

    def __repr__(self) -> str:
        c = "n/a" if self.c_minus is None else f"{self.c_minus:+.3f} +- {self.c_minus_error:.3f}"
        return f"Assessment({self.verdict}, c- = {c}, certified={self.certified}, {len(self.sizes)} sizes)"


def _fits_budget(grounds: Sequence[GroundState], budget: int):
    last = grounds[-1]
    if last.kind != "many-body":
        return None

    def fits(layout) -> bool:
        sites = sorted(s for n in layout.names for s in layout[n])
        try:
            return estimate_rdm_memory(last.state, sites, last.model.space) <= budget
        except MemoryBudgetError:
            return False

    return fits


def _markov(grounds, lattice, max_sites, fits, eps, budget) -> dict:
    """The CMI of shielded layouts against the shield's width, and the fitted Markov length."""
    if grounds[-1].kind == "gaussian":
        max_sites = max(max_sites, _GAUSSIAN_MARKOV_SITES)
    series = markov_series(lattice, max_sites=max_sites, fits=fits)
    ground = grounds[-1]
    widths, cmis = [], []
    for w, layout in series:
        value = measure(ground, layout, probes=("CMI",), eps=eps, memory_budget=budget).cmi
        widths.append(w)
        cmis.append(float(value))
    out: dict = {"widths": widths, "cmi": cmis, "markov_length": None, "method": ""}
    if len(widths) >= 2 and max(cmis) < _CMI_FLOOR:
        out.update(markov_length=0.0, method=f"CMI below {_CMI_FLOOR:g} at every width (zero correlation length)")
    else:
        keep = [(w, c) for w, c in zip(widths, cmis) if c > _CMI_FLOOR]
        if len(keep) >= 2:
            w, c = np.array(keep).T
            _, slope, _ = least_squares_line(w, np.log(c))
            if slope < 0:
                out.update(markov_length=float(-1.0 / slope),
                           method=f"ln CMI linear in the shield width over {len(keep)} widths")
            else:
                out["method"] = "the CMI does not fall with the shield width: no Markov length"
        else:
            out["method"] = "fewer than two shielded layouts fit (raise --max-sites)"
    return out


def _per_region(grounds, rung: RegionRung, eps, budget) -> dict:
    values = [measure(g, rung.layout, probes=("TEE", "J"), eps=eps, memory_budget=budget) for g in grounds]
    js = [v.J for v in values]
    gammas = [v.gamma for v in values]
    out = {"spec": rung.layout.spec, "placement": rung.placement,
           "parts": {k: len(rung.layout[k]) for k in "ABC"}, "J": js[-1], "gamma": gammas[-1],
           "J_bond_error": 0.0, "gamma_bond_error": 0.0}
    dims = [g.bond_dimension for g in grounds]
    if len(grounds) > 1 and all(d for d in dims):
        out["by_bond_dimension"] = [{"bond_dimension": d, "J": j, "gamma": gm} for d, j, gm in zip(dims, js, gammas)]
        inv = [1.0 / d for d in dims]
        fj = extrapolate_to_zero(inv, js, variable="1/D")
        fg = extrapolate_to_zero(inv, gammas, variable="1/D")
        out.update(J=fj.value, gamma=fg.value, J_bond_error=fj.error, gamma_bond_error=fg.error)
    return out


def _size_entry(lattice, n, rungs, grounds, eps, budget) -> SizeEntry:
    regions = [_per_region(grounds, r, eps, budget) for r in rungs]
    js = np.array([r["J"] for r in regions])
    gs = np.array([r["gamma"] for r in regions])
    jb = max(r["J_bond_error"] for r in regions)
    gb = max(r["gamma_bond_error"] for r in regions)
    j_spread = float(js.std(ddof=1)) if len(js) > 1 else 0.0
    g_spread = float(gs.std(ddof=1)) if len(gs) > 1 else 0.0
    return SizeEntry(n, linear_size(lattice, n), float(js.mean()), math.hypot(j_spread, jb), float(gs.mean()),
                     math.hypot(g_spread, gb), False, jb, regions)


def _extrapolate(entries: Sequence[SizeEntry], key: str) -> tuple[dict, float | None, float | None, str]:
    """Both size forms for one probe; returns (fits as JSON, value, error, note)."""
    r = [e.linear_size for e in entries]
    v = [getattr(e, key) for e in entries]
    err = [getattr(e, f"{key}_error") for e in entries]
    fits: dict[str, Fit | None] = {form: extrapolate_in_size(r, v, err, form=form)
                                   for form in ("exponential", "power")}
    good = {k: f for k, f in fits.items() if f is not None}
    as_json = {k: (None if f is None else f.to_dict()) for k, f in fits.items()}
    if not good:
        return as_json, None, None, "no size fit converged"
    primary = good.get("exponential") or good["power"]
    value = primary.value
    forms_spread = abs(good["exponential"].value - good["power"].value) if len(good) == 2 else 0.0
    largest = np.argsort(r)[-3:]
    placement = float(np.mean([err[i] for i in largest]))
    error = math.sqrt(primary.error**2 + forms_spread**2 + placement**2)
    return as_json, value, error, ""


def _sign_agreement(js: np.ndarray) -> bool:
    big = js[np.abs(js) > max(_J_FLOOR, 0.05 * np.max(np.abs(js)))]
    return bool(big.size == 0 or np.all(big > 0) or np.all(big < 0))


def _verdict(entries, c, c_err, fits, grounds) -> tuple[str, str]:
    js = np.array([e.J for e in entries])
    if len(entries) < 3:
        return "inconclusive", f"too few sizes ({len(entries)}; at least three are needed): raise --max-sites"
    if np.max(np.abs(js)) < _J_FLOOR:
        return "non-chiral", f"|J| < {_J_FLOOR:g} at every size (J vanishes, as for a state real in a product basis)"
    if c is None:
        return "inconclusive", "the size extrapolations did not converge"
    last = entries[-1]
    if last.J_bond_error > 0.1 * max(abs(last.J), _J_FLOOR) and last.J_bond_error > c_err * math.pi / 6:
        return "inconclusive", (f"not converged in the bond dimension: J at {last.sites} sites moves by "
                                f"{last.J_bond_error:.2g} in the 1/D extrapolation; add larger bond dimensions")
    if not _sign_agreement(js):
        return "inconclusive", "the sign of J differs between sizes"
    r = np.array([e.linear_size for e in entries])
    growth = least_squares_line(r, np.abs(js))[1]
    forms = [f for f in fits.values() if f is not None]
    if len(forms) == 2 and np.sign(forms[0]["value"]) != np.sign(forms[1]["value"]) and abs(c) > 3 * c_err:
        return "inconclusive", "the exponential and power-law extrapolations disagree in sign"
    if abs(c) > 3 * c_err:
        if growth < 0:
            return "inconclusive", "c- is nonzero beyond three error bars, but |J| falls with the region size"
        return "chiral", (f"J has one sign at every size, |J| grows towards its limit, and c- = {c:+.3f} is "
                          f"{abs(c) / c_err:.1f} error bars from 0")
    if growth <= 0 or abs(js[-1]) <= abs(js[0]):
        return "non-chiral", f"c- = {c:+.3f} +- {c_err:.3f} is within three error bars of 0 and |J| falls with size"
    return "inconclusive", (f"c- = {c:+.3f} +- {c_err:.3f} is within three error bars of 0 but |J| still grows "
                            "with the region size: larger regions are needed")


def assess_states(grounds: Sequence[GroundState], *, max_sites: int = 15, placements: int = 3,
                  eps: float = DEFAULT_EPS, memory_budget: int | None = None, progress=None) -> Assessment:
    """Assess ground states of one model (one state, or the rungs of a DMRG ladder in increasing D).

    Parameters
    ----------
    grounds : sequence of GroundState
    max_sites : int
        Largest region (sites) of the size ladder and of the Markov series.
    placements : int
        Regions per size.
    eps : float
        Kernel floor of the modular Hamiltonians.
    memory_budget : int, optional
        Regions whose reduced state would exceed it (by the up-front estimate) are left out.
    progress : file-like, optional

    Returns
    -------
    Assessment

    Raises
    ------
    LatticeError
        If no region fits the lattice.
    """
    if not grounds:
        raise ValueError("assess_states: no ground state given")
    start = time.perf_counter()
    model = grounds[-1].model
    lattice = model.lattice
    budget = memory_budget if memory_budget is not None else default_memory_budget()
    fits = _fits_budget(grounds, budget)
    ladder = region_ladder(lattice, max_sites=max_sites, placements=placements, fits=fits)
    markov = _markov(grounds, lattice, max_sites, fits, eps, budget)
    xi = markov["markov_length"]
    entries = []
    for n, rungs in ladder.items():
        entry = _size_entry(lattice, n, rungs, grounds, eps, budget)
        certified = xi is not None and entry.linear_size >= CERTIFY_MULTIPLE * xi
        entries.append(SizeEntry(**{**entry.__dict__, "certified": certified}))
        if progress is not None:
            print(f"assess | {n:4d} sites: J = {entry.J:+.6f} +- {entry.J_error:.1e}  gamma = {entry.gamma:+.5f}"
                  f"  ({len(rungs)} placement(s))", file=progress, flush=True)
    certified_entries = [e for e in entries if e.certified]
    use_certified = len(certified_entries) >= 3
    used = certified_entries if use_certified else entries
    notes = [g.info["note"] for g in grounds[-1:] if g.info.get("note")]
    if not use_certified:
        notes.append("fewer than three certified sizes: the extrapolation uses every size and its error is at "
                     "least the distance from the largest region's value")
    j_fits, j_inf, j_err, j_note = _extrapolate(used, "J") if len(used) >= 3 else ({}, None, None, "")
    g_fits, g_inf, g_err, _ = _extrapolate(used, "gamma") if len(used) >= 3 else ({}, None, None, "")
    if j_note:
        notes.append(j_note)
    if not use_certified and j_inf is not None:
        j_err = max(j_err, abs(j_inf - used[-1].J))
        g_err = None if g_inf is None else max(g_err, abs(g_inf - used[-1].gamma))
    if max((abs(e.J) for e in entries), default=0.0) < _J_FLOOR:
        j_inf, j_err = 0.0, _J_FLOOR
        j_fits = {"constant": {"value": 0.0, "error": _J_FLOOR, "method": "|J| below the floor at every size"}}
    c = None if j_inf is None else c_minus_from_j(j_inf)
    c_err = None if j_err is None else c_minus_from_j(j_err)
    verdict, reason = _verdict(entries, c, c_err, j_fits, grounds)
    if xi is None:
        notes.append(f"no Markov length ({markov['method']}): no size is certified")
    else:
        notes.append(f"a size is certified when its linear size is at least {CERTIFY_MULTIPLE:g} Markov lengths "
                     f"({CERTIFY_MULTIPLE * xi:.2f} nearest-neighbour lengths)")
    fits_json = {"J": j_fits, "gamma": g_fits, "sizes_used": [e.sites for e in used],
                 "certified_only": use_certified}
    return Assessment(c, c_err, g_inf, g_err, verdict, reason, use_certified, xi, entries, fits_json, markov,
                      grounds[-1].engine, model, notes, time.perf_counter() - start)


def assess_model(model, *, engine: str = "dmrg", settings: SolveSettings | None = None, max_sites: int = 15,
                 placements: int = 3, eps: float = DEFAULT_EPS, memory_budget: int | None = None,
                 progress=None) -> Assessment:
    """Ground state(s) of ``model`` by ``engine``, then :func:`assess_states`.

    The region ladder is checked before the ground state is sought, so that a lattice on which no
    region fits is refused at once.
    """
    region_ladder(model.lattice, max_sites=max_sites, placements=placements)
    grounds, _ = solve(model, engine, settings)
    return assess_states(grounds, max_sites=max_sites, placements=placements, eps=eps,
                         memory_budget=memory_budget, progress=progress)
