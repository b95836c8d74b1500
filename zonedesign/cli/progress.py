"""Progress on stderr: timed log lines and bars (reading, graph, tiers by fence, audit, sweep).

The api reports progress through one callback. A plain callable taking a line of text is
enough; an object that also has `bar(total, desc)` (a context manager yielding something
with `update(n=1)`) gets bars as well. `Progress` is that object for the command line:
bars are drawn with tqdm when stderr is a terminal; elsewhere (logs, CI) a finished bar
becomes one line, so logs stay readable. Every step and bar tick is also a memory
checkpoint (see `zonedesign.cli.memory`).
"""

from __future__ import annotations

import contextlib
import sys
import time
from collections.abc import Callable, Iterator
from typing import Any, Protocol, TextIO

from tqdm import tqdm

from zonedesign.cli.memory import checkpoint


class Bar(Protocol):
    def update(self, n: int = 1) -> None: ...


class _NoBar:
    def update(self, n: int = 1) -> None:
        checkpoint()


class _LineBar:
    """A bar for streams that are not terminals: one line when it closes."""

    def __init__(self, owner: Progress, total: int, desc: str):
        self.owner, self.total, self.desc, self.done = owner, total, desc, 0
        self.t0 = time.perf_counter()

    def update(self, n: int = 1) -> None:
        checkpoint()
        self.done += n

    def close(self) -> None:
        took = time.perf_counter() - self.t0
        self.owner.step(f"{self.desc}: {self.done}/{self.total} done in {took:.1f}s")


class _TqdmBar:
    def __init__(self, total: int, desc: str, stream: TextIO):
        self.bar = tqdm(total=total, desc=desc, file=stream, leave=False, dynamic_ncols=True, unit="")

    def update(self, n: int = 1) -> None:
        checkpoint()
        self.bar.update(n)

    def close(self) -> None:
        self.bar.close()


class Progress:
    """Log lines `[  12.3s] text` and bars on `stream` (stderr by default); `quiet` silences both.

    bars: draw tqdm bars (default: when the stream is a terminal); otherwise each bar ends
    as one log line.

    >>> say = Progress(quiet=False)
    >>> say("reading areas.gpkg")            # doctest: +SKIP
    >>> with say.bar(4, "tier 'small'") as b:   # doctest: +SKIP
    ...     b.update()
    """

    def __init__(self, *, quiet: bool = False, stream: TextIO | None = None, bars: bool | None = None):
        self.quiet = quiet
        self.stream = stream if stream is not None else sys.stderr
        if bars is None:
            bars = bool(getattr(self.stream, "isatty", lambda: False)())
        self.bars = bars and not quiet
        self.t0 = time.perf_counter()

    def __call__(self, text: str) -> None:
        self.step(text)

    def step(self, text: str) -> None:
        checkpoint()
        if self.quiet:
            return
        line = f"[{time.perf_counter() - self.t0:7.1f}s] {text}"
        # tqdm.write keeps an open bar below the new line instead of tearing it
        tqdm.write(line, file=self.stream)
        self.stream.flush()

    @contextlib.contextmanager
    def bar(self, total: int, desc: str, *, log_end: bool = True) -> Iterator[Bar]:
        """A bar of `total` steps; without tqdm, a line when it closes (unless not `log_end`)."""
        drawn: _TqdmBar | _LineBar | _NoBar
        if self.bars:
            drawn = _TqdmBar(total, desc, self.stream)
        elif self.quiet or not log_end:
            drawn = _NoBar()
        else:
            drawn = _LineBar(self, total, desc)
        try:
            yield drawn
        finally:
            if not isinstance(drawn, _NoBar):
                drawn.close()


# ---------------------------------------------------------------- for the api

ProgressLike = Callable[[str], None] | Progress | None


def say(progress: ProgressLike, text: str) -> None:
    """A log line through any progress callback (or none)."""
    if progress is not None:
        progress(text)


@contextlib.contextmanager
def bar(progress: ProgressLike, total: int, desc: str, *, log_end: bool = True) -> Iterator[Bar]:
    """A bar from a progress object that draws bars, else a bar that only checks memory."""
    maker = getattr(progress, "bar", None)
    if maker is None:
        yield _NoBar()
        return
    with maker(total, desc, log_end=log_end) if isinstance(progress, Progress) else maker(total, desc) as b:
        yield b


class Stages:
    """A bar over the stages of one job, usable without a with-block.

    Each call starts a stage and logs its line; `close()` ends the last one. The stage
    lines already say what happens, so without tqdm the bar adds no line of its own.

    >>> stage = Stages(progress, "preparing", 2)      # doctest: +SKIP
    >>> stage("reading areas.gpkg"); stage("building the graph"); stage.close()   # doctest: +SKIP
    """

    def __init__(self, progress: ProgressLike, desc: str, total: int):
        self.progress = progress
        self._cm = bar(progress, total, desc, log_end=False)
        self._bar = self._cm.__enter__()
        self.started = 0

    def __call__(self, text: str) -> None:
        if self.started:
            self._bar.update()
        self.started += 1
        say(self.progress, text)

    def close(self) -> None:
        if self._cm is None:
            return
        if self.started:
            self._bar.update()
        cm, self._cm = self._cm, None
        cm.__exit__(None, None, None)


class TaskBars:
    """A bar per executor call (one per tier, or one for a sweep) ticked as tasks finish.

    Give `done` to `make_executor(on_done=...)`, then call the executor through `wrap`:

    >>> bars = TaskBars(progress, lambda tasks: f"tier '{tasks[0].tier}' by fence")
    >>> run = bars.wrap(make_executor("local", 2, on_done=bars.done))   # doctest: +SKIP
    """

    def __init__(self, progress: ProgressLike, describe: Callable[[list[Any]], str]):
        self.progress = progress
        self.describe = describe
        self.open: list[Bar] = []

    def done(self, _result: Any = None) -> None:
        if self.open:
            self.open[-1].update()
        else:
            checkpoint()

    def wrap(self, run: Callable[..., list[Any]]) -> Callable[..., list[Any]]:
        def tracked(tasks: list[Any], *fn: Callable[[Any], Any]) -> list[Any]:
            with bar(self.progress, len(tasks), self.describe(tasks) if tasks else "tasks") as b:
                self.open.append(b)
                try:
                    return run(tasks, *fn)
                finally:
                    self.open.pop()

        tracked.close = getattr(run, "close", lambda: None)  # type: ignore[attr-defined]
        return tracked
