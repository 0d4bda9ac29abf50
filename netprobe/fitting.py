"""Extrapolations of finite measurements, with one result type.

Every limit netprobe takes goes through this module:

- the energy against the discarded weight of a DMRG ladder (w -> 0),
- a probe against the inverse bond dimension (1/D -> 0),
- a probe against the linear size of a region (R -> infinity), in two forms.

:func:`extrapolate_to_zero` fits a line in a variable that vanishes in the limit (w or 1/D);
:func:`extrapolate_in_size` fits ``v(R) = v_inf + a exp(-R / xi)`` and ``v(R) = v_inf + a R^-p``.
Both return :class:`Fit`.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Sequence

import numpy as np

__all__ = ["Fit", "least_squares_line", "extrapolate_to_zero", "extrapolate_in_size", "SIZE_FORMS"]


@dataclass(frozen=True)
class Fit:
    """An extrapolated value with its error.

    Attributes
    ----------
    value : float
        The limit.
    error : float
        Its error estimate (see the function that made the fit).
    slope : float
        The coefficient of the fitted variable (line fits), or the amplitude ``a`` (size fits).
    points : int
        Points used.
    method : str
        The fit in words.
    form : str
        ``"line"``, ``"exponential"``, ``"power"`` or ``"constant"``.
    params : dict
        Remaining fitted parameters (``xi`` of the exponential, ``p`` of the power law).
    """

    value: float
    error: float
    slope: float
    points: int
    method: str
    form: str = "line"
    params: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """Plain values (JSON-ready)."""
        return asdict(self)

    def __repr__(self) -> str:
        return f"Fit({self.form}: {self.value:.6g} +- {self.error:.2g}, {self.points} points)"


def least_squares_line(x, y) -> tuple[float, float, float]:
    """Least-squares line ``y = c0 + c1 x``.

    Returns
    -------
    c0, c1, se0 : float
        Intercept, slope and the standard error of the intercept from the residuals (NaN when no
        point is spare, i.e. two points or fewer).
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    design = np.column_stack([np.ones_like(x), x])
    coef, *_ = np.linalg.lstsq(design, y, rcond=None)
    dof = len(x) - 2
    if dof <= 0:
        return float(coef[0]), float(coef[1]), float("nan")
    resid = y - design @ coef
    cov = float(resid @ resid) / dof * np.linalg.inv(design.T @ design)
    return float(coef[0]), float(coef[1]), float(np.sqrt(max(cov[0, 0], 0.0)))


