"""The command line through real subprocesses: fixed interface points and one-line errors."""

import json
import math
import subprocess
import sys

import pytest
from conftest import assert_one_line_error, run_cli, run_main, tol


# the exact engine on 256 states: dense eigh (~1e-15 relative) or ARPACK at tol 1e-10 relative
EXACT_ENGINE_ENERGY = 1e-10


def test_models_lists_every_bundled_model():
    proc = run_cli("models", check=True)
    names = {line.split()[0] for line in proc.stdout.splitlines() if line.strip()}
    assert {"heisenberg", "tfim", "haldane", "chern_square", "kitaev", "kagome_chiral", "toric_code",
            "hubbard", "hofstadter"} <= names


def test_check_reports_dimensions():
    proc = run_cli("check", "heisenberg", "--set", "length=10", "--json", check=True)
    info = json.loads(proc.stdout)
    assert info["sites"] == 10
    assert info["exact_dimension"] == math.comb(10, 5)  # Sz = 0 sector of 10 spins-1/2 (binomial count)
    assert max(info["mpo_bond_dimensions"]) == 5  # Heisenberg chain MPO: 2 + 3 channels (common practice)


def test_check_summarises_huge_spaces_and_long_profiles():
    # 120 spins-1/2: 2^120 basis states, far beyond 62-bit basis codes; 119 MPO bonds
    args = ("check", "heisenberg", "--set", "lattice=square", "--set", "length=20", "--set", "circumference=6")
    text = run_cli(*args, check=True).stdout
    full = run_cli(*args, "--json", check=True).stdout
    info = json.loads(full)
    assert info["exact_dimension"] is None
    assert len(info["mpo_bond_dimensions"]) == info["sites"] - 1 == 119
    mantissa, exponent = f"{2.0 ** 120:.1e}".split("e+")  # 1.3e+36, by float arithmetic
    assert f"about {mantissa}e{int(exponent)} basis states" in text
    assert "far beyond exact diagonalisation" in text
    profile = info["mpo_bond_dimensions"]
    mpo_line = next(line for line in text.splitlines() if line.startswith("MPO"))
    assert f"max bond dimension {max(profile)} at bonds" in mpo_line
    assert " ".join(map(str, profile[:3])) + " ... " + " ".join(map(str, profile[-3:])) in mpo_line
    assert max(len(line) for line in text.splitlines()) < 140  # a terminal line, not 119 numbers


def test_exact_json_keys_and_value():
    proc = run_cli("exact", "tfim", "--set", "length=8", "--json", check=True)
    out = json.loads(proc.stdout)
    for key in ("energy", "energy_per_site", "sites", "parameters"):
        assert key in out
    n = 8
    # open critical Ising chain: E0 = J [1 - 1/sin(pi/(4N+2))] (Pfeuty, Ann. Phys. 57, 79 (1970))
    assert out["energy"] == pytest.approx(1 - 1 / math.sin(math.pi / (4 * n + 2)), rel=EXACT_ENGINE_ENERGY)
    assert out["energy_per_site"] == pytest.approx(out["energy"] / n, rel=tol(factor=45))  # one division
    assert out["parameters"]["h"] == 1.0


def test_exact_text_output():
    proc = run_cli("exact", "heisenberg", "--set", "length=6", check=True)
    assert "ground-state energy" in proc.stdout


@pytest.mark.parametrize(
    "args, match",
    [
        (("check", "nosuchmodel"), "model 'nosuchmodel' not found"),
        (("check", "heisenberg", "--set", "J3=1"), "has no parameter 'J3'"),
        (("check", "heisenberg", "--set", "length=0"), "length must be a positive integer"),
        (("check", "heisenberg", "--set", "length"), "--set expects name=value"),
        (("exact", "heisenberg", "--set", "length=5"), "has no states"),
        (("check", "heisenberg", "--set", "lattice=hexagon"), "unknown lattice 'hexagon'"),
        (("exact",), "required"),
        (("frobnicate",), "invalid choice"),
    ],
)
def test_bad_input_is_one_line_exit_2(args, match):
    assert_one_line_error(run_main(*args), match)


def test_malformed_model_file(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[model\nname = 'x'\n")
    assert_one_line_error(run_main("check", str(bad)), "not valid TOML")
    nonherm = tmp_path / "nonherm.toml"
    nonherm.write_text(
        '[model]\nname = "nh"\nsite = "fermion"\nconserved = ["N"]\n'
        '[parameters]\nlattice = "chain"\nlength = 4\ncircumference = 1\n[sector]\nN = 2\n'
        '[[term]]\non = "nn"\nops = "cdag c"\ncoupling = "1j"\n'
    )
    assert_one_line_error(run_main("check", str(nonherm)), "not Hermitian")


def test_cli_import_leaves_figures_kernels_and_clusters_unloaded():
    # Start-up of every command: matplotlib loads only when a figure is drawn, numba only when exact
    # diagonalisation runs, dask.distributed only when a study runs on a cluster (issue #12;
    # benchmarks/RESULTS.md records the time saved).
    code = ("import json, sys, netprobe.cli; netprobe.cli.build_parser(); "
            "print(json.dumps(sorted(m for m in sys.modules if m.split('.')[0] in ('matplotlib', 'numba', "
            "'distributed') or m.startswith('dask.distributed'))))")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert json.loads(proc.stdout) == []

