"""Walking nested states (dicts, lists, tuples of tensors, arrays and plain values).

Agent and checkpoint states are nested containers; the loop checks them for NaN and inf,
check-agent compares two of them bit for bit and measures their size. One walker serves
all three.
"""

from __future__ import annotations

import math
import pickle
from collections.abc import Iterator
from typing import Any

import numpy as np
import torch


def leaves(state: Any, path: str = "state") -> Iterator[tuple[str, Any]]:
    """Every non-container value of a nested state with its path (``state.a[0].b``)."""
    if isinstance(state, dict):
        for key, value in state.items():
            yield from leaves(value, f"{path}.{key}")
    elif isinstance(state, (list, tuple)):
        for i, value in enumerate(state):
            yield from leaves(value, f"{path}[{i}]")
    else:
        yield path, state


def nonfinite_path(state: Any, path: str = "state") -> str | None:
    """The path of the first floating tensor, array or float holding NaN or inf, or None."""
    for where, value in leaves(state, path):
        if isinstance(value, torch.Tensor):
            if value.is_floating_point() and not bool(torch.isfinite(value).all()):
                return where
        elif isinstance(value, np.ndarray):
            if value.dtype.kind == "f" and not np.isfinite(value).all():
                return where
        elif isinstance(value, float) and not math.isfinite(value):
            return where
    return None


def nbytes(state: Any) -> int:
    """Bytes of the arrays, tensors and byte strings in a nested state."""
    total = 0
    for _, value in leaves(state):
        if isinstance(value, torch.Tensor):
            total += value.numel() * value.element_size()
        elif isinstance(value, np.ndarray):
            total += int(value.nbytes)
        elif isinstance(value, (bytes, bytearray)):
            total += len(value)
    return total


def first_difference(a: Any, b: Any, path: str = "state") -> str | None:
    """Where two nested states differ (bit for bit), or None if they are identical."""
    if isinstance(a, torch.Tensor) or isinstance(b, torch.Tensor):
        if not (isinstance(a, torch.Tensor) and isinstance(b, torch.Tensor)):
            return f"{path}: {type(a).__name__} vs {type(b).__name__}"
        if a.dtype != b.dtype or a.shape != b.shape:
            return f"{path}: {a.dtype}{tuple(a.shape)} vs {b.dtype}{tuple(b.shape)}"
        same = (torch.equal(a, b) if not a.is_floating_point()
                else bool(torch.isclose(a, b, rtol=0, atol=0, equal_nan=True).all()))
        return None if same else f"{path}: tensor values differ"
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        if not (isinstance(a, np.ndarray) and isinstance(b, np.ndarray)):
            return f"{path}: {type(a).__name__} vs {type(b).__name__}"
        if a.dtype != b.dtype or a.shape != b.shape:
            return f"{path}: {a.dtype}{a.shape} vs {b.dtype}{b.shape}"
        nan_ok = a.dtype.kind in "fc"
        return None if np.array_equal(a, b, equal_nan=nan_ok) else f"{path}: array values differ"
    if isinstance(a, dict) and isinstance(b, dict):
        if set(a) != set(b):
            extra = sorted(map(str, set(a) ^ set(b)))
            return f"{path}: keys differ ({', '.join(extra)})"
        for key in a:
            found = first_difference(a[key], b[key], f"{path}.{key}")
            if found:
                return found
        return None
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        if type(a) is not type(b) or len(a) != len(b):
            return f"{path}: {type(a).__name__} of {len(a)} vs {type(b).__name__} of {len(b)}"
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            found = first_difference(x, y, f"{path}[{i}]")
            if found:
                return found
        return None
    if type(a) is not type(b):
        return f"{path}: {type(a).__name__} vs {type(b).__name__}"
    if isinstance(a, float):
        same = a == b or (math.isnan(a) and math.isnan(b))
        return None if same else f"{path}: {a!r} vs {b!r}"
    try:
        if a == b:
            return None
        if type(a).__eq__ is object.__eq__:  # no value equality: compare what it pickles to
            return None if pickle.dumps(a) == pickle.dumps(b) else f"{path}: objects differ"
    except Exception:  # an unpicklable or oddly comparing object: report it as different
        pass
    return f"{path}: {a!r} vs {b!r}"
