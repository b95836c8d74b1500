"""Output folders written all-or-nothing, and deterministic JSON and GeoPackage writers.

A run writes into a hidden temporary folder beside the target and renames it into place
at the end, so a failed or killed run leaves the previous output (or nothing), never half
of one, and never touches the inputs.
"""

from __future__ import annotations

import errno
import json
import os
import re
import secrets
import shutil
import signal
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING

from zonedesign import interrupts
from zonedesign.errors import InputError
from zonedesign.plain import plain

if TYPE_CHECKING:
    import geopandas as gpd

_SIDE = re.compile(r"^\.(?P<name>.+)\.(?P<kind>tmp|old)-(?P<pid>\d+)-[0-9a-f]+$")


MARK = "summary.json"  # every zonedesign output folder holds one; nothing else is replaced


def check_target(target: str | Path, *, overwrite: bool, inputs: Sequence[str | Path] = ()) -> Path:
    """The absolute output folder, or InputError when writing there could wipe the wrong place.

    Refused: an empty path, the current folder or one above it, a file-system root, the
    home folder, a folder that holds an input or is an input's own folder; an existing
    folder unless `overwrite` is given and the folder is a zonedesign output (it holds
    summary.json) or empty.
    """
    if str(target) in ("", "."):
        raise InputError("--out: the output folder is the current folder; name a new folder for the output")
    given = str(target)
    target = Path(target).expanduser().absolute()
    real = Path(os.path.realpath(target))
    here = Path(os.path.realpath(Path.cwd()))
    if real == here or real in here.parents:
        raise InputError(f"--out {given}: the current folder or one above it; name a new folder for the output")
    if real.parent == real:
        raise InputError(f"--out {given}: the root of a file system; name a new folder for the output")
    if real == Path(os.path.realpath(Path.home())):
        raise InputError(f"--out {given}: the home folder; name a new folder for the output")
    for item in inputs:
        path = Path(os.path.realpath(Path(item).absolute()))
        if path.parent == real:
            raise InputError(f"--out {given}: the folder of the input {item}; writing it would replace the input")
        if path == real or real in path.parents:
            raise InputError(f"--out {given}: holds the input {item}; writing it would replace the input")
    if target.exists() or target.is_symlink():
        if not target.is_dir():
            raise InputError(f"--out {given}: a file of that name exists; name a folder for the output")
        entries = [e.name for e in target.iterdir()]
        if entries and MARK not in entries:
            raise InputError(
                f"--out {given}: the folder exists and is not a zonedesign output (no {MARK}); "
                "it is never replaced: name a new folder"
            )
        if not overwrite:
            raise InputError(f"--out {given}: the output folder exists (add --overwrite to replace it)")
    parent = target.parent
    probe = parent
    while not probe.exists() and probe.parent != probe:
        probe = probe.parent
    if not probe.is_dir():
        raise InputError(f"--out {given}: {probe} is a file, so the output folder cannot be made there")
    if not os.access(probe, os.W_OK | os.X_OK):
        raise InputError(f"--out {given}: the folder {probe} is not writable")
    return target


@contextmanager
def atomic_output(target: str | Path, *, overwrite: bool, inputs: Sequence[str | Path] = ()) -> Iterator[Path]:
    """Yield an empty temporary folder; on success it becomes `target`, on any error it vanishes.

    The target is checked first (`check_target`). When overwriting, the old folder is
    moved aside, the new one renamed into place, then the old one deleted: at every moment
    one complete folder exists. The final move happens inside the cleanup: a run asked to
    stop (the stop flag) never moves its output into place, and a move that fails removes
    the temporary folder and names the folder the user gave. Leftovers of killed runs are
    cleared first (an old folder whose replacement never arrived is put back).
    """
    target = check_target(target, overwrite=overwrite, inputs=inputs)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        sweep_leftovers(target)
        token = f"{os.getpid()}-{secrets.token_hex(4)}"
        tmp = target.parent / f".{target.name}.tmp-{token}"
        tmp.mkdir()
    except OSError as exc:
        raise InputError(f"cannot make the output folder {target}: {exc.strerror or exc}") from None
    try:
        try:
            yield tmp
        except InputError:
            raise
        except Exception as exc:
            if not _writing_failed(exc, tmp):
                raise
            reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc).splitlines()[0]
            raise InputError(
                f"cannot write the output folder {target}: {reason} "
                "(nothing was written; a previous output is unchanged)"
            ) from None
        with _signals_held() as pending:
            interrupts.check()
            if pending():
                raise interrupts.Interrupted(min(pending()))
            _move_into_place(tmp, target, overwrite, token)
    except BaseException:
        with _signals_held():
            shutil.rmtree(tmp, ignore_errors=True)
        raise
    _sync_folder(target.parent)


