"""Compiling in a background process: one group at a time, and nothing left behind.

The group locks are flock(2) locks (POSIX man page flock(2): a lock belongs to its open
file description, so two opens of one file conflict even in one process); a run ended by
a signal must end its background compile too (the README's promise on interrupts: exit
130/143 and nothing of the run left running).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numba
import numpy as np
from cli_support import write_inputs

from zonedesign import compilelock


def test_a_group_held_by_another_is_skipped_then_run_once_released(tmp_path: Path) -> None:
    ran = []
    with compilelock.claimed(tmp_path, "g") as held:
        assert held
        assert compilelock.run_group(tmp_path, "g", "s1", lambda: ran.append(1), wait=False) is False
        assert ran == [] and not compilelock.is_done(tmp_path, "g", "s1")
    assert compilelock.run_group(tmp_path, "g", "s1", lambda: ran.append(1), wait=False) is True
    assert ran == [1]
    assert compilelock.is_done(tmp_path, "g", "s1")
    # another source stamp (edited kernels, another numba or CPU) is not done
    assert not compilelock.is_done(tmp_path, "g", "s2")


def test_a_holder_past_the_wait_limit_is_not_waited_for(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setattr(compilelock, "WAIT_LIMIT_SECONDS", 0.2)
    ran = []
    with compilelock.claimed(tmp_path, "g"):
        assert compilelock.run_group(tmp_path, "g", "s", lambda: ran.append(1), wait=True)
    assert ran == [1]


@numba.njit
def _draw() -> float:
    return np.random.random()


def test_warm_up_leaves_numbas_generator_seeded_alike_whatever_ran(monkeypatch) -> None:
    # which groups a run compiles itself depends on the background process; what the
    # search draws afterwards must not (numba keeps one generator of its own, apart from
    # NumPy's: numba docs, "Supported NumPy features", random)
    from zonedesign.search import kernels as K
    from zonedesign.search import warm

    draws = []
    for names in (set(), {"search-state", "search-pairs"}, {"search-construct"}):
        monkeypatch.setattr(warm, "_WARM", set(names))
        warm.warm_up("annealing")
        draws.append(_draw())
    K.seed_rng(1)
    assert draws == [_draw()] * 3


def test_without_a_cache_folder_a_group_simply_runs(tmp_path: Path) -> None:
    ran = []
    assert compilelock.run_group(None, "g", "s", lambda: ran.append(1), wait=False)
    assert ran == [1] and not compilelock.is_done(None, "g", "s")
    # a folder that cannot be made (a file stands in its way): unguarded, still run
    blocker = tmp_path / "file"
    blocker.write_text("x")
    assert compilelock.run_group(blocker / "sub", "g", "s", lambda: ran.append(2))
    assert ran == [1, 2]


def _precompile_children(cache: Path) -> list[int]:
    """Processes of `zonedesign.precompile` compiling into this cache folder."""
    found = []
    for pid in os.listdir("/proc"):
        if not pid.isdigit():
            continue
        try:
            cmd = Path(f"/proc/{pid}/cmdline").read_bytes()
            env = Path(f"/proc/{pid}/environ").read_bytes().split(b"\0")
        except OSError:
            continue
        if b"zonedesign.precompile" in cmd and f"NUMBA_CACHE_DIR={cache}".encode() in env:
            found.append(int(pid))
    return found


def test_a_signalled_run_ends_its_background_compile(tmp_path: Path) -> None:
    areas, rules = write_inputs(tmp_path / "in")
    for sig, code in ((signal.SIGTERM, 143), (signal.SIGINT, 130)):
        cache = tmp_path / f"numba-{sig}"  # empty: the run starts a background compile
        env = {**os.environ, "NUMBA_CACHE_DIR": str(cache), "ZONEDESIGN_PRECOMPILE": "1"}
        proc = subprocess.Popen(
            [sys.executable, "-m", "zonedesign.cli", "design", str(areas), "--rules", str(rules),
             "--out", str(tmp_path / f"out-{sig}"), "--quiet", "--no-report", "--no-certificate"],
            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
        )
        deadline = time.monotonic() + 120
        while not _precompile_children(cache) and time.monotonic() < deadline and proc.poll() is None:
            time.sleep(0.1)
        assert _precompile_children(cache), "the run started no background compile on an empty cache"
        proc.send_signal(sig)
        assert proc.wait(timeout=120) == code
        time.sleep(0.5)
        assert _precompile_children(cache) == []
