"""Results as plain JSON values: the one conversion every JSON export uses."""

from __future__ import annotations

import math
from dataclasses import asdict, is_dataclass

import numpy as np


def to_plain(obj):
    """``obj`` with dataclasses as dicts, numpy arrays and scalars as Python values, paths as
    text and NaN / infinity as None; anything else not JSON-native as its text."""
    if is_dataclass(obj) and not isinstance(obj, type):
        obj = asdict(obj)
    if isinstance(obj, dict):
        return {str(k): to_plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_plain(obj.tolist())
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if obj is None or isinstance(obj, (str, int, float, bool)):
        return obj
    if hasattr(obj, "__fspath__"):
        return str(obj)
    return str(obj)
