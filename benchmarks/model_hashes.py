"""Hash what model building produces, to compare two versions of the code for identical results.

``python -m benchmarks.model_hashes`` loads twelve cases of the bundled models (all nine files, with
twist, flux, strip and armchair variants, and the 3168-site Haldane cylinder of the free-fermion
benchmark) and prints, per case, the number of products, a SHA-256 prefix over every product
(coefficient, sites, origin, each matrix's dtype, shape and bytes), the Hermitian pairing, the
sector and, where the model is quadratic, a hash of the quadratic form (hopping, pairing,
constant) or the first words of the error. Run it in two checkouts and ``diff`` the outputs.
"""

from __future__ import annotations

import hashlib

import numpy as np

__all__ = ["CASES", "main"]

CASES = (
    ("haldane", {"length": "6", "circumference": "5", "twist": "1.0", "M": "0.2", "V": "0.0"}),
    ("haldane", {"length": "5", "circumference": "4", "flux": "0.1", "V": "0.5"}),
    ("haldane", {"length": "4", "circumference": "3", "geometry": "strip", "orientation": "armchair"}),
    ("chern_square", {"twist": "0.7"}),
    ("hofstadter", {}),
    ("hubbard", {"twist": "0.3"}),
    ("heisenberg", {}),
    ("tfim", {}),
    ("kitaev", {}),
    ("kagome_chiral", {}),
    ("toric_code", {}),
    ("haldane", {"length": "44", "circumference": "36", "twist": "1.0"}),
)


def _products_hash(model) -> str:
    h = hashlib.sha256()
    ham = model.hamiltonian
    for p in ham.products:
        h.update(repr((complex(p.coefficient), p.sites, p.origin)).encode())
        for m in p.matrices:
            h.update(repr((m.dtype.str, m.shape)).encode())
            h.update(np.ascontiguousarray(m).tobytes())
    h.update(repr((sorted(ham._paired), ham.is_complex, ham.sector, ham.conserved)).encode())
    return h.hexdigest()[:16]


def _form_hash(model) -> str:
    from netprobe.engines.gaussian.quadratic import quadratic_form
    from netprobe.errors import NetprobeError

    try:
        form = quadratic_form(model.hamiltonian)
    except NetprobeError as err:
        return f"error:{type(err).__name__}:{str(err)[:80]}"
    h = hashlib.sha256()
    for a in (form.hopping, form.pairing):
        h.update(a.dtype.str.encode())
        h.update(np.ascontiguousarray(a).tobytes())
    h.update(repr(form.constant).encode())
    return h.hexdigest()[:16]


def main(argv=None) -> None:
    from netprobe.model.spec import load_model

    for name, overrides in CASES:
        model = load_model(name, dict(overrides))
        print(f"{name} {overrides} products={len(model.hamiltonian.products)} "
              f"products_sha256={_products_hash(model)} form_sha256={_form_hash(model)}", flush=True)


if __name__ == "__main__":
    main()
