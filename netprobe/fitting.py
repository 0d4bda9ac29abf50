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
import warnings
from dataclasses import asdict, dataclass, field
from typing import Sequence

import numpy as np
from scipy.optimize import OptimizeWarning, curve_fit

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


def _exponential(r, v, a, xi):
    return v + a * np.exp(-r / xi)


def _power(r, v, a, p):
    return v + a * r ** (-p)


SIZE_FORMS = {
    "exponential": (_exponential, "v_inf + a exp(-R/xi)", "xi"),
    "power": (_power, "v_inf + a R^-p", "p"),
}
"""The forms of :func:`extrapolate_in_size`: name -> (function, formula, name of the third parameter)."""


def extrapolate_in_size(radii: Sequence[float], values: Sequence[float], errors: Sequence[float] | None = None,
                        *, form: str = "exponential") -> Fit | None:
    """Extrapolate a probe measured on regions of growing linear size R to R -> infinity.

    Parameters
    ----------
    radii : sequence of float
        Linear sizes (any unit; the fitted ``xi`` is in the same unit).
    values : sequence of float
    errors : sequence of float, optional
        One standard error per value (weights of the fit; zeros are replaced by the smallest nonzero).
    form : {"exponential", "power"}

    Returns
    -------
    Fit or None
        None with fewer than three distinct sizes, or when the fit does not converge.

    Notes
    -----
    For a gapped state the corrections at radius R come from the failure of the Markov conditions
    near the boundary and corners, so they fall like exp(-R/xi); near a transition or at small R a
    power law fits as well, so both are fitted and compared by the caller. The error of ``v_inf``
    is the larger of the fit's standard error (from the covariance; with no spare point, the
    distance between ``v_inf`` and the value at the largest size) and the change of ``v_inf``
    when the smallest size is left out (when four or more sizes are there).
    """
    if form not in SIZE_FORMS:
        raise ValueError(f"unknown size form {form!r}; valid forms: {', '.join(SIZE_FORMS)}")
    r = np.asarray(radii, float)
    v = np.asarray(values, float)
    if len(np.unique(r)) < 3:
        return None
    sigma = None
    if errors is not None:
        sigma = np.asarray(errors, float)
        positive = sigma[sigma > 0]
        sigma = np.where(sigma > 0, sigma, positive.min() if positive.size else 1.0)
    fitted = _size_fit(r, v, sigma, form)
    if fitted is None:
        return None
    popt, se = fitted
    largest = float(v[np.argmax(r)])
    error = se if math.isfinite(se) and len(r) > 3 else abs(popt[0] - largest)
    if len(np.unique(r)) >= 4:
        keep = r > r.min()
        again = _size_fit(r[keep], v[keep], None if sigma is None else sigma[keep], form)
        if again is not None:
            error = max(error, abs(again[0][0] - popt[0]))
    func, formula, third = SIZE_FORMS[form]
    return Fit(float(popt[0]), float(error), float(popt[1]), len(r), f"{formula} over {len(r)} sizes", form,
               {third: float(popt[2])})


def _size_fit(r, v, sigma, form):
    func = SIZE_FORMS[form][0]
    order = np.argsort(r)
    span = float(r.max() - r.min()) or 1.0
    a0 = float(v[order[0]] - v[order[-1]])
    guesses = [(float(v[order[-1]]), a0 * (math.exp(r.min() / s) if form == "exponential" else r.min() ** p), s
                if form == "exponential" else p)
               for s, p in ((span / 2, 1.0), (span / 5, 2.0), (span, 0.5))]
    best = None
    for guess in guesses:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", (OptimizeWarning, RuntimeWarning))
                lower = (-np.inf, -np.inf, 1e-3 * span if form == "exponential" else 0.05)
                upper = (np.inf, np.inf, 50 * span if form == "exponential" else 20.0)
                popt, pcov = curve_fit(func, r, v, p0=guess, sigma=sigma, absolute_sigma=False,
                                       bounds=(lower, upper), maxfev=20000)
        except (RuntimeError, ValueError):
            continue
        resid = float(np.sum(((func(r, *popt) - v) / (1.0 if sigma is None else sigma)) ** 2))
        if best is None or resid < best[0]:
            se = float(np.sqrt(pcov[0, 0])) if np.all(np.isfinite(pcov)) and len(r) > 3 else float("nan")
            best = (resid, popt, se)
    if best is None:
        return None
    return best[1], best[2]
