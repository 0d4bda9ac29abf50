"""Tests of the block-sparse tensor core against dense NumPy.

Every check compares with the dense arrays and numpy.tensordot / numpy.linalg (svd, qr, eigvalsh),
the trusted reference. Random charge-conserving tensors are drawn for U(1), U(1)^2, Z_2, U(1) x Z_3 and
the trivial charge, real and complex.
"""

import itertools

import numpy as np
import pytest

from netprobe.errors import NetprobeError
from netprobe.tensor import (
    BlockTensor,
    ChargeRule,
    Leg,
    Spectrum,
    clear_plan_cache,
    contract,
    diag_multiply,
    eigh,
    lq,
    plan_cache_info,
    qr,
    svd,
    trace,
)

RULES = {
    "trivial": ChargeRule.trivial(),
    "u1": ChargeRule.u1(),
    "u1xu1": ChargeRule.u1(2),
    "z2": ChargeRule((2,)),
    "u1xz3": ChargeRule((0, 3)),
}
DTYPES = {"real": np.float64, "complex": np.complex128}
EPS = np.finfo(np.float64).eps


def tol(scale, n):
    """Rounding bound of backward-stable dense kernels, c * n * eps * ||A||.

    Sums of n products, Householder QR, SVD and symmetric eigensolvers all have backward errors of this
    size, and Weyl's inequality carries it to singular values and eigenvalues (Golub and Van Loan,
    Matrix Computations, 4th ed., 2013, sections 2.7, 5.2, 8.1); c = 10 is headroom for the different
    summation orders of the blocked and the dense computation.
    """
    return 10 * max(n, 1) * EPS * max(scale, 1.0)


def reduce_ref(q, moduli):
    """Reduce charges by hand (independent of ChargeRule.reduce)."""
    q = np.array(q, dtype=np.int64)
    for c, m in enumerate(moduli):
        if m:
            q[..., c] %= m
    return q


def dense_fused_charge(legs, moduli):
    """Total charge of every entry of the dense tensor, from per-state charges, shape (*dims, k)."""
    k = len(moduli)
    total = np.zeros([leg.dim for leg in legs] + [k], dtype=np.int64)
    for i, leg in enumerate(legs):
        per_state = np.repeat(leg.charges, leg.dims, axis=0) * leg.direction
        shape = [1] * len(legs) + [k]
        shape[i] = leg.dim
        total = total + per_state.reshape(shape)
    return reduce_ref(total, moduli)


def candidate_charges(rule):
    ranges = [range(-1, 2) if m == 0 else range(m) for m in rule.moduli]
    return np.array(list(itertools.product(*ranges)), dtype=np.int64)


def random_leg(rule, rng, direction=None, max_sectors=3, max_dim=3):
    cand = candidate_charges(rule)
    n = int(rng.integers(1, min(max_sectors, len(cand)) + 1))
    pick = np.sort(rng.choice(len(cand), n, replace=False))
    if direction is None:
        direction = int(rng.choice([1, -1]))
    return Leg(cand[pick], rng.integers(1, max_dim + 1, n), direction)


def full_leg(rule, rng, direction):
    """A leg with up to four candidate charges, each sector of dimension 2 or 3."""
    cand = candidate_charges(rule)
    pick = np.sort(rng.choice(len(cand), min(4, len(cand)), replace=False))
    return Leg(cand[pick], rng.integers(2, 4, len(pick)), direction)


def random_tensor(rule, rng, n_legs, dtype, fixed=None, charge=None, **leg_kw):
    """Random tensor with at least one allowed block; ``fixed`` maps positions to given legs."""
    fixed = fixed or {}
    for _ in range(100):
        legs = [fixed.get(i) or random_leg(rule, rng, **leg_kw) for i in range(n_legs)]
        q = candidate_charges(rule)[rng.integers(len(candidate_charges(rule)))] if charge is None else charge
        t = BlockTensor.random(legs, q, rule, dtype=dtype, rng=rng)
        if t.n_blocks:
            return t
    raise AssertionError("no random tensor with allowed blocks found")


def matricize(dense, left, right):
    rows = int(np.prod([dense.shape[i] for i in left]))
    return np.transpose(dense, left + right).reshape(rows, -1)


# --------------------------------------------------------------------------------------------------
# Charges and legs
# --------------------------------------------------------------------------------------------------


