"""Block-sparse tensors with abelian charges: charges and legs (``legs``), the block tensor and its index
plans (``blocks``), contraction and factorisations (``linalg``), entropies of a spectrum (``entropy``).
"""

from netprobe.tensor import legs as _legs
from netprobe.tensor import blocks as _blocks
from netprobe.tensor import linalg as _linalg
from netprobe.tensor import entropy as _entropy
from netprobe.tensor.legs import *  # noqa: F401,F403 (re-exported: its __all__)
from netprobe.tensor.blocks import *  # noqa: F401,F403 (re-exported: its __all__)
from netprobe.tensor.linalg import *  # noqa: F401,F403 (re-exported: its __all__)
from netprobe.tensor.entropy import *  # noqa: F401,F403 (re-exported: its __all__)

__all__ = [*_legs.__all__, *_blocks.__all__, *_linalg.__all__, *_entropy.__all__]
