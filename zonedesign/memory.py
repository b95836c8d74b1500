"""A resident-memory guard: stop with a clear message before the system kills the run."""

from __future__ import annotations

import contextlib
import resource

from zonedesign.errors import InputError

_UNITS = {"": 1, "B": 1, "K": 1024, "KB": 1024, "M": 1024**2, "MB": 1024**2, "G": 1024**3, "GB": 1024**3}


def parse_size(text: str) -> int:
    """'4GB', '512M', '1000000' -> bytes."""
    t = text.strip().upper().replace("IB", "B")
    num = t.rstrip("KMGB")
    unit = t[len(num):]
    try:
        value = float(num)
    except ValueError:
        raise InputError(f"--max-memory: not a size: {text!r} (use e.g. 4GB or 512MB)") from None
    if unit not in _UNITS or value <= 0:
        raise InputError(f"--max-memory: not a size: {text!r} (use e.g. 4GB or 512MB)")
    return int(value * _UNITS[unit])


@contextlib.contextmanager
def memory_guard(limit: str | None):
    """Cap the address space so an allocation past the limit raises MemoryError cleanly.

    A soft RLIMIT_AS turns the kernel's out-of-memory kill into a Python MemoryError that
    the CLI reports; the output folder is written atomically, so nothing half-written stays.
    """
    if not limit:
        yield
        return
    size = parse_size(limit)
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    # the address space of numba/LLVM and thread stacks is larger than the resident set;
    # the margin keeps a small limit usable while still stopping a runaway allocation
    cap = size + 2 * 1024**3
    if hard != resource.RLIM_INFINITY:
        cap = min(cap, hard)
    resource.setrlimit(resource.RLIMIT_AS, (cap, hard))
    try:
        yield
    except MemoryError as exc:
        raise MemoryError(f"the run needed more memory than --max-memory {limit}; nothing was written") from exc
    finally:
        resource.setrlimit(resource.RLIMIT_AS, (soft, hard))