def test_charge_rule_reduces_cyclic_components_only():
    rule = ChargeRule((0, 3, 2))
    q = np.array([[-4, -4, -3], [5, 7, 9]])
    # Z_n charges live in 0..n-1, U(1) charges are untouched (common practice)
    assert rule.reduce(q).tolist() == [[-4, 2, 1], [5, 1, 1]]
    assert ChargeRule(()) == ChargeRule.trivial()
    assert ChargeRule.trivial().reduce([[5], [-3]]).tolist() == [[0], [0]]
    assert str(rule) == "U(1) x Z_3 x Z_2"


def test_charge_rule_rejects_bad_moduli():
    with pytest.raises(ValueError, match="negative entry"):
        ChargeRule((0, -2))
    with pytest.raises(TypeError, match="tuple of integers"):
        ChargeRule((0.5,))


def test_leg_validation():
    with pytest.raises(ValueError, match="repeat a sector"):
        Leg([0, 1, 0], [1, 1, 1])
    with pytest.raises(ValueError, match="direction must be"):
        Leg([0, 1], [1, 1], 0)
    with pytest.raises(ValueError, match="below 1"):
        Leg([0, 1], [1, 0])
    leg = Leg([[0, 1], [1, 0]], [2, 3], -1)
    assert leg.dim == 5 and leg.offsets.tolist() == [0, 2, 5]
    assert leg.dual().direction == 1 and leg.dual().dual() == leg and leg != leg.dual()
    assert leg.sector_index([1, 0]) == 1
    with pytest.raises(ValueError, match="no sector with charge"):
        leg.sector_index([2, 2])


def test_from_basis_charges_blocks_a_spin_one_raising_operator():
    rule = ChargeRule.u1()
    m = np.array([1, 0, -1])
    # <m+1|S+|m> = sqrt(s(s+1) - m(m+1)) for s = 1 (common practice: angular momentum algebra)
    splus = np.zeros((3, 3))
    splus[0, 1] = splus[1, 2] = np.sqrt(2.0)
    leg, perm = Leg.from_basis_charges(m, rule)
    assert leg.basis_charges().ravel().tolist() == m[perm].tolist() == sorted(m.tolist())
    blocked = splus[np.ix_(perm, perm)]
    op = BlockTensor.from_dense(blocked, (leg, leg.dual()), 1, rule)
    np.testing.assert_array_equal(op.to_dense(), blocked)
    sminus = BlockTensor.from_dense(blocked.T, (leg, leg.dual()), -1, rule)
    prod = contract(op, sminus, ([1], [0]))
    np.testing.assert_allclose(prod.to_dense(), blocked @ blocked.T, atol=tol(2.0, 3))
    with pytest.raises(ValueError, match="outside the blocks allowed by charge"):
        BlockTensor.from_dense(blocked, (leg, leg.dual()), 0, rule)
    ident = BlockTensor.eye(leg, rule)
    np.testing.assert_array_equal(contract(ident, op, ([1], [0])).to_dense(), blocked)


# --------------------------------------------------------------------------------------------------
# Structure, dense round trip, elementwise operations
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("dtype", DTYPES.values(), ids=DTYPES.keys())
@pytest.mark.parametrize("name", RULES)
def test_dense_round_trip_has_exactly_the_allowed_entries(name, dtype):
    rule = RULES[name]
    rng = np.random.default_rng(11)
    t = random_tensor(rule, rng, 4, dtype)
    dense = t.to_dense()
    allowed = np.all(dense_fused_charge(t.legs, rule.moduli) == reduce_ref(t.charge, rule.moduli), axis=-1)
    assert np.all(dense[~allowed] == 0)
    # standard-normal entries vanish with probability 0, so every allowed entry must be stored
    assert np.count_nonzero(dense[allowed]) == allowed.sum() == t.size
    back = BlockTensor.from_dense(dense, t.legs, t.charge, rule)
    np.testing.assert_array_equal(back.to_dense(), dense)
    assert back.dtype == np.dtype(dtype)


