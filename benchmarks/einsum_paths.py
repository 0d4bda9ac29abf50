"""Hand-ordered contractions against opt_einsum's path optimizer (not part of the benchmark sets).

``python -m benchmarks.einsum_paths matvec env rdm zipper probes`` times each dense contraction of
netprobe that has more than two operands (or an einsum) in its hand-written order and as an
opt_einsum expression built once (path cached), one thread, and prints opt_einsum's path. opt_einsum
is no longer a dependency (it won nowhere: benchmarks/RESULTS.md, 2026-12-03); install it to rerun.
"""

import sys, time
import numpy as np
try:
    import opt_einsum as oe
except ImportError:  # pragma: no cover - optional
    raise SystemExit("einsum_paths: opt_einsum is not installed; pip install opt_einsum to rerun this comparison")
from threadpoolctl import threadpool_limits
rng = np.random.default_rng(1)
def R(shape, c):
    x = rng.standard_normal(shape)
    return x + 1j * rng.standard_normal(shape) if c else x
def best(fn, n=3):
    b = 1e9
    for _ in range(n):
        t = time.perf_counter(); out = fn(); b = min(b, time.perf_counter() - t)
    return b, out
def compare(name, expr, ops, hand):
    expr_c = oe.contract_expression(expr, *[o.shape for o in ops], optimize="optimal" if len(ops) <= 4 else "greedy")
    path, info = oe.contract_path(expr, *ops, optimize="optimal" if len(ops) <= 4 else "greedy")
    th, ref = best(lambda: hand(*ops)); to, got = best(lambda: expr_c(*ops))
    err = np.linalg.norm(got - ref) / max(np.linalg.norm(ref), 1e-300)
    print(f"{name}: hand {th*1e3:.1f} ms, opt_einsum {to*1e3:.1f} ms (hand/opt_einsum {th/to:.2f}); "
          f"path {path}, its flops {float(info.opt_cost):.3g}; rel diff {err:.1e}", flush=True)

__all__ = ["main"]


def main(which) -> None:
    """Run the comparisons named in ``which`` (matvec, env, rdm, zipper, probes)."""
    with threadpool_limits(1):
        if "matvec" in which:
            dw, d = 20, 2
            for chi, c in ((256, False), (256, True), (512, False)):
                L, th, W1, W2, Rr = R((chi, chi, dw), c), R((chi, d, d, chi), c), R((dw, d, d, dw), False), R((dw, d, d, dw), False), R((chi, dw, chi), c)
                def hand(L, th, W1, W2, Rr):
                    chi_l, a = L.shape[0], L.shape[1]
                    lmat = np.ascontiguousarray(L.transpose(0, 2, 1)).reshape(chi_l * dw, a)
                    w12 = np.einsum("wabu,ucdv->acvwbd", W1, W2)
                    mt = np.ascontiguousarray(w12.reshape(d * d * dw, dw * d * d))
                    rmat = np.ascontiguousarray(Rr.transpose(1, 0, 2)).reshape(-1, chi)
                    x = lmat @ th.reshape(a, -1)
                    y = np.matmul(mt, x.reshape(chi_l, dw * d * d, chi))
                    return (y.reshape(chi_l * d * d, dw * chi) @ rmat).reshape(chi_l, d, d, chi)
                compare(f"two-site matvec without charges D={chi} {'complex' if c else 'real'} (factors rebuilt each call)", "Aaw,astb,wSsu,uTtv,bvB->ASTB", (L, th, W1, W2, Rr), hand)
        if "env" in which:
            dw, d = 20, 2
            for chi, c in ((256, False), (512, False), (256, True)):
                L, A, W = R((chi, chi, dw), c), R((chi, d, chi), c), R((dw, d, d, dw), False)
                def hand(L, A, W, Ac):  # the order of netprobe.engines.mps.left_environment_step
                    t = np.tensordot(L, A, ([1], [0]))
                    t = np.tensordot(t, W, ([1, 2], [0, 2]))
                    return np.tensordot(Ac, t, ([0, 1], [0, 2]))
                compare(f"left environment step D={chi} {'complex' if c else 'real'}", "Aaw,asb,wSsu,ASB->Bbu", (L, A, W, A.conj()), hand)
        if "rdm" in which:
            for x, b, cdim, c in ((16, 64, 64, True), (32, 48, 48, True), (64, 32, 32, False)):
                G, ka, kb = R((x, b, x, b), c), R((b, 2, cdim), c), R((b, 2, cdim), c)
                def hand(G, ka, kbc):  # double-layer walk, traced site (netprobe/rdm.py)
                    half = np.tensordot(G, ka, axes=([1], [0]))
                    return np.tensordot(half, kbc, axes=([2, 3], [0, 1]))
                compare(f"double-layer block step x={x} b={b} c={cdim}", "xbyB,bsc,BsC->xycC", (G, ka, kb.conj()), hand)
        if "zipper" in which:
            for chi, o in ((256, 8), (128, 16)):
                ket, env = R((chi, 2, chi), True), R((chi, chi, o, o), True)
                def hand(ket, env, brac):  # zipper transfer (netprobe/rdm.py _transfer)
                    t = np.tensordot(ket, env, axes=([2], [0]))
                    return np.tensordot(t, brac, axes=([1, 2], [1, 2])).transpose(0, 3, 1, 2)
                compare(f"zipper transfer chi={chi} O={o}", "asb,bBoO,AsB->aAoO", (ket, env, ket.conj()), hand)
        if "probes" in which:
            for da, dbc in ((16, 256), (8, 1024)):
                z, k = R((da, dbc, da, dbc), True), R((dbc, dbc), True)
                def hand(zc, k):
                    return np.einsum("aiaj,ij->", zc, k)
                compare(f"modular commutator trace da={da} dbc={dbc}", "aiaj,ij->", (z.conj(), k), hand)

        if "interleaved" in which:  # the double-layer step again, the three variants taking turns
            for x, b, cd, c in ((16, 64, 64, True), (64, 32, 32, False), (32, 48, 48, True)):
                G, ka, kb = R((x, b, x, b), c), R((b, 2, cd), c), R((b, 2, cd), c)
                kbc = kb.conj()
                expr = oe.contract_expression("xbyB,bsc,BsC->xycC", G.shape, ka.shape, kbc.shape, optimize="optimal")

                def hand_step():
                    half = np.tensordot(G, ka, axes=([1], [0]))
                    return np.tensordot(half, kbc, axes=([2, 3], [0, 1]))

                def swapped_step():
                    half = np.tensordot(G, ka, axes=([1], [0]))  # (x, y, B, s, c)
                    return np.tensordot(kbc, half, axes=([0, 1], [2, 3])).transpose(1, 2, 3, 0)

                times = {"hand": [], "opt_einsum": [], "swapped": []}
                for _ in range(4):
                    for label, fn in (("hand", hand_step), ("opt_einsum", lambda: expr(G, ka, kbc)),
                                      ("swapped", swapped_step)):
                        start = time.perf_counter()
                        fn()
                        times[label].append(time.perf_counter() - start)
                print(f"interleaved double-layer step x={x} b={b} c={cd} {'complex' if c else 'real'}: "
                      + ", ".join(f"{k} {min(v) * 1e3:.0f} ms" for k, v in times.items()), flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
