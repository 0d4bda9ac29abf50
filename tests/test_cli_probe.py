"""`netprobe probe` and `netprobe regions` through real subprocesses."""

import json
import math

import pytest
from conftest import assert_one_line_error, run_cli, run_main
from netprobe.engines.mps import random_state
from netprobe.engines.mps.store import save_state
from netprobe.model.spec import load_model


# finite-size effect of a 16x16 strip on C and J/(pi/3): of order 1e-3 (a bulk disk converges to 1e-3 only
# on larger strips), so 1e-2
STRIP_16 = 1e-2
# exact diagonalisation and free fermions on the same Slater determinant: both at rounding of dense
# eigendecompositions of 2^n-dimensional reduced states (~1e-12); 1e-8 is the comparison's bound
SLATER_EXACT = 1e-8


KEYS = ("J", "c_minus", "gamma", "cmi", "entropies", "regions", "engine")


def test_probe_gaussian_chern_insulator_json():
    proc = run_cli("probe", "chern_square", "--set", "length=16", "--set", "circumference=16", "--set",
                   "geometry=strip", "--engine", "gaussian", "--region", "disk:radius=6", "--json", check=True)
    out = json.loads(proc.stdout)
    for key in KEYS + ("chern_number",):
        assert key in out
    # 0 < m < 2: C = 1 (Qi, Wu, Zhang, PRB 74, 085308 (2006)); J = (pi/3) c- for a bulk disk
    # (Phys. Rev. Lett. 128, 176402 (2022)); a 16x16 strip is small, so 1e-2 rather than 1e-3
    assert out["chern_number"] == pytest.approx(1.0, abs=STRIP_16)
    assert out["J"] / (math.pi / 3) == pytest.approx(1.0, abs=STRIP_16)
    assert out["cmi"] is not None and out["cmi"] >= -1e-12
    assert set(out["regions"]["main"]["parts"]) == {"A", "B", "C"}
    sites = out["regions"]["main"]["parts"]["A"]["sites"]
    assert sites and len(out["regions"]["main"]["parts"]["A"]["positions"]) == len(sites)


def test_probe_exact_matches_gaussian_on_a_small_haldane_cylinder():
    args = ("probe", "haldane", "--set", "length=5", "--set", "circumference=2", "--region", "disk:radius=1.2",
            "--json")
    exact = json.loads(run_cli(*args, "--engine", "exact", check=True).stdout)
    free = json.loads(run_cli(*args, "--engine", "gaussian", check=True).stdout)
    assert exact["engine"] == "exact" and free["engine"] == "gaussian"
    assert exact["J"] == pytest.approx(free["J"], abs=SLATER_EXACT)  # Slater determinant: free fermions exact
    assert exact["gamma"] == pytest.approx(free["gamma"], abs=SLATER_EXACT)
    assert exact["J_loose"] == pytest.approx(exact["J"], abs=SLATER_EXACT)  # stable under a 100x change of the floor


def test_region_over_memory_budget_is_refused(tmp_path):
    # the refusal comes from the size estimate of the reduced state, which depends on the bond dimensions of
    # the saved state, not on its amplitudes: a random D = 32 state stands in for a DMRG run
    overrides = {"lattice": "square", "length": "6", "circumference": "5"}
    model = load_model("heisenberg", overrides)
    state = tmp_path / "stage1_D32.h5"
    save_state(state, random_state(model.hamiltonian, bond_dimension=32, rng=3), model_text=model.spec.text,
               overrides=overrides, seed=3)
    proc = run_main("probe", str(state), "--region", "disk:radius=1.6", "--memory-budget", "0.000001")
    assert_one_line_error(proc, "memory budget")
    assert "GiB" in proc.stderr or "MiB" in proc.stderr or "KiB" in proc.stderr


@pytest.mark.parametrize(
    "args, match",
    [
        (("probe", "haldane", "--engine", "gaussian", "--region", "blob:radius=2"), "unknown"),
        (("probe", "haldane", "--engine", "gaussian", "--region", "disk:radius=1", "--probes", "Q"), "unknown probe"),
        (("probe", "haldane", "--engine", "gaussian", "--set", "V=1", "--set", "length=5", "--region",
          "disk:radius=1.2"), "not quadratic"),
        (("probe", "haldane", "--engine", "gaussian", "--region", "disk:radius=30"), "reduce the radius"),
    ],
)
def test_probe_bad_input(args, match):
    assert_one_line_error(run_main(*args), match)


def test_regions_plot_and_json(tmp_path):
    png = tmp_path / "layout.png"
    proc = run_cli("regions", "kagome_chiral", "--set", "length=5", "--set", "circumference=4", "--layout",
                   "sectors:radius=2", "--plot", str(png), "--json", check=True)
    data = json.loads(proc.stdout)
    assert set(data["parts"]) == {"A", "B", "C"}
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("region", ["half:columns=4", "strips:a=1,b=1,c=1,axis=x"])
def test_probe_plot_takes_layouts_with_integer_and_text_parameters(tmp_path, region):
    # the plot is drawn from the layout object itself: an integer column count or an axis name used to
    # be re-parsed as floats after the computation ("got 4.0", or a traceback for axis=x)
    plot = tmp_path / "layout.png"
    proc = run_cli("probe", "tfim", "--set", "length=8", "--engine", "exact", "--region", region, "--probes", "S",
                   "--plot", str(plot))
    assert proc.returncode == 0, proc.stderr
    assert plot.stat().st_size > 0