@pytest.mark.parametrize("dtype", DTYPES.values(), ids=DTYPES.keys())
@pytest.mark.parametrize("name", RULES)
def test_elementwise_operations_match_dense(name, dtype):
    rule = RULES[name]
    rng = np.random.default_rng(5)
    a = random_tensor(rule, rng, 3, dtype)
    b = BlockTensor.random(a.legs, a.charge, rule, dtype=np.float64, rng=rng)
    da, db = a.to_dense(), b.to_dense()
    scale = np.linalg.norm(da) + np.linalg.norm(db)
    atol = tol(scale, 1)
    np.testing.assert_allclose((a + b).to_dense(), da + db, atol=atol)
    np.testing.assert_allclose((a - b).to_dense(), da - db, atol=atol)
    np.testing.assert_allclose((2.5 * a).to_dense(), 2.5 * da, atol=atol)
    np.testing.assert_allclose((a * 1j).to_dense(), 1j * da, atol=atol)
    np.testing.assert_allclose((a / 4).to_dense(), da / 4, atol=atol)
    np.testing.assert_allclose((-a).to_dense(), -da, atol=atol)
    assert (a * 1j).dtype == np.complex128 and (a + b).dtype == np.dtype(dtype)
    # norm and inner product against numpy.linalg.norm and numpy.vdot (the reference)
    assert abs(a.norm() - np.linalg.norm(da)) <= tol(np.linalg.norm(da), da.size)
    assert abs(a.inner(b) - np.vdot(da, db)) <= tol(np.linalg.norm(da) * np.linalg.norm(db), da.size)
    c = a.conj()
    np.testing.assert_array_equal(c.to_dense(), da.conj())
    assert [leg.direction for leg in c.legs] == [-leg.direction for leg in a.legs]
    assert c.charge.tolist() == reduce_ref(-a.charge, rule.moduli).tolist()
    np.testing.assert_array_equal(a.transpose((2, 0, 1)).to_dense(), np.transpose(da, (2, 0, 1)))
    np.testing.assert_array_equal(a.transpose().to_dense(), np.transpose(da))
    np.testing.assert_array_equal(a.astype(np.complex128).to_dense(), da.astype(np.complex128))
    dup = a.copy()
    next(iter(dup.blocks.values()))[...] = 0
    np.testing.assert_array_equal(a.to_dense(), da)


def test_astype_refuses_to_drop_imaginary_parts():
    rule = ChargeRule.u1()
    t = random_tensor(rule, np.random.default_rng(0), 2, np.complex128)
    with pytest.raises(ValueError, match="exceed imag_atol"):
        t.astype(np.float64)
    real_valued = BlockTensor.from_dense(t.to_dense().real.astype(np.complex128), t.legs, t.charge, rule)
    converted = real_valued.astype(np.float64)
    assert converted.dtype == np.float64
    np.testing.assert_array_equal(converted.to_dense(), t.to_dense().real)


def test_constructor_errors():
    rule = ChargeRule.u1()
    legs = (Leg([0, 1], [1, 2], 1), Leg([0, 1], [2, 2], -1))
    with pytest.raises(ValueError, match="has shape"):
        BlockTensor(legs, 0, rule, {(1, 1): np.zeros((2, 3))})
    with pytest.raises(ValueError, match="fused charge"):
        BlockTensor(legs, 0, rule, {(0, 1): np.zeros((1, 2))})
    with pytest.raises(ValueError, match="not reduced"):
        BlockTensor.zeros([Leg([0, 3], [1, 1])], None, ChargeRule((2,)))
    with pytest.raises(ValueError, match="charge component"):
        BlockTensor.zeros([Leg([[0, 0]], [1])], None, rule)
    with pytest.raises(ValueError, match="legs have dimensions"):
        BlockTensor.from_dense(np.zeros((3, 3)), legs, 0, rule)
    with pytest.raises(ValueError, match="float64 or complex128"):
        BlockTensor.zeros(legs, 0, rule, dtype=np.float32)
    t = BlockTensor(legs, 0, rule, {(1, 1): np.ones((2, 2))})
    assert t.n_blocks == 1 and t.to_dense()[1:, 2:].sum() == 4
    with pytest.raises(ValueError, match="different legs"):
        t + BlockTensor.zeros(legs[::-1], 0, rule)
    with pytest.raises(ValueError, match="total charges"):
        t + BlockTensor.zeros(legs, 1, rule)


# --------------------------------------------------------------------------------------------------
# Contraction
# --------------------------------------------------------------------------------------------------

PATTERNS = {
    "one-leg": ((2,), (0,)),
    "two-crossed": ((0, 2), (2, 1)),
    "outer": ((), ()),
    "full": ((0, 1, 2), (1, 2, 0)),
}
DTYPE_PAIRS = {"real-real": (np.float64, np.float64), "real-complex": (np.float64, np.complex128),
               "complex-complex": (np.complex128, np.complex128)}


