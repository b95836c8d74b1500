"""Compile groups shared between processes through numba's cache folder.

A first run on an empty numba cache spends much of its time compiling. The kernels are
split into groups (`search.warm.GROUPS`, the feasible-zone walks of `verify.feasible`);
a background process (`zonedesign.precompile`) compiles groups while the run reads its
input, and the run compiles the others itself. One file lock per group, in the cache
folder of the group's kernels, keeps two processes from compiling the same group at once:
whoever takes a group second waits for it and then loads it from the cache. A done
marker (holding the sources' stamp) tells the background process which groups need no
work, and tells a run whether starting one is worth it.

Nothing here decides what a run computes: a group is always run in the process that
needs it, which loads the cached machine code or, when there is none (a cache folder
that cannot be written, a background process that was stopped), compiles it. Without a
writable cache folder no lock is taken at all.
"""

from __future__ import annotations

import fcntl
import hashlib
import os
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

from zonedesign import interrupts

# how often a process waiting for another's group looks again (it also checks the stop flag)
POLL_SECONDS = 0.05
# a group compiles in well under a minute even on a loaded machine; a holder past this
# (a stopped or stuck process) is not waited for any longer: the group then runs
# unguarded, which costs a second compile at worst (numba writes each cache file whole)
WAIT_LIMIT_SECONDS = 600.0


def cache_folder(dispatcher) -> Path | None:
    """The folder numba caches this compiled function in, or None when it caches nowhere."""
    cache = getattr(dispatcher, "_cache", None)
    path = getattr(cache, "_cache_path", None)
    return Path(path) if path else None


def sources_stamp(files: list[str]) -> str:
    """A digest of numba's version, the host CPU numba compiles for and the sources: cached
    code is only valid for all three."""
    import numba
    from numba.core import config

    digest = hashlib.sha256(numba.__version__.encode())
    cpu = config.CPU_NAME or _host_cpu()
    digest.update(cpu.encode())
    for f in files:
        digest.update(Path(f).read_bytes())
    return digest.hexdigest()


def _host_cpu() -> str:
    import llvmlite.binding as ll

    try:
        return ll.get_host_cpu_name()
    except Exception:  # noqa: BLE001 - a stamp without the CPU name is only less precise
        return ""


def _lock_path(folder: Path, group: str) -> Path:
    return folder / f"zonedesign-{group}.lock"


def _done_path(folder: Path, group: str) -> Path:
    return folder / f"zonedesign-{group}.done"


def is_done(folder: Path | None, group: str, stamp: str) -> bool:
    """True when a process finished this group with these very sources."""
    if folder is None:
        return False
    try:
        return _done_path(folder, group).read_text() == stamp
    except OSError:
        return False


def _mark_done(folder: Path, group: str, stamp: str) -> None:
    try:
        tmp = folder / f".zonedesign-{group}.done.{os.getpid()}"
        tmp.write_text(stamp)
        os.replace(tmp, _done_path(folder, group))
    except OSError:
        pass


@contextmanager
def claimed(folder: Path | None, group: str, *, wait: bool = True) -> Iterator[bool]:
    """Hold the group's lock for the block; yields whether it is held.

    wait=True waits while another process holds it (checking the run's stop flag, for at
    most WAIT_LIMIT_SECONDS) and always yields True, also when no lock can be taken (no
    cache folder, a folder that cannot be written): then the block simply runs unguarded.
    wait=False yields False at once when another process holds it.
    """
    fh = None
    if folder is not None:
        try:
            folder.mkdir(parents=True, exist_ok=True)
            fh = open(_lock_path(folder, group), "a+b")  # noqa: SIM115 - held across the block
        except OSError:
            fh = None
    try:
        if fh is not None:
            give_up = time.monotonic() + WAIT_LIMIT_SECONDS
            while True:
                try:
                    fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
                    break
                except BlockingIOError:
                    if not wait:
                        yield False
                        return
                    interrupts.check()
                    if time.monotonic() > give_up:
                        break
                    time.sleep(POLL_SECONDS)
                except OSError:
                    # a file system without locks: run unguarded
                    break
        yield True
    finally:
        if fh is not None:
            fh.close()  # closing releases the lock


def run_group(folder: Path | None, group: str, stamp: str, warm: Callable[[], None], *, wait: bool = True) -> bool:
    """Run `warm` (which compiles or loads the group's kernels) holding the group's lock;
    mark the group done. Returns False when wait=False and another process holds it."""
    with claimed(folder, group, wait=wait) as held:
        if not held:
            return False
        warm()
        if folder is not None:
            _mark_done(folder, group, stamp)
        return True
