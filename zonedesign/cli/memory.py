"""A resident-memory guard: stop with a clear message before the system kills the run.

`--max-memory` caps the resident size of the whole run: this process and every process it
started (local workers, a local dask cluster). A watchdog thread samples that size a few
times a second. Past the cap it flags the run and interrupts the main thread; every
progress step and bar tick is a checkpoint that raises on the flag too, so a run that
swallowed the interrupt still stops before its output is moved into place. The stop is a
`MemoryLimitError` (exit 2); output folders are written atomically, so nothing
half-written stays. A cap on the address space backs the watchdog up against one sudden
huge allocation between two samples (it then surfaces as MemoryError).
"""

from __future__ import annotations

import _thread
import contextlib
import os
import resource
import signal
import sys
import threading
from collections.abc import Iterator
from pathlib import Path

from zonedesign import interrupts
from zonedesign.errors import InputError

_UNITS = {"": 1, "B": 1, "K": 1024, "KB": 1024, "M": 1024**2, "MB": 1024**2, "G": 1024**3, "GB": 1024**3, "T": 1024**4, "TB": 1024**4}
# numba/LLVM, thread stacks and allocator arenas reserve far more address space than they
# touch: the backstop cap sits this far above the resident limit
ADDRESS_MARGIN = 2 * 1024**3
INTERVAL = 0.1  # seconds between samples


class MemoryLimitError(InputError):
    """The run's resident size passed --max-memory; it was stopped before writing."""


def parse_size(text: str | int) -> int:
    """'4GB', '512M', '1.5G', '1000000' -> bytes (units are powers of 1024)."""
    if isinstance(text, int) and not isinstance(text, bool):
        if text <= 0:
            raise InputError(f"--max-memory: must be positive, not {text}")
        return text
    t = str(text).strip().upper().replace("IB", "B")
    num = t.rstrip("KMGTB")
    unit = t[len(num):]
    try:
        value = float(num)
    except ValueError:
        raise InputError(f"--max-memory: not a size: {text!r} (use e.g. 4GB, 512MB or 1TB)") from None
    if unit not in _UNITS or not value > 0 or value == float("inf"):
        raise InputError(f"--max-memory: not a size: {text!r} (use e.g. 4GB, 512MB or 1TB)")
    return int(value * _UNITS[unit])


def size_text(n: float) -> str:
    for unit, scale in (("GB", 1024**3), ("MB", 1024**2), ("KB", 1024)):
        if n >= scale:
            return f"{n / scale:.1f} {unit}"
    return f"{int(n)} B"


# ---------------------------------------------------------------- measuring

_PAGE = os.sysconf("SC_PAGE_SIZE") if hasattr(os, "sysconf") else 4096


def _proc_rss(pid: int) -> int:
    try:
        with open(f"/proc/{pid}/statm", "rb") as fh:
            return int(fh.read().split()[1]) * _PAGE
    except (OSError, IndexError, ValueError):
        return 0  # the process ended between listing and reading


def _children() -> dict[int, list[int]]:
    kids: dict[int, list[int]] = {}
    for entry in os.scandir("/proc"):
        if not entry.name.isdigit():
            continue
        try:
            with open(f"/proc/{entry.name}/stat", "rb") as fh:
                stat = fh.read()
        except OSError:
            continue
        # the command name (field 2) may hold spaces and brackets: split after its last ')'
        fields = stat[stat.rfind(b")") + 2 :].split()
        if len(fields) > 1:
            kids.setdefault(int(fields[1]), []).append(int(entry.name))
    return kids


def resident_bytes(pid: int | None = None, *, tree: bool = True) -> int:
    """Resident size of a process (this one by default) and, with `tree`, all its descendants.

    Reads /proc where there is one; elsewhere falls back to this process's peak size.
    """
    pid = os.getpid() if pid is None else pid
    if not Path("/proc/self/statm").exists():
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        return int(peak if sys.platform == "darwin" else peak * 1024)
    total = _proc_rss(pid)
    if tree:
        kids = _children()
        stack = list(kids.get(pid, []))
        while stack:
            p = stack.pop()
            total += _proc_rss(p)
            stack.extend(kids.get(p, []))
    return total


