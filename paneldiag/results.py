"""Result objects: frozen dataclasses that turn into JSON-ready plain values."""

from __future__ import annotations

import dataclasses
import math

import numpy as np


def plain(value):
    """Numpy scalars and arrays to Python values; NaN and infinities to None."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return value.to_dict() if hasattr(value, "to_dict") else plain(dataclasses.asdict(value))
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        if value.dtype.kind == "f":   # vectorised: a T x T matrix is T^2 values
            out = value.astype(object)
            out[~np.isfinite(value)] = None
            return out.tolist()
        if value.dtype.kind in "iub":
            return value.tolist()
        return plain(value.tolist())
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    return value


class Result:
    """Mixin for diagnostic results: ``to_dict()`` gives plain JSON-ready values."""

    def to_dict(self) -> dict:
        return {f.name: plain(getattr(self, f.name)) for f in dataclasses.fields(self)}
