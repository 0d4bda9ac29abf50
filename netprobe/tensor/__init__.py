"""Block-sparse tensors with abelian charges: charges and legs (``legs``), the block tensor and its index
plans (``blocks``), contraction and factorisations (``linalg``), entropies of a spectrum (``entropy``).
"""

from netprobe.tensor.legs import (  # noqa: F401 (re-exported)
    ChargeRule, Leg,
)
from netprobe.tensor.blocks import (  # noqa: F401 (re-exported)
    BlockTensor, plan_cache_info, clear_plan_cache, MatmulTally, matmul_tally,
)
from netprobe.tensor.linalg import (  # noqa: F401 (re-exported)
    Spectrum, SvdInfo, contract, svd, qr, lq,
    eigh, trace, diag_multiply, BlockLayout,
)
from netprobe.tensor.entropy import (  # noqa: F401 (re-exported)
    entropy_from_weights, renyi_from_weights,
)

__all__ = [
    "ChargeRule",
    "Leg",
    "BlockTensor",
    "plan_cache_info",
    "clear_plan_cache",
    "MatmulTally",
    "matmul_tally",
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
    "entropy_from_weights",
    "renyi_from_weights",
]
