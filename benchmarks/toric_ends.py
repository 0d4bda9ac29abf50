"""Momentum polarization of the toric code's four sectors under different ends (issue 10, topological spins).

Asks whether any end condition makes the plain lambda = <T_y^L> show the fermion's h = 1/2, i.e. a
negative lambda at odd L_y. Three set-ups on models/toric_code.toml, exact diagonalisation with scipy:

``ends``
    The model file as it is: the end signs put L_y e particles on the left end (left_edge = -1) and
    L_y m particles on the right end (right_edge = -1).
``mobile``
    One e particle that moves along the left end: left_edge = 1, a hopping ``-hop sum Z`` on the left
    end's vertical edges, and a penalty ``10 (1 - (-1)^q W_charge) / 2`` on the X loop of column 0 that
    keeps q e particles there. In the e x m sector its two lowest states are degenerate (momenta
    +-1 in units of 2 pi / L_y); both momentum eigenstates are cut.
``field``
    The model file's ends with a uniform field ``-field sum (X + Z)``: the spectrum at the cut is no
    longer flat.

Prints per sector the loops, the plain lambda, ``L_y arg(lambda) / 2 pi`` and the s that the rejected
gauge-covariant phase exp(i pi q f / L_y) would give (:mod:`netprobe.pipeline.loops`). Not part of the default suite. Usage::

    python -m benchmarks.toric_ends --variant ends --circumference 5
    python -m benchmarks.toric_ends --variant mobile --circumference 3 --hop 0.3
    python -m benchmarks.toric_ends --variant field --circumference 5 --field 0.15
"""

from __future__ import annotations

import argparse
import cmath
import math
import time

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from netprobe.engines.exact import ground_state
from netprobe.engines.exact.solve import hamiltonian_matrix
from netprobe.model.spec import load_model
from netprobe.pipeline.cut import column_cut, exact_cut, translation_permutation
from netprobe.pipeline.loops import z2_sector

__all__ = ["main"]

PENALTY = 10.0  # far above the gap 2 of the fixed point: fixes the number of e particles at the left end


def _z_diagonal(n: int, sites) -> np.ndarray:
    codes = np.arange(2**n)
    out = np.ones(2**n)
    for i in sites:
        out *= 1 - 2 * ((codes >> (n - 1 - i)) & 1)  # basis state 1 is spin down: Z = -1
    return out


def _x_string(n: int, sites) -> sp.csr_matrix:
    mask = sum(1 << (n - 1 - i) for i in sites)
    codes = np.arange(2**n)
    return sp.csr_matrix((np.ones(2**n), (codes ^ mask, codes)), shape=(2**n, 2**n))


def _translate(vec: np.ndarray, perm: np.ndarray, n: int) -> np.ndarray:
    source = list(range(n))
    for i in range(n):
        source[int(perm[i])] = i
    return np.transpose(vec.reshape((2,) * n), source).reshape(-1)


def _states(args, q: int, f: int):
    """The model and its lowest states (momentum eigenstates within a degenerate level)."""
    ly, length = args.circumference, args.length
    left = 1 if args.variant == "mobile" else 1 - 2 * q
    model = load_model("toric_code", {"length": str(length), "circumference": str(ly), "left_edge": str(left),
                                      "right_edge": str(1 - 2 * f)})
    n, lat = model.num_sites, model.lattice
    basis = ground_state(model.hamiltonian).basis
    ham = hamiltonian_matrix(model.hamiltonian, basis).astype(float)
    if args.variant == "mobile":
        vertical = [i for i, (c, s) in enumerate(zip(lat.cells, lat.sublattice)) if c[0] == 0 and s == 1]
        horizontal = [i for i, (c, s) in enumerate(zip(lat.cells, lat.sublattice)) if c[0] == 0 and s == 0]
        ham = ham + sp.diags(-args.hop * sum(_z_diagonal(n, [i]) for i in vertical))
        ham = ham + PENALTY / 2 * (sp.identity(2**n) - (1 - 2 * q) * _x_string(n, horizontal))
    elif args.variant == "field":
        ham = ham + sp.diags(-args.field * sum(_z_diagonal(n, [i]) for i in range(n)))
        ham = ham - args.field * sum(_x_string(n, [i]) for i in range(n))
    vals, vecs = spla.eigsh(sp.csr_matrix(ham), k=3, which="SA", tol=1e-12)
    order = np.argsort(vals)
    vals, vecs = vals[order], vecs[:, order]
    deg = int(np.sum(vals - vals[0] < 1e-8))
    sub = vecs[:, :deg]
    perm = translation_permutation(lat)
    t = sub.conj().T @ np.column_stack([_translate(sub[:, j], perm, n) for j in range(deg)])
    eig, u = np.linalg.eig(t)
    return model, basis, vals, deg, eig, sub @ u


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="Plain and covariant momentum polarization of the toric code.")
    parser.add_argument("--variant", choices=("ends", "mobile", "field"), default="ends")
    parser.add_argument("--length", type=int, default=2)
    parser.add_argument("--circumference", type=int, default=3)
    parser.add_argument("--hop", type=float, default=0.3, help="mobile: hopping of the end e particle")
    parser.add_argument("--field", type=float, default=0.15, help="field: strength of -field sum (X + Z)")
    args = parser.parse_args(argv)
    ly = args.circumference
    for q in (0, 1):
        for f in (0, 1):
            start = time.process_time()
            model, basis, vals, deg, eig, states = _states(args, q, f)
            cut = column_cut(model.lattice, args.length // 2)
            for j in range(deg):
                vec = states[:, j] / np.linalg.norm(states[:, j])
                psi = np.zeros(2**model.num_sites, dtype=complex)
                psi[basis.codes] = vec

                def measure(product, psi=psi):
                    out = psi.reshape((2,) * model.num_sites)
                    for site, matrix in zip(product.sites, product.matrices):
                        out = np.moveaxis(np.tensordot(matrix, out, axes=([1], [site])), 0, site)
                    return complex(np.vdot(psi, out.reshape(-1)))

                z2 = z2_sector(model, cut.column - 1, measure)
                spec = exact_cut(vec, basis, model.space, cut)
                lam = spec.polarization
                s_plain = ly * cmath.phase(lam) / (2 * math.pi)
                s_cov = s_plain + (z2.charge * z2.flux / 2 if z2.sharp else 0.0)  # with exp(i pi q f / L_y)
                print(f"{args.variant} L_y={ly} length={args.length} q={q} f={f} state {j + 1}/{deg}: "
                      f"W_charge {z2.charge_loop:+.4f} W_flux {z2.flux_loop:+.4f} T_full "
                      f"{ly * cmath.phase(eig[j]) / (2 * math.pi):+.3f} (2pi/L_y) gap {vals[deg] - vals[0]:.4f} | "
                      f"lambda {lam.real:+.6e}{lam.imag:+.1e}j, 2^(1-L_y) = {2.0 ** (1 - ly):.4g} | "
                      f"L_y arg/2pi = {s_plain:+.4f} | covariant s = {s_cov - math.floor(s_cov + 0.5):+.4f} | "
                      f"{time.process_time() - start:.1f} s CPU", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
