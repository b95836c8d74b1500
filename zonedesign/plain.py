"""The one conversion of results to JSON-ready Python values (summary.json, audit.json, ...)."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from pathlib import Path

import numpy as np


def plain(obj: object, *, finite: bool = False, strict: bool = False) -> object:
    """A copy of `obj` made of dict, list, str, int, float, bool and None only.

    Objects with `to_json()` give its value; dataclasses their fields; numpy scalars and
    arrays their Python values; paths their text; sets a sorted list. With `finite`,
    NaN and infinities become None (JSON has no word for them). With `strict`, any
    other type is a TypeError instead of being passed through as it is.

    >>> plain({"n": np.int64(3), "x": [np.float64("nan")]}, finite=True)
    {'n': 3, 'x': [None]}
    """
    again = lambda v: plain(v, finite=finite, strict=strict)  # noqa: E731
    if hasattr(obj, "to_json") and not isinstance(obj, type):
        return again(obj.to_json())
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: again(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, Mapping):
        return {k if isinstance(k, str) else str(again(k)): again(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [again(v) for v in obj]
    if isinstance(obj, set | frozenset):
        return sorted((again(v) for v in obj), key=repr)
    if isinstance(obj, np.ndarray):
        return again(obj.tolist())
    if isinstance(obj, np.generic):
        return again(obj.item())
    if isinstance(obj, float):
        return None if finite and not math.isfinite(obj) else obj
    if isinstance(obj, Path):
        return str(obj)
    if obj is None or isinstance(obj, str | int | bool):
        return obj
    if strict:
        raise TypeError(f"no JSON form for {type(obj).__name__}")
    return obj