def contraction_pair(rule, rng, axes, dtypes):
    axes_a, axes_b = axes
    a = random_tensor(rule, rng, 3, dtypes[0])
    fixed = {ib: a.legs[ia].dual() for ia, ib in zip(axes_a, axes_b)}
    b = random_tensor(rule, rng, 3, dtypes[1], fixed=fixed)
    return a, b


@pytest.mark.parametrize("pattern", PATTERNS)
@pytest.mark.parametrize("dtypes", DTYPE_PAIRS.values(), ids=DTYPE_PAIRS.keys())
@pytest.mark.parametrize("name", RULES)
def test_contract_matches_tensordot(name, dtypes, pattern):
    rule = RULES[name]
    axes = PATTERNS[pattern]
    rng = np.random.default_rng(hash((name, pattern)) % 2**32)
    a, b = contraction_pair(rule, rng, axes, dtypes)
    da, db = a.to_dense(), b.to_dense()
    ref = np.tensordot(da, db, axes=axes)
    out = contract(a, b, axes)
    n_sum = int(np.prod([da.shape[i] for i in axes[0]]))
    np.testing.assert_allclose(out.to_dense(), ref, atol=tol(np.linalg.norm(da) * np.linalg.norm(db), n_sum))
    assert out.charge.tolist() == reduce_ref(a.charge + b.charge, rule.moduli).tolist()
    assert out.dtype == np.result_type(*dtypes)
    free_a = [leg for i, leg in enumerate(a.legs) if i not in axes[0]]
    free_b = [leg for i, leg in enumerate(b.legs) if i not in axes[1]]
    assert out.legs == tuple(free_a + free_b)
    if pattern == "full":
        assert abs(out.item() - ref[()]) <= tol(np.linalg.norm(da) * np.linalg.norm(db), n_sum)


def test_contract_integer_axes_and_missing_blocks():
    rule = ChargeRule.u1()
    rng = np.random.default_rng(3)
    a, b = contraction_pair(rule, rng, ((1, 2), (0, 1)), (np.float64, np.float64))
    # drop half the blocks of each: missing blocks are zeros on both sides
    for t in (a, b):
        for key in list(t.blocks)[::2]:
            del t.blocks[key]
    ref = np.tensordot(a.to_dense(), b.to_dense(), axes=2)
    np.testing.assert_allclose(contract(a, b, 2).to_dense(), ref, atol=tol(a.norm() * b.norm(), 36))


def test_contract_rejects_mismatched_legs():
    rule = ChargeRule.u1()
    rng = np.random.default_rng(8)
    leg = Leg([0, 1], [2, 1], 1)
    a = random_tensor(rule, rng, 2, np.float64, fixed={1: leg})
    same_direction = random_tensor(rule, rng, 2, np.float64, fixed={0: leg})
    with pytest.raises(ValueError, match="both have direction"):
        contract(a, same_direction, ([1], [0]))
    other = random_tensor(rule, rng, 2, np.float64, fixed={0: Leg([0, 1], [1, 2], -1)})
    with pytest.raises(ValueError, match="contracted legs need the same charges"):
        contract(a, other, ([1], [0]))
    z2 = BlockTensor.zeros([leg.dual()], None, ChargeRule((2,)))
    with pytest.raises(ValueError, match="charge rules differ"):
        contract(a, z2, ([1], [0]))
    with pytest.raises(ValueError, match="legs of the first tensor against"):
        contract(a, other, ([0, 1], [0]))
    with pytest.raises(ValueError, match="out of range"):
        contract(a, other, ([5], [0]))


def test_contract_reuses_its_index_plan():
    rule = ChargeRule.u1(2)
    rng = np.random.default_rng(21)
    a, b = contraction_pair(rule, rng, ((1,), (0,)), (np.float64, np.float64))
    clear_plan_cache()
    contract(a, b, ([1], [0]))
    before = plan_cache_info()["contract"]
    fresh = BlockTensor.random(a.legs, a.charge, rule, rng=rng)
    out = contract(fresh, b, ([1], [0]))
    after = plan_cache_info()["contract"]
    assert after.hits == before.hits + 1 and after.misses == before.misses
    ref = np.tensordot(fresh.to_dense(), b.to_dense(), axes=([1], [0]))
    np.testing.assert_allclose(out.to_dense(), ref, atol=tol(fresh.norm() * b.norm(), 9))


