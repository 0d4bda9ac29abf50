"""Block-sparse tensors with abelian charges: legs, blocks, contraction and factorisations."""

from netprobe.tensor.blocks import (  # noqa: F401 (re-exported)
    ChargeRule, Leg, BlockTensor, Spectrum, SvdInfo, contract,
    svd, qr, lq, eigh, trace, diag_multiply,
    BlockLayout, plan_cache_info, clear_plan_cache, MatmulTally, matmul_tally,
)

__all__ = [
    "ChargeRule",
    "Leg",
    "BlockTensor",
    "Spectrum",
    "SvdInfo",
    "contract",
    "svd",
    "qr",
    "lq",
    "eigh",
    "trace",
    "diag_multiply",
    "BlockLayout",
    "plan_cache_info",
    "clear_plan_cache",
    "MatmulTally",
    "matmul_tally",
]
