"""One run-wide stop flag, set by SIGINT or SIGTERM and checked by every phase.

A signal can land anywhere: in plain Python (the handler raises `Interrupted` there), in
compiled code that calls back into Python (where a library may turn the exception into a
`SystemError` or an error of its own), or inside a CP-SAT solve (where Python runs no
handler until the solve returns). The flag survives all three: a watcher thread sees the
signal through the interpreter's wake-up descriptor even while the main thread is in
compiled code, sets the flag and stops every CP-SAT solve under way. Each phase calls
`check()` between its steps, a solve ended by the flag raises instead of returning, and
the output folder is never moved into place once the flag is set.
"""

from __future__ import annotations

import os
import select
import signal
import socket
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager

# 128 + the signal number, the shell's convention for a process ended by a signal
EXIT_CODES = {signal.SIGINT: 130, signal.SIGTERM: 143}


class Interrupted(KeyboardInterrupt):
    """The run was asked to stop (SIGINT or SIGTERM); no phase may read it as a result."""

    def __init__(self, signum: int = signal.SIGINT):
        self.signum = int(signum)
        super().__init__(signal.Signals(self.signum).name)

    @property
    def exit_code(self) -> int:
        return EXIT_CODES.get(self.signum, 128 + self.signum)


_lock = threading.RLock()  # re-entrant: the handler may run while the main thread holds it
_flag: list[int] = []
_stoppers: dict[int, Callable[[], None]] = {}
# set by the memory guard before it interrupts the main thread itself: that SIGINT is its
# own stop (exit 2), not the user's, so it neither sets the flag nor changes the exit code
_internal = threading.Event()


def internal_stop() -> None:
    """Stop running solves for a stop of the run's own (the memory guard), not a signal's."""
    _internal.set()
    with _lock:
        stoppers = list(_stoppers.values())
    for stop in stoppers:
        stop()


def request(signum: int = signal.SIGINT) -> None:
    """Set the stop flag (the first signal decides the exit code) and stop running solves."""
    with _lock:
        if not _flag:
            _flag.append(int(signum))
        stoppers = list(_stoppers.values())
    for stop in stoppers:
        stop()


def requested() -> int | None:
    """The signal that asked the run to stop, or None."""
    return _flag[0] if _flag else None


def check() -> None:
    """Raise `Interrupted` if the run was asked to stop."""
    signum = requested()
    if signum is not None:
        raise Interrupted(signum)


def reset() -> None:
    """Clear the flag (at the start of a run, so one process can run several)."""
    with _lock:
        _flag.clear()
    _internal.clear()


@contextmanager
def stopper(stop: Callable[[], None]) -> Iterator[None]:
    """While inside, `stop` is called as soon as a stop is requested (or at once if it was)."""
    key = id(stop)
    with _lock:
        _stoppers[key] = stop
        already = bool(_flag)
    try:
        if already:
            stop()
        yield
    finally:
        with _lock:
            _stoppers.pop(key, None)


def _on_signal(signum: int, frame: object) -> None:
    if signum == signal.SIGINT and _internal.is_set():
        raise KeyboardInterrupt  # the memory guard's own interrupt: it raises its error
    request(signum)
    raise Interrupted(signum)


class _Watcher(threading.Thread):
    """Reads signal numbers from the interpreter's wake-up descriptor and sets the flag."""

    def __init__(self, sock: socket.socket, quit_r: int):
        super().__init__(name="zonedesign-stop-watcher", daemon=True)
        self.sock, self.quit_r = sock, quit_r

    def run(self) -> None:
        while True:
            ready, _, _ = select.select([self.sock, self.quit_r], [], [])
            if self.quit_r in ready:
                return
            try:
                data = self.sock.recv(64)
            except (BlockingIOError, InterruptedError):
                continue
            except OSError:
                return
            for signum in data:
                if signum == signal.SIGINT and _internal.is_set():
                    continue
                if signum in EXIT_CODES:
                    request(signum)


@contextmanager
def handling_signals() -> Iterator[None]:
    """Within: SIGINT and SIGTERM set the stop flag and raise `Interrupted` (main thread only).

    Outside the main thread nothing is installed and the flag can still be set by `request`.
    """
    reset()
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = {s: signal.getsignal(s) for s in EXIT_CODES}
    r, w = socket.socketpair()
    r.setblocking(False)
    w.setblocking(False)
    quit_r, quit_w = os.pipe()
    old_fd = signal.set_wakeup_fd(w.fileno(), warn_on_full_buffer=False)
    watcher = _Watcher(r, quit_r)
    watcher.start()
    try:
        for s in EXIT_CODES:
            signal.signal(s, _on_signal)
        yield
    finally:
        for s, h in previous.items():
            signal.signal(s, h if h is not None else signal.SIG_DFL)
        signal.set_wakeup_fd(old_fd)
        os.write(quit_w, b"x")
        watcher.join(timeout=5)
        for fd in (quit_r, quit_w):
            os.close(fd)
        r.close()
        w.close()


def quiet_worker() -> None:
    """Initializer of worker processes: the parent alone handles signals and stops them.

    Numeric warnings are not printed raw from a worker either (stderr keeps one line); the
    parent's independent audit re-derives every figure a warning could concern.
    """
    import warnings

    warnings.simplefilter("ignore")
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    try:
        signal.set_wakeup_fd(-1)
    except ValueError:  # not the main thread of the worker
        pass


# never "one fence failed": a stop, a fault of the interpreter, or the machine out of memory
FATAL = (SystemError, MemoryError)


def raise_if_fatal(exc: BaseException) -> None:
    """Re-raise what a fence executor must not turn into a failed fence; else return.

    A stop request wins over the exception it caused (a signal landing in compiled code
    surfaces as a `SystemError` or a library's own error).
    """
    check()
    if isinstance(exc, FATAL):
        raise exc
