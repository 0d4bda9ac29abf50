"""Flux threading on Haldane cylinders: the charge pumped per flux quantum is the Chern number.

Laughlin, Phys. Rev. B 23, 5632 (1981): inserting one flux quantum moves C charges from one edge to
the other; the DMRG flux-insertion method follows Gong, Zhu, Sheng, Sci. Rep. 4, 6317 (2014). Haldane,
Phys. Rev. Lett. 61, 2015 (1988): |C| = 1 for |M| < 3 sqrt(3) |t2 sin phi| (here 1.56), 0 beyond.
"""

import math

import pytest
from conftest import assert_one_line_error, run_main, tol

from netprobe.errors import SpecError
from netprobe.pipeline.flux import thread_flux


# acceptance bound of the pumped charge: on a 6-column cylinder the edge modes leave a few percent
PUMP_6_COLUMNS = 0.05
# D = 48 with 3 sweeps per flux step converges the energy to a few 1e-4 here (measured)
FLUX_ENERGY = 2e-3


BASE = {"length": "6", "circumference": "3", "t2": "0.3", "phi": "pi/2"}


@pytest.mark.slow  # long run (over 10 s on 2 cores); run with -m slow
def test_chern_phase_pumps_one_charge():
    result = thread_flux("haldane", {**BASE, "M": "0"}, steps=6, bond_dimension=48, sweeps=3)
    # 0.05: the acceptance bound; on this 6-column cylinder the edge modes leave a few percent
    assert abs(result.pumped) == pytest.approx(1.0, abs=PUMP_6_COLUMNS)
    assert abs(result.thetas[-1] - 2 * math.pi) < tol(factor=4.5e3)
    # the energy is periodic in the flux along the adiabatic branch; D = 48 with 3 sweeps per step
    # converges it to a few 1e-4 here
    assert result.energies[-1] == pytest.approx(result.energies[0], abs=FLUX_ENERGY)


@pytest.mark.slow  # long run (over 10 s on 2 cores); run with -m slow
def test_trivial_phase_pumps_nothing():
    result = thread_flux("haldane", {**BASE, "M": "3"}, steps=3, bond_dimension=32, sweeps=3)
    assert abs(result.pumped) < PUMP_6_COLUMNS


def test_flux_needs_a_twist_and_a_charge():
    with pytest.raises(SpecError, match="conserves no charge"):
        thread_flux("tfim", {}, steps=2)
    with pytest.raises(SpecError, match="no 'twist' parameter"):
        thread_flux("heisenberg", {}, steps=2)


def test_flux_cli_bad_input():
    assert_one_line_error(run_main("flux", "heisenberg", "--steps", "2"), "no 'twist' parameter")