def test_trace_matches_numpy():
    rule = ChargeRule.u1()
    rng = np.random.default_rng(4)
    leg = Leg([-1, 0, 1], [1, 2, 2], 1)
    t = random_tensor(rule, rng, 3, np.complex128, fixed={0: leg, 2: leg.dual()}, charge=[0])
    ref = np.trace(t.to_dense(), axis1=0, axis2=2)
    np.testing.assert_allclose(trace(t, 0, 2).to_dense(), ref, atol=tol(t.norm(), 5))
    assert trace(BlockTensor.eye(leg, rule), 0, 1).item() == leg.dim
    with pytest.raises(ValueError, match="opposite directions"):
        trace(t, 0, 1)


# --------------------------------------------------------------------------------------------------
# Factorisations
# --------------------------------------------------------------------------------------------------


def isometry_defect(u, axes):
    """|| U^dag U - 1 || with U^dag U contracted over ``axes``."""
    gram = contract(u.conj(), u, (axes, axes)).to_dense()
    return np.abs(gram - np.eye(gram.shape[0])).max()


@pytest.mark.parametrize("dtype", DTYPES.values(), ids=DTYPES.keys())
@pytest.mark.parametrize("name", RULES)
def test_svd_reconstructs_and_matches_dense_singular_values(name, dtype):
    rule = RULES[name]
    rng = np.random.default_rng(17)
    t = random_tensor(rule, rng, 4, dtype)
    left, right = [0, 2], [3, 1]
    U, S, V, info = svd(t, left, right)
    dense = t.to_dense()
    mat = matricize(dense, left, right)
    ref = np.linalg.svd(mat, compute_uv=False)
    n = len(S.values)
    scale = np.linalg.norm(dense)
    # the singular values of a matrix that is block diagonal up to permutations are the union of the
    # blocks' values (common practice); the dense ones beyond the block count are zeros
    np.testing.assert_allclose(S.values, ref[:n], atol=tol(scale, max(mat.shape)))
    assert np.all(ref[n:] <= tol(scale, max(mat.shape)))
    assert info.discarded_weight == 0 and info.kept_dim == n == info.full_dim
    assert abs(info.norm - scale) <= tol(scale, dense.size)
    back = contract(diag_multiply(U, -1, S), V, ([2], [0]))
    atol = tol(scale, max(mat.shape))
    np.testing.assert_allclose(back.to_dense(), np.transpose(dense, left + right), atol=atol)
    assert isometry_defect(U, [0, 1]) <= tol(1.0, mat.shape[0])
    assert isometry_defect(V.transpose((1, 2, 0)), [0, 1]) <= tol(1.0, mat.shape[1])
    assert U.legs[-1].direction == -1 and V.legs[0] == U.legs[-1].dual()
    assert not any(U.charge) and V.charge.tolist() == t.charge.tolist()
    for sector, values in S.by_sector.items():
        np.testing.assert_array_equal(values, S.values[S.sectors == sector])
    np.testing.assert_array_equal(S.charges, S.leg.charges[S.sectors])
    assert isinstance(S, Spectrum) and len(S) == n