# the messages GDAL and SQLite give for a full disk or quota, whose errors carry no errno
_FULL = ("no space left", "disk is full", "quota exceeded", "file too large")


def _writing_failed(exc: Exception, tmp: Path) -> bool:
    """Whether `exc` is the machine refusing a write into `tmp` (not a bug of the run)."""
    if isinstance(exc, OSError) and exc.filename is not None and str(exc.filename).startswith(str(tmp)):
        return True
    if getattr(exc, "errno", None) in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
        return True
    return any(w in str(exc).lower() for w in _FULL)


def _move_into_place(tmp: Path, target: Path, overwrite: bool, token: str) -> None:
    """Rename the finished folder to `target`; an error names `target`, never the temporary path."""
    aside = target.parent / f".{target.name}.old-{token}"
    moved_aside = False
    try:
        if target.exists():
            if not overwrite:
                raise InputError(f"--out {target}: the output folder appeared during the run (add --overwrite to replace it)")
            os.replace(target, aside)
            moved_aside = True
        os.replace(tmp, target)
    except OSError as exc:
        if moved_aside and not target.exists():
            os.replace(aside, target)
        raise InputError(
            f"cannot put the output in place at {target}: {exc.strerror or exc} "
            "(another run may have written it at the same moment; a previous output is unchanged)"
        ) from None
    if moved_aside:
        shutil.rmtree(aside, ignore_errors=True)


@contextmanager
def _signals_held() -> Iterator[Callable[[], set]]:
    """SIGINT and SIGTERM wait (in the main thread) until the renames or the cleanup are done."""
    import threading

    if threading.current_thread() is not threading.main_thread():
        yield set
        return
    held = {signal.SIGINT, signal.SIGTERM}
    old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        # a signal sent while held is pending: the caller can still refuse to commit
        yield lambda: signal.sigpending() & held
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


def sweep_leftovers(target: Path) -> None:
    """Remove temporary folders of dead runs beside `target`; restore an orphaned old folder."""
    target = Path(target).absolute()
    if not target.parent.is_dir():
        return
    found = []
    for entry in target.parent.iterdir():
        m = _SIDE.match(entry.name)
        if m and m.group("name") == target.name and entry.is_dir() and not _alive(int(m.group("pid"))):
            found.append((m.group("kind"), entry))
    for kind, entry in sorted(found, key=lambda x: x[0] != "old"):
        if kind == "old" and not target.exists():
            os.replace(entry, target)  # killed between moving the old folder aside and replacing it
        else:
            shutil.rmtree(entry, ignore_errors=True)


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _sync_folder(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def write_json(path: str | Path, obj: object) -> None:
    """Deterministic JSON: sorted keys, indent 2, NaN and infinities as null, numpy as plain."""
    text = json.dumps(plain(obj, finite=True, strict=True), sort_keys=True, indent=2, ensure_ascii=False, allow_nan=False)
    Path(path).write_bytes((text + "\n").encode("utf-8"))


# GDAL stamps GeoPackage metadata with the current time unless OGR_CURRENT_DATE is set;
# a fixed date makes equal runs write equal bytes
FILE_DATE = "2000-01-01T00:00:00.000Z"


def write_layers_gpkg(path: str | Path, layers: Mapping[str, gpd.GeoDataFrame]) -> None:
    """One GeoPackage layer per entry (e.g. per tier), in order; the file is rewritten.

    The bytes depend on the data alone (a fixed metadata date), so equal runs give equal files.
    """
    import pyogrio  # here, so that writing plain outputs needs no GDAL start-up

    if not layers:
        raise ValueError("write_layers_gpkg needs at least one layer")
    path = Path(path)
    if path.exists():
        path.unlink()
    previous = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": FILE_DATE})
    try:
        for name, frame in layers.items():
            pyogrio.write_dataframe(frame, path, layer=name, driver="GPKG")
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": previous})
