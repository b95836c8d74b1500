"""Compile the kernels in a background process while a run reads its input.

On an empty numba cache (a fresh install) a run's first search would compile every
kernel itself, on one core. `start_background()`, called at the start of a command,
starts a second Python process instead (`main`): it goes through the compile groups (the
feasible-zone count, the search's groups from the first to the last, the feasible-zone
enumeration), taking each group no other process holds and leaving numba's cache filled,
while the run reads its input, builds its graph and then takes the groups from the other
end (`search.warm.warm_up`). See `zonedesign.compilelock` for how the two share the work.

The background process never changes what a run computes: the run always runs every group
itself (loading it from the cache, or compiling it when the background process did not).
It is started only when some group is not yet in the cache, ignores SIGINT (the run takes
the signal), ends with the run (`stop_background`, at exit, and the kernel's parent-death
signal), and writes nothing but numba's cache and the group locks and markers.
"""

from __future__ import annotations

import atexit
import os
import signal
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

_proc: subprocess.Popen | None = None

# set to "0" to never start the background process (the run then compiles alone)
ENV_SWITCH = "ZONEDESIGN_PRECOMPILE"


def _groups(names: tuple[str, ...] | None = None) -> list[tuple[str, Path | None, str, Callable[[bool], bool]]]:
    """(name, cache folder, stamp, run) per group, in the order the background process
    takes them: the search's groups `names` (the default method's when None)."""
    from zonedesign.search import warm
    from zonedesign.verify import feasible

    search_folder, search_stamp = warm.cache_folder(), warm.stamp()
    walk_folder, walk_stamp = feasible.walk_folder(), feasible.walk_stamp()
    out = [("walk-count", walk_folder, walk_stamp, lambda wait: feasible.warm_walk("count", wait=wait))]
    for name in warm.BACKGROUND if names is None else names:
        out.append((name, search_folder, search_stamp, lambda wait, name=name: warm.warm_group(name, wait=wait)))
    out.append(("walk-enumerate", walk_folder, walk_stamp, lambda wait: feasible.warm_walk("enumerate", wait=wait)))
    return out


def start_background() -> bool:
    """Start the background compile unless every group is already cached (or there is no
    cache to share, or ZONEDESIGN_PRECOMPILE=0). True when one was started."""
    global _proc
    if os.environ.get(ENV_SWITCH, "1") == "0" or (_proc is not None and _proc.poll() is None):
        return False
    from zonedesign import compilelock

    groups = _groups()
    if any(folder is None for _, folder, _, _ in groups):
        return False
    if all(compilelock.is_done(folder, name, stamp) for name, folder, stamp, _ in groups):
        return False
    # this very package first on the path (not `-m`, which would put the working folder
    # first, where another copy of the package may sit): the same sources, the same cache
    here = str(Path(__file__).resolve().parent.parent)
    code = f"import sys; sys.path.insert(0, {here!r}); from zonedesign.precompile import main; sys.exit(main(sys.argv[1:]))"
    try:
        _proc = subprocess.Popen(
            [sys.executable, "-c", code, str(os.getpid())],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            env=dict(os.environ),
        )
    except OSError:
        _proc = None
        return False
    atexit.register(stop_background)
    return True


def stop_background() -> None:
    """End the background compile if it still runs, and reap it. A group it was compiling
    is left unmarked; numba writes each cache file whole, so nothing half-written stays."""
    global _proc
    proc, _proc = _proc, None
    if proc is None:
        return
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def _die_with_parent(parent: int) -> None:
    # Linux: the kernel sends SIGTERM when the process that started this one ends, however
    # it ends; elsewhere the parent's stop_background and the check below remain
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, signal.SIGTERM)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass
    if os.getppid() != parent:
        sys.exit(0)


def main(argv: list[str]) -> int:
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, lambda *_: os._exit(143))
    _die_with_parent(int(argv[0]) if argv else os.getppid())
    from zonedesign import compilelock

    for name, folder, stamp, run in _groups():
        if os.getppid() == 1:
            return 0
        if compilelock.is_done(folder, name, stamp):
            continue
        run(False)
    return 0


def compile_all() -> list[str]:
    """Compile every group (every search method's and both walks) into numba's cache, in
    this process; the names of the groups that could not be cached. The wheel's build runs
    this on the copy of the package it ships (see setup.py), so that an installed package's
    first run loads its kernels instead of compiling them."""
    from zonedesign import compilelock
    from zonedesign.search import warm

    missed = []
    for name, folder, stamp, run in _groups(tuple(warm.GROUPS)):
        run(True)
        if folder is None or not compilelock.is_done(folder, name, stamp):
            missed.append(name)
    return missed


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