@pytest.mark.parametrize("dtype", DTYPES.values(), ids=DTYPES.keys())
@pytest.mark.parametrize("name", ["u1", "u1xu1", "z2", "trivial"])
def test_svd_global_truncation_equals_dense_truncation(name, dtype):
    rule = RULES[name]
    rng = np.random.default_rng(23)
    legs = [full_leg(rule, rng, d) for d in (1, -1, 1, 1)]
    t = BlockTensor.random(legs, None, rule, dtype=dtype, rng=rng)
    left, right = [0, 1], [2, 3]
    dense = t.to_dense()
    mat = matricize(dense, left, right)
    ref = np.linalg.svd(mat, compute_uv=False)
    ref = ref[ref > tol(ref[0], max(mat.shape))]
    w = ref**2
    total = w.sum()
    assert len(ref) >= 4, "need room to truncate"
    atol = tol(ref[0], max(mat.shape))

    keep = len(ref) // 2
    U, S, V, info = svd(t, left, right, max_dim=keep)
    np.testing.assert_allclose(S.values, ref[:keep], atol=atol)
    assert info.kept_dim == keep == U.legs[-1].dim
    assert abs(info.discarded_weight - w[keep:].sum() / total) <= tol(1.0, max(mat.shape))
    # Eckart-Young (Psychometrika 1, 211, 1936): the squared error of the best rank-k approximation
    # is the sum of the discarded squared singular values
    approx = contract(diag_multiply(U, -1, S), V, ([2], [0])).to_dense().reshape(mat.shape)
    err = np.linalg.norm(approx - mat) ** 2
    assert abs(err - w[keep:].sum()) <= tol(total, max(mat.shape))

    j = len(ref) // 3
    cutoff = 0.5 * (w[j] + w[j + 1]) / total
    _, S, _, info = svd(t, left, right, cutoff=cutoff)
    np.testing.assert_allclose(S.values, ref[: j + 1], atol=atol)

    tails = np.concatenate([np.cumsum(w[::-1])[::-1], [0.0]]) / total
    target = len(ref) - 2
    _, S, _, info = svd(t, left, right, max_discarded=0.5 * (tails[target] + tails[target - 1]))
    assert info.kept_dim == target
    assert abs(info.discarded_weight - tails[target]) <= tol(1.0, max(mat.shape))

    _, S, _, _ = svd(t, left, right, max_dim=keep, normalize=True)
    assert abs(np.sum(S.values**2) - 1) <= tol(1.0, keep)
    np.testing.assert_allclose(S.values, ref[:keep] / np.sqrt(w[:keep].sum()), atol=tol(1.0, max(mat.shape)))


def test_spectrum_charges_give_the_mean_left_charge():
    rule = ChargeRule.u1()
    rng = np.random.default_rng(31)
    psi = random_tensor(rule, rng, 3, np.complex128, max_sectors=3, max_dim=3)
    dense = psi.to_dense()
    _, S, _, _ = svd(psi, [0, 1], [2])
    # <Q_L> = sum_a s_a^2 q_a / sum_a s_a^2 because the left reduced density matrix is diagonal in the
    # Schmidt basis with weights s_a^2 (common practice); reference: the same mean from dense weights
    q_left = dense_fused_charge(psi.legs[:2], rule.moduli)[..., 0]
    weight = np.sum(np.abs(dense) ** 2, axis=2)
    ref = np.sum(weight * q_left) / weight.sum()
    got = np.sum(S.values**2 * S.charges[:, 0]) / np.sum(S.values**2)
    assert abs(got - ref) <= tol(np.abs(q_left).max(), dense.size)


@pytest.mark.parametrize("dtype", DTYPES.values(), ids=DTYPES.keys())
@pytest.mark.parametrize("name", RULES)
def test_qr_and_lq_match_dense(name, dtype):
    rule = RULES[name]
    rng = np.random.default_rng(41)
    t = random_tensor(rule, rng, 3, dtype)
    dense = t.to_dense()
    scale = np.linalg.norm(dense)
    n = max(dense.shape) ** 2
    Q, R = qr(t, [0, 2], [1])
    assert isometry_defect(Q, [0, 1]) <= tol(1.0, n)
    back = contract(Q, R, ([2], [0])).to_dense()
    np.testing.assert_allclose(back, np.transpose(dense, (0, 2, 1)), atol=tol(scale, n))
    assert not any(Q.charge) and R.charge.tolist() == t.charge.tolist()
    # the bond dimension of a charge sector is min(rows, columns) of its block, as in numpy.linalg.qr
    assert Q.legs[-1].dim == dense_qr_rank(t, [0, 2], [1])
    L, Qr = lq(t, [0], [1, 2])
    assert isometry_defect(Qr.transpose((1, 2, 0)), [0, 1]) <= tol(1.0, n)
    np.testing.assert_allclose(contract(L, Qr, ([1], [0])).to_dense(), dense, atol=tol(scale, n))
    assert Qr.legs[0].direction == 1 and Qr.charge.tolist() == t.charge.tolist()


def dense_qr_rank(t, left, right):
    """Sum over charge sectors of min(rows, columns), with sector sizes counted from per-state charges."""
    moduli = t.rule.moduli
    rows = dense_fused_charge([t.legs[i] for i in left], moduli).reshape(-1, t.rule.k)
    cols = dense_fused_charge([t.legs[i] for i in right], moduli).reshape(-1, t.rule.k)
    total = 0
    for q in np.unique(rows, axis=0):
        n_cols = int(np.all(cols == reduce_ref(t.charge - q, moduli), axis=1).sum())
        total += min(int(np.all(rows == q, axis=1).sum()), n_cols)
    return total