def _address_space() -> int:
    try:
        with open("/proc/self/statm", "rb") as fh:
            return int(fh.read().split()[0]) * _PAGE
    except (OSError, IndexError, ValueError):
        return 0


# ---------------------------------------------------------------- the guard


class _Watchdog(threading.Thread):
    def __init__(self, limit: int, text: str, interrupt: bool):
        super().__init__(name="zonedesign-memory", daemon=True)
        self.limit, self.text, self.interrupt = limit, text, interrupt
        self.stop = threading.Event()
        self.seen = 0

    def run(self) -> None:
        while not self.stop.is_set():
            size = resident_bytes()
            if size > self.limit:
                self.seen = size
                # a memory stop, not a user's interrupt: CP-SAT solves end, exit stays 2
                interrupts.internal_stop()
                if self.interrupt and not self.stop.is_set():
                    # runs Python's SIGINT handler in the main thread even where a library
                    # has reset the system-level SIGINT action (a real signal would kill)
                    _thread.interrupt_main()
                return
            self.stop.wait(INTERVAL)

    @property
    def tripped(self) -> bool:
        return self.seen > 0

    def error(self) -> MemoryLimitError:
        return MemoryLimitError(
            f"the run reached {size_text(self.seen)} of resident memory, above --max-memory "
            f"{self.text}; stopped before writing any output (raise the limit or use fewer workers)"
        )


_active: list[_Watchdog] = []


def _stop(dog: _Watchdog, limits: tuple[int, int] | None) -> None:
    dog.stop.set()
    try:
        if dog.is_alive():
            dog.join()
    finally:
        try:
            if limits is not None:
                resource.setrlimit(resource.RLIMIT_AS, limits)
        finally:
            if dog in _active:
                _active.remove(dog)


def checkpoint() -> None:
    """Raise MemoryLimitError if a guard's watchdog has seen the run pass its limit."""
    for dog in _active:
        if dog.tripped:
            raise dog.error()


@contextlib.contextmanager
def memory_guard(limit: str | int | None) -> Iterator[None]:
    """Stop the enclosed run with MemoryLimitError once its resident size passes `limit`.

    `limit` is a size such as "4GB" (None or "" for no limit).
    """
    if not limit:
        yield
        return
    size = parse_size(limit)
    # interrupt only a main thread whose SIGINT runs a Python handler (which raises
    # KeyboardInterrupt by default); elsewhere the checkpoints alone stop the run
    main = threading.current_thread() is threading.main_thread()
    dog = _Watchdog(size, str(limit), interrupt=main and callable(signal.getsignal(signal.SIGINT)))
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    cap = size + ADDRESS_MARGIN
    if hard != resource.RLIM_INFINITY:
        cap = min(cap, hard)
    capped = _address_space() < cap and (soft == resource.RLIM_INFINITY or cap < soft)
    try:
        _active.append(dog)
        dog.start()
        try:
            if capped:
                resource.setrlimit(resource.RLIMIT_AS, (cap, hard))
            yield
        finally:
            # a late interrupt from the watchdog lands in here at worst: still caught below
            _stop(dog, (soft, hard) if capped else None)
    except (Exception, KeyboardInterrupt) as exc:
        if dog.tripped and not isinstance(exc, MemoryLimitError):
            raise dog.error() from None
        if isinstance(exc, MemoryError):
            raise MemoryLimitError(
                f"the run ran out of memory under --max-memory {limit}; stopped before writing "
                "any output (raise the limit or use fewer workers)"
            ) from exc
        raise
    if dog.tripped:
        raise dog.error()
