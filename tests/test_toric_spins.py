"""Topological spins of the toric code from the cut: Z2 loops and the gauge-covariant momentum polarization.

Kitaev, Ann. Phys. 303, 2 (2003): the anyons 1, e, m, e x m of the toric code have topological spins
h = 0, 0, 0, 1/2. On the cylinder of models/toric_code.toml the end signs select the sector on odd
circumferences (left_edge = -1: Z2 charge e in the left part; right_edge = -1: Z2 flux m through the
cylinder); the loops of [z2_loops] read the sector back from the state.
"""

import cmath
import json
import math

import pytest
from conftest import EXACT_VECTOR, assert_one_line_error, run_main

from netprobe.errors import SpecError
from netprobe.model.spec import load_model, load_spec, parse_spec
from netprobe.pipeline.edge import edge_state
from netprobe.pipeline.loops import LOOP_SHARP, z2_sector

# (left_edge, right_edge) -> (Z2 charge q, Z2 flux f, topological spin h); h from Kitaev (2003)
SECTORS = {(1, 1): (0, 0, 0.0), (-1, 1): (1, 0, 0.0), (1, -1): (0, 1, 0.0), (-1, -1): (1, 1, 0.5)}


def _mod1(x):
    return x - math.floor(x + 0.5)


@pytest.mark.parametrize("ends", list(SECTORS))
def test_toric_code_spins_from_the_covariant_polarization(ends):
    left, right = ends
    q, f, h = SECTORS[ends]
    ly = 3  # odd: the end signs select the sector; 12 spins, exact
    model = load_model("toric_code", {"length": "2", "circumference": str(ly), "left_edge": str(left),
                                      "right_edge": str(right)})
    out = edge_state(model, engine="exact")
    pol = out["polarization"]
    loops = pol["z2_loops"]
    # the fixed point is an exact loop eigenstate: <W> = +-1 to the rounding of the eigensolver
    assert abs(abs(loops["charge_loop"]) - 1) < EXACT_VECTOR and abs(abs(loops["flux_loop"]) - 1) < EXACT_VECTOR
    assert (loops["charge"], loops["flux"]) == (q, f) and loops["applied"]
    # the plain polarization is 2^(1 - L_y) > 0 in every sector (flat spectrum, (T_y^L)^L_y = 1;
    # derived from the stabilizer group, common practice): only the covariant phase separates e x m
    assert pol["lambda_abs"] == pytest.approx(2.0 ** (1 - ly), abs=EXACT_VECTOR)
    assert abs(pol["lambda_arg_plain"]) < EXACT_VECTOR
    # per circumference s = L_y arg(lambda) / 2 pi is defined mod 1 (the phase caveat); c- = 0
    s = ly * pol["lambda_arg"] / (2 * math.pi)
    assert abs(_mod1(s - h)) < EXACT_VECTOR
    assert loops["h_shift"] == h


def test_edge_command_reports_the_loops_and_the_fermion_spin():
    proc = run_main("edge", "toric_code", "--engine", "exact", "--set", "length=2", "--set", "circumference=3",
                    "--set", "left_edge=-1", "--set", "right_edge=-1", "--json")
    assert proc.returncode == 0, proc.stderr
    pol = json.loads(proc.stdout)["polarization"]
    assert {"lambda_abs", "lambda_arg", "lambda_arg_plain", "z2_loops"} <= set(pol)
    # e x m: h = 1/2 (Kitaev 2003), i.e. arg lambda = pi / L_y mod 2 pi / L_y
    assert abs(_mod1(3 * pol["lambda_arg"] / (2 * math.pi) - 0.5)) < EXACT_VECTOR


def test_unsharp_loops_apply_no_phase():
    # a sector mixture has <W> near 0: the sector, and with it the phase, is undecided
    model = load_model("toric_code", {"length": "2", "circumference": "3"})
    mixed = z2_sector(model, 0, lambda product: LOOP_SHARP / 2)
    assert not mixed.applied and mixed.phase == 0.0 and mixed.charge is None
    # sharp values give the phase pi q f / L_y
    dyon = z2_sector(model, 0, lambda product: -1.0)
    assert dyon.applied and dyon.phase == pytest.approx(math.pi / 3)
    assert cmath.exp(3j * dyon.phase) == pytest.approx(-1)  # e^{2 pi i h} = -1: the fermion


def test_z2_loops_table_is_validated():
    text = load_spec("toric_code").text
    broken = text.replace('flux_sublattice = 1', 'flux_sublattice = "one"')
    with pytest.raises(SpecError, match=r"\[z2_loops\] needs 'flux_sublattice'"):
        parse_spec(broken)
    with pytest.raises(SpecError, match="unknown key 'flux_op'"):
        parse_spec(text.replace("flux_ops", "flux_op"))
    model = load_model("toric_code", {"length": "2", "circumference": "3"})
    assert model.spec.z2_loops == {"charge_ops": "X", "charge_sublattice": 0, "flux_ops": "Z",
                                   "flux_sublattice": 1}


def test_loop_on_a_missing_sublattice_is_one_line(tmp_path):
    path = tmp_path / "toric_bad.toml"
    path.write_text(load_spec("toric_code").text.replace("flux_sublattice = 1", "flux_sublattice = 7"))
    proc = run_main("edge", str(path), "--engine", "exact", "--set", "length=2", "--set", "circumference=3")
    assert_one_line_error(proc, "no sites of sublattice 7")