@pytest.mark.parametrize("dtype", DTYPES.values(), ids=DTYPES.keys())
@pytest.mark.parametrize("name", RULES)
def test_eigh_matches_dense_eigvalsh(name, dtype):
    rule = RULES[name]
    rng = np.random.default_rng(43)
    l1, l2 = random_leg(rule, rng, 1), random_leg(rule, rng, -1)
    x = BlockTensor.random((l1, l2, l1.dual(), l2.dual()), None, rule, dtype=dtype, rng=rng)
    h = x + x.conj().transpose((2, 3, 0, 1))
    dense = h.to_dense()
    dim = l1.dim * l2.dim
    mat = dense.reshape(dim, dim)
    w, U = eigh(h, [0, 1], [2, 3])
    scale = np.linalg.norm(mat)
    np.testing.assert_allclose(w.values, np.linalg.eigvalsh(mat), atol=tol(scale, dim))
    assert isometry_defect(U, [0, 1]) <= tol(1.0, dim)
    back = contract(diag_multiply(U, -1, w), U.conj(), ([2], [2])).to_dense()
    np.testing.assert_allclose(back, dense, atol=tol(scale, dim))
    np.testing.assert_array_equal(w.charges, w.leg.charges[w.sectors])


def test_factorisation_errors():
    rule = ChargeRule.u1()
    rng = np.random.default_rng(2)
    t = random_tensor(rule, rng, 3, np.float64)
    with pytest.raises(ValueError, match="split all 3 legs"):
        svd(t, [0], [1])
    with pytest.raises(ValueError, match="repeat a leg"):
        qr(t, [0, 0], [1, 2])
    with pytest.raises(ValueError, match="max_dim"):
        svd(t, [0], [1, 2], max_dim=0)
    with pytest.raises(ValueError, match="cutoff"):
        svd(t, [0], [1, 2], cutoff=-1.0)
    with pytest.raises(ValueError, match="must be the dual"):
        eigh(t, [0], [1, 2])
    leg = Leg([0, 1], [2, 2], 1)
    charged = BlockTensor.random((leg, leg.dual()), 1, rule, rng=rng)
    with pytest.raises(ValueError, match="must have charge 0"):
        eigh(charged, [0], [1])
    with pytest.raises(ValueError, match="needs 2 values"):
        diag_multiply(charged, 0, {0: np.ones(2), 1: np.ones(3)})


def test_zero_and_empty_tensors():
    rule = ChargeRule.u1()
    a, b = Leg([0, 1], [2, 2], 1), Leg([0, 1], [3, 1], -1)
    zero = BlockTensor.zeros((a, b), None, rule)
    U, S, V, info = svd(zero, [0], [1], cutoff=1e-8)
    # a zero tensor keeps one (zero) singular value so the bond never disappears
    assert info.kept_dim == 1 and info.discarded_weight == 0 and S.values.tolist() == [0.0]
    assert isometry_defect(U, [0]) <= tol(1.0, 4)
    empty = BlockTensor((a, b), None, rule)
    U, S, V, info = svd(empty, [0], [1])
    assert info.kept_dim == 0 and U.shape == (4, 0) and V.shape == (0, 4)
    full = BlockTensor.random((a, b), None, rule, rng=1)
    assert contract(empty, full.conj(), 2).item() == 0
    # eigh counts sectors without blocks as zero matrices: a complete (all-zero) spectrum
    w, _ = eigh(BlockTensor((a, a.dual()), None, rule), [0], [1])
    assert len(w) == a.dim and not np.any(w.values)
    np.testing.assert_array_equal((np.float64(2.0) * full).to_dense(), 2.0 * full.to_dense())


def test_internal_misuse_is_not_a_user_error():
    # issue #12: the tensor layer's errors are programming errors (ValueError/TypeError), never the
    # user-error class that the command line would report as the user's mistake
    with pytest.raises(ValueError, match="repeat a sector") as info:
        Leg([0, 1, 0], [1, 1, 1])
    assert not isinstance(info.value, NetprobeError)
    with pytest.raises(TypeError, match="expected a BlockTensor") as info:
        contract("not a tensor", "not a tensor", 0)
    assert not isinstance(info.value, NetprobeError)