def extrapolate_to_zero(x, y, *, variable: str = "x") -> Fit:
    """Extrapolate ``y(x) = y0 + a x`` to ``x = 0``.

    Parameters
    ----------
    x, y : sequence of float
        At least two points; ``x`` is the quantity that vanishes in the limit (a discarded weight,
        an inverse bond dimension).
    variable : str
        Name of ``x`` for the method text.

    Returns
    -------
    Fit

    Raises
    ------
    ValueError
        For fewer than two points or lengths that differ.

    Notes
    -----
    The error estimate is

    - two points: ``|y0 - y(x_min)|``, the whole extrapolation distance;
    - three or more: the larger of the standard error of ``y0`` and ``|y0 - y0'|``, where ``y0'``
      comes from the line through the two points of smallest ``x``, so that curvature left by the
      points far from the limit shows up in the error (common practice in DMRG extrapolations).

    If all ``x`` are equal (e.g. all discarded weights zero), the value is the lowest ``y`` and the
    error the spread.
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    if x.shape != y.shape or x.ndim != 1:
        raise ValueError("extrapolate_to_zero: give one x per y")
    if len(x) < 2:
        raise ValueError("extrapolate_to_zero: needs at least two points")
    if np.ptp(x) <= 1e-300 or np.ptp(x) <= 1e-12 * max(np.max(np.abs(x)), 1e-300):
        y0 = float(y.min())
        return Fit(y0, float(np.max(np.abs(y - y0))), 0.0, len(x), f"constant (equal {variable})", "constant")
    y0, slope, se = least_squares_line(x, y)
    order = np.argsort(x)
    if len(x) == 2:
        return Fit(y0, abs(y0 - float(y[order[0]])), slope, 2, f"line in {variable} through two points")
    pair = order[:2]
    y0_pair = least_squares_line(x[pair], y[pair])[0] if np.ptp(x[pair]) > 0 else float(y[pair].mean())
    error = max(se if math.isfinite(se) else 0.0, abs(y0 - y0_pair))
    return Fit(y0, error, slope, len(x), f"least-squares line in {variable} over {len(x)} points")


SIZE_FORMS = {
    "exponential": (lambda r, xi: np.exp(-r / xi), "v_inf + a exp(-R/xi)", "xi", np.linspace(0.02, 0.5, 49)),
    "power": (lambda r, p: r ** (-p), "v_inf + a R^-p", "p", np.linspace(1.0, 4.0, 61)),
}
"""The forms of :func:`extrapolate_in_size`: name -> (shape function, formula, name of the nonlinear
parameter, its grid). The exponential's decay length runs over 2% to 50% of the largest size (a fit
can only see decay lengths that the measured range holds at least twice: longer ones would mean the
regions are far from the limit, which the certificate reports separately); powers run from 1 (the
perimeter-to-area ratio of a disk) to 4."""


def extrapolate_in_size(radii: Sequence[float], values: Sequence[float], errors: Sequence[float] | None = None,
                        *, form: str = "exponential") -> Fit | None:
    """Extrapolate a probe measured on regions of growing linear size R to R -> infinity.

    Parameters
    ----------
    radii : sequence of float
        Linear sizes (the fitted ``xi`` is in the same unit).
    values : sequence of float
    errors : sequence of float, optional
        One standard error per value; none below the median of the measured ones.
    form : {"exponential", "power"}

    Returns
    -------
    Fit or None
        None with fewer than three distinct sizes.

    Notes
    -----
    For a gapped state the corrections at radius R come from the failure of the Markov conditions
    near the boundary and corners, so they fall like exp(-R/xi); near a transition or at small R a
    power law fits as well, so both are fitted and compared by the caller.

    The nonlinear parameter (``xi`` or ``p``) is profiled over a grid: at each grid value the model is
    linear in ``v_inf`` and ``a`` and solved by weighted least squares. The value is that of the
    best grid point; the error combines its standard error (residuals scaled to chi^2/dof = 1 when
    they exceed the given errors) with half the range of ``v_inf`` over all grid values whose chi^2
    lies within one (scaled) unit of the minimum, so that data that cannot pin the decay down give a
    wide error instead of a confident number (profile likelihood, common practice).
    """
    if form not in SIZE_FORMS:
        raise ValueError(f"unknown size form {form!r}; valid forms: {', '.join(SIZE_FORMS)}")
    r = np.asarray(radii, float)
    v = np.asarray(values, float)
    if len(np.unique(r)) < 3:
        return None
    sigma = np.ones_like(v)
    measured = np.zeros(0)
    if errors is not None:
        # a size whose error is unknown (one placement) or rounding (placements that are images of each
        # other) gets the median error of the others, so that no point pins the fit by itself
        e = np.asarray(errors, float)
        measured = e[e > 1e-9 * max(float(np.max(np.abs(v))), 1e-300)]
        if measured.size:
            floor = float(np.median(measured))
            sigma = np.maximum(e, floor)
    shape, formula, third, grid = SIZE_FORMS[form]
    dof = len(r) - 3
    rows = []
    for theta in grid * (r.max() if form == "exponential" else 1.0):
        design = np.column_stack([np.ones_like(r), shape(r, theta)]) / sigma[:, None]
        coef, *_ = np.linalg.lstsq(design, v / sigma, rcond=None)
        chi2 = float(np.sum((design @ coef - v / sigma) ** 2))
        rows.append((chi2, float(coef[0]), float(coef[1]), float(theta), design))
    chi2_min, v_inf, amp, theta, design = min(rows, key=lambda row: row[0])
    if measured.size:  # errors given: residuals beyond them widen the error, never narrow it
        scale = max(1.0, chi2_min / dof) if dof > 0 else 1.0
    else:  # no errors: the residuals alone set the scale
        scale = chi2_min / dof if dof > 0 else 0.0
    cov = np.linalg.pinv(design.T @ design) * scale
    se = float(np.sqrt(max(cov[0, 0], 0.0)))
    accepted = [row[1] for row in rows if row[0] <= chi2_min + scale]
    spread = 0.5 * (max(accepted) - min(accepted))
    return Fit(v_inf, math.hypot(se, spread), amp, len(r), f"{formula} over {len(r)} sizes ({third} profiled)",
               form, {third: theta})
