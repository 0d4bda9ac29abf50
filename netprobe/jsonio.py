"""The one JSON encoding of results: numpy scalars and arrays, complex numbers, non-finite floats.

The command line (``--json``) and the study ledger both encode through :func:`json_default`; the
ledger keeps canonical text (sorted keys, NaN as ``null``) from :func:`encode_json`.
"""

from __future__ import annotations

import json
import math

import numpy as np

__all__ = ["json_default", "finite_or_none", "encode_json"]


def json_default(value):
    """``default=`` hook of :func:`json.dumps`: numpy integers and floats, arrays as lists, complex as
    ``[re, im]``.

    Raises
    ------
    TypeError
        For any other type (a bug: results hold only these).
    """
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, complex):
        return [value.real, value.imag]
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def finite_or_none(value):
    """NaN and infinities become None, in nested dicts, lists and tuples (JSON has no such numbers)."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: finite_or_none(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [finite_or_none(v) for v in value]
    return value


def encode_json(value) -> str:
    """Canonical JSON text of results (sorted keys, NaN becomes null)."""
    return json.dumps(finite_or_none(json.loads(json.dumps(value, default=json_default))), sort_keys=True)
