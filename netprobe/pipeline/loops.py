"""Z2 charge and flux at the cut, from loop operators around the cylinder declared by the model file.

A model file may declare two loops around the cylinder (``[z2_loops]``, :mod:`netprobe.model.spec`):
the product of ``charge_ops`` over the sites of one sublattice of a column, which measures the Z2
charge of everything to its left, and the product of ``flux_ops`` over another sublattice, which
measures the Z2 flux through the cylinder. For the toric code (X on the horizontal edges of a column,
the product of all stars to its left; Z on its vertical edges, the holonomy an e particle picks up
around the cylinder) the eigenvalues ``(-1)^q`` and ``(-1)^f`` label the four sectors 1, e, m, e x m
(Kitaev, Ann. Phys. 303, 2 (2003)); ``netprobe edge`` reports them beside the momentum polarization,
so that each lambda is tied to the sector it belongs to.

What the polarization shows in these sectors (measured, benchmarks/RESULTS.md)
    At the toric-code fixed point the Schmidt spectrum at the cut is flat and ``(T_y^L)^(L_y) = 1`` on
    the left part, so ``lambda = <T_y^L>`` is ``2^(1 - L_y)`` times the eigenvalue of the one
    translation-invariant boundary configuration (odd L_y), a real L_y-th root of unity: +1 in all
    four sectors, and h = 1/2 of e x m cannot show. With a field (0.25 on X and Z) on a four-column
    cylinder, DMRG gives a negative lambda for e x m at L_y = 5 (s = 1/2) and a positive one at
    L_y = 3: the spin appears in the plain lambda once the spectrum is not flat and L_y is large
    enough. A gauge-covariant phase exp(i pi q f / L_y) (the Z2 analogue of the U(1) twist phase of
    :mod:`netprobe.pipeline.cut`) would give 1/2 at the fixed point but turn that L_y = 5 value into
    0 (counting the spin twice): it is not applied.
Sharpness
    The bare loops are exact eigen-operators only at the fixed point; a loop value ``|<W>|`` below
    :data:`LOOP_SHARP` (a mixture of sectors) leaves the label undecided (None).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from netprobe.errors import NetprobeError
from netprobe.model.terms import LocalProduct

__all__ = ["LOOP_SHARP", "Z2Sector", "loop_product", "z2_sector"]

LOOP_SHARP = 0.5
"""``|<W>|`` at or above this: the state is taken to be a loop eigenstate with eigenvalue sign(<W>).

A sector mixture with equal weights has ``<W> = 0``; a loop eigenstate has ``|<W>| = 1`` at the fixed
point and a perimeter-law reduction away from it (0.91 ... 0.99 with a field of 0.15 to 0.25 on the
small cylinders of benchmarks/RESULTS.md)."""


@dataclass(frozen=True)
class Z2Sector:
    """Loop values at a column and the Z2 labels they give.

    Attributes
    ----------
    charge_loop, flux_loop : float
        ``<W_charge>``, ``<W_flux>`` on the last column of the left part.
    charge, flux : int or None
        ``q`` and ``f`` in ``{0, 1}`` (eigenvalues ``(-1)^q``, ``(-1)^f``); None when not sharp.
    column : int
        The column the loops act on.
    """

    charge_loop: float
    flux_loop: float
    charge: int | None
    flux: int | None
    column: int

    @property
    def sharp(self) -> bool:
        """Both loops sharp: the state is in one of the four sectors."""
        return self.charge is not None and self.flux is not None

    def to_json(self) -> dict:
        """Plain values for JSON (the ``z2_loops`` object of ``netprobe edge``)."""
        return {"column": self.column, "charge_loop": self.charge_loop, "flux_loop": self.flux_loop,
                "charge": self.charge, "flux": self.flux, "sharp": self.sharp}


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
    """Charge and flux loops on ``column`` and their labels.

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
    return Z2Sector(values[0], values[1], _label(values[0]), _label(values[1]), int(column))
