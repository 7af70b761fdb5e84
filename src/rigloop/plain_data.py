"""Turn results into plain data that YAML and JSON readers take without special cases."""

from __future__ import annotations

import math
from pathlib import PurePath
from typing import Any


def plain(obj: Any) -> Any:
    """NaN and infinities become None (JSON has no spelling for them), numpy scalars become
    Python numbers, tuples become lists, keys and paths become text; recursively."""
    if isinstance(obj, dict):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [plain(v) for v in obj]
    if obj is None or isinstance(obj, (bool, str, int)):
        return obj
    if isinstance(obj, float):               # also numpy's float64, a float subclass
        return float(obj) if math.isfinite(obj) else None
    if hasattr(obj, "item"):                 # numpy scalars
        return plain(obj.item())
    if isinstance(obj, PurePath):
        return str(obj)
    try:
        x = float(obj)
    except (TypeError, ValueError):
        return str(obj)
    return x if math.isfinite(x) else None
