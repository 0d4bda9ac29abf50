"""Z2 charge and flux at the cut, from loop operators around the cylinder, and the covariant phase they give.

A model file may declare two loops around the cylinder (``[z2_loops]``, :mod:`netprobe.model.spec`):
the product of ``charge_ops`` over the sites of one sublattice of a column, which measures the Z2
charge of everything to its left, and the product of ``flux_ops`` over another sublattice, which
measures the Z2 flux through the cylinder. For the toric code (X on the horizontal edges of a column,
the product of all stars to its left; Z on its vertical edges, the holonomy an e particle picks up
around the cylinder) the eigenvalues ``(-1)^q`` and ``(-1)^f`` label the four sectors 1, e, m, e x m
(Kitaev, Ann. Phys. 303, 2 (2003)).

Gauge-covariant translation
    :mod:`netprobe.pipeline.cut` translates the left part with the phase ``exp(i q theta / L_y)`` per
    unit of a U(1) charge q in a flux theta through the cylinder: the translation then measures the
    kinetic momentum (module notes there; needed for the Chern insulator with a twist). The Z2 version
    used here multiplies ``lambda`` by ``exp(i q theta / L_y)`` with ``q in {0, 1}`` the Z2 charge of
    the left part and ``theta = pi f`` the Z2 flux. Lifting q by 2 or theta by 2 pi changes the phase
    by ``exp(2 pi i n / L_y)``: an integer in ``s = h_a - c-/24``, so s mod 1 does not depend on the
    lift. The shift of s is ``q f / 2``: 1/2 for the dyon e x m, 0 for 1, e, m.
What the phase carries (measured, benchmarks/RESULTS.md)
    With the ends of models/toric_code.toml the Schmidt spectrum at the cut is flat and
    ``(T_y^L)^(L_y) = 1`` on the left part, so the plain ``lambda = <T_y^L>`` is ``2^(1 - L_y)`` times
    the eigenvalue of the one translation-invariant boundary configuration (odd L_y), a real L_y-th
    root of unity: +1 in all four sectors. One mobile e on the far end multiplies lambda by that e's
    own L_y-th root of unity, and a uniform field keeps lambda positive (measured at L_y = 3, 5):
    ``L_y arg(lambda) / 2 pi`` stays an integer. So the 1/2 of the fermion comes entirely from this
    phase: it is the Aharonov-Bohm phase of the left part's Z2 charge in the flux, read from the two
    loops, not an independent reading of the spin from the entanglement spectrum.
Sharpness
    The bare loops are exact eigen-operators only at the fixed point; a loop value ``|<W>|`` below
    :data:`LOOP_SHARP` (a mixture of sectors, or loops that a perturbation has dressed) leaves the
    sector undecided and no phase is applied.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from netprobe.errors import NetprobeError
from netprobe.model.terms import LocalProduct

__all__ = ["LOOP_SHARP", "Z2Sector", "loop_product", "z2_sector", "covariant_shift"]

LOOP_SHARP = 0.5
"""``|<W>|`` at or above this: the state is taken to be a loop eigenstate with eigenvalue sign(<W>).

A sector mixture with equal weights has ``<W> = 0``; a loop eigenstate has ``|<W>| = 1`` at the fixed
point and a perimeter-law reduction away from it. 1/2 separates the two on the small cylinders of the
tests and benchmarks (fixed point: 1 to rounding)."""


@dataclass(frozen=True)
class Z2Sector:
    """Loop values at a column and the covariant phase of the translation of the left part.

    Attributes
    ----------
    charge_loop, flux_loop : float
        ``<W_charge>``, ``<W_flux>`` on the last column of the left part.
    charge, flux : int or None
        ``q`` and ``f`` in ``{0, 1}`` (eigenvalues ``(-1)^q``, ``(-1)^f``); None when not sharp.
    phase : float
        ``pi q f / L_y`` (0 when undecided), added to ``arg lambda``.
    column : int
        The column the loops act on.
    """

    charge_loop: float
    flux_loop: float
    charge: int | None
    flux: int | None
    phase: float
    column: int

    @property
    def applied(self) -> bool:
        """Both loops sharp, so the phase is in ``lambda``."""
        return self.charge is not None and self.flux is not None

    def to_json(self) -> dict:
        """Plain values for JSON (the ``z2_loops`` object of ``netprobe edge``)."""
        return {"column": self.column, "charge_loop": self.charge_loop, "flux_loop": self.flux_loop,
                "charge": self.charge, "flux": self.flux, "phase": self.phase, "applied": self.applied}


def loop_product(model, column: int, ops: str, sublattice: int) -> LocalProduct:
    """The product of the site operator ``ops`` over the sites of ``sublattice`` in ``column``.

    Raises
    ------
    NetprobeError
        For an operator the site space does not have, or a column without sites of that sublattice.
    """
    lat, space = model.lattice, model.space
    try:
        matrix = np.asarray(space.operator(ops))
    except Exception:  # noqa: BLE001 - any lookup failure is the same user mistake
        raise NetprobeError(f"[z2_loops] of model '{model.name}': '{ops}' is not an operator of its "
                            f"'{model.spec.site}' sites; use a one-site operator name such as X or Z") from None
    sites = tuple(int(i) for i, (c, s) in enumerate(zip(lat.cells, lat.sublattice))
                  if int(c[0]) == column and int(s) == sublattice)
    if not sites:
        raise NetprobeError(f"[z2_loops] of model '{model.name}': column {column} has no sites of sublattice "
                            f"{sublattice}; choose a sublattice of the {lat.name} lattice")
    return LocalProduct(1.0, sites, tuple(matrix for _ in sites), "z2 loop")


def _label(value: float) -> int | None:
    if abs(value) < LOOP_SHARP:
        return None
    return 0 if value > 0 else 1


def z2_sector(model, column: int, measure) -> Z2Sector:
    """Charge and flux loops on ``column`` and the phase ``pi q f / L_y``.

    Parameters
    ----------
    model : Model
        With ``model.spec.z2_loops`` declared.
    column : int
        The last column of the left part (``cut.column - 1``): the charge loop there measures the
        charge of the whole left part.
    measure : callable
        ``measure(product) -> complex``, the expectation value of a :class:`LocalProduct` in the state.
    """
    spec = model.spec.z2_loops
    values = []
    for kind in ("charge", "flux"):
        product = loop_product(model, column, spec[f"{kind}_ops"], spec[f"{kind}_sublattice"])
        values.append(float(np.real(measure(product))))
    q, f = _label(values[0]), _label(values[1])
    phase = math.pi * q * f / model.lattice.circumference if q is not None and f is not None else 0.0
    return Z2Sector(values[0], values[1], q, f, phase, int(column))


def covariant_shift(sector: Z2Sector) -> float:
    """The shift of ``s = h_a - c-/24`` that the phase gives: ``q f / 2`` (0 when undecided)."""
    return sector.charge * sector.flux / 2 if sector.applied else 0.0
