"""Output folders written all-or-nothing, and deterministic JSON and GeoPackage writers.

A run writes into a hidden temporary folder beside the target and renames it into place
at the end, so a failed or killed run leaves the previous output (or nothing), never half
of one, and never touches the inputs.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import re
import secrets
import shutil
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from zonedesign.errors import InputError

if TYPE_CHECKING:
    import geopandas as gpd

_SIDE = re.compile(r"^\.(?P<name>.+)\.(?P<kind>tmp|old)-(?P<pid>\d+)-[0-9a-f]+$")


@contextmanager
def atomic_output(target: str | Path, *, overwrite: bool, inputs: Sequence[str | Path] = ()) -> Iterator[Path]:
    """Yield an empty temporary folder; on success it becomes `target`, on error it vanishes.

    Refuses (InputError) an existing target unless `overwrite`, and any target that is an
    input's folder or holds an input. When overwriting, the old folder is moved aside,
    the new one renamed into place, then the old one deleted: at every moment one complete
    folder exists. Leftovers of killed runs are cleared first (an old folder whose
    replacement never arrived is put back).
    """
    target = Path(target).absolute()
    real = Path(os.path.realpath(target))
    for item in inputs:
        path = Path(os.path.realpath(Path(item).absolute()))
        if path.parent == real:
            raise InputError(f"output folder {target} is the folder of the input {item}; writing it would replace the input")
        if path == real or real in path.parents:
            raise InputError(f"output folder {target} holds the input {item}; writing it would replace the input")
    if target.exists() and not target.is_dir():
        raise InputError(f"output {target} exists and is not a folder")
    target.parent.mkdir(parents=True, exist_ok=True)
    sweep_leftovers(target)
    if target.exists() and not overwrite:
        raise InputError(f"output folder exists: {target} (use --overwrite)")
    token = f"{os.getpid()}-{secrets.token_hex(4)}"
    tmp = target.parent / f".{target.name}.tmp-{token}"
    tmp.mkdir()
    try:
        yield tmp
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    if target.exists():
        if not overwrite:
            shutil.rmtree(tmp, ignore_errors=True)
            raise InputError(f"output folder exists: {target} (use --overwrite)")
        aside = target.parent / f".{target.name}.old-{token}"
        os.replace(target, aside)
        os.replace(tmp, target)
        shutil.rmtree(aside, ignore_errors=True)
    else:
        os.replace(tmp, target)
    _sync_folder(target.parent)


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
    text = json.dumps(_plain(obj), sort_keys=True, indent=2, ensure_ascii=False, allow_nan=False)
    Path(path).write_bytes((text + "\n").encode("utf-8"))


def _plain(obj: object) -> object:
    if isinstance(obj, dict):
        return {str(_plain(k)) if not isinstance(k, str) else k: _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, (set, frozenset)):
        return sorted((_plain(v) for v in obj), key=repr)
    if isinstance(obj, np.ndarray):
        return _plain(obj.tolist())
    if isinstance(obj, np.generic):
        return _plain(obj.item())
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, Path):
        return str(obj)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return _plain({f.name: getattr(obj, f.name) for f in dataclasses.fields(obj)})
    if obj is None or isinstance(obj, (str, int, bool)):
        return obj
    raise TypeError(f"no JSON form for {type(obj).__name__}")


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
