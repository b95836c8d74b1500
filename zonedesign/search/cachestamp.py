"""Drop numba's cached machine code of the search when any compiled module has changed.

numba keys a cached function on its own source file only. A kernel in azp.py that calls
one in kernels.py keeps its cached copy of the old callee when only kernels.py changes,
and would run stale code. A stamp of all compiled modules' sources, kept next to the
cache, notices any change and removes the cached files of these modules, so they compile
afresh once.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from types import ModuleType

import numba

STAMP = "zonedesign-search.stamp"


def compiled_modules(modules: list[ModuleType]) -> list[ModuleType]:
    """The modules that define functions numba caches, in a fixed (name) order."""
    own = [m for m in modules if any(getattr(obj, "_cache", None) is not None and getattr(obj, "__module__", None) == m.__name__ for obj in vars(m).values())]
    return sorted(own, key=lambda m: m.__name__)


def cache_dirs(modules: list[ModuleType]) -> set[Path]:
    """The folders numba caches the modules' compiled functions in."""
    out = set()
    for mod in modules:
        for obj in vars(mod).values():
            cache = getattr(obj, "_cache", None)
            path = getattr(cache, "_cache_path", None)
            if path:
                out.add(Path(path))
    return out


def drop_stale_caches(modules: list[ModuleType]) -> None:
    """Remove the modules' cached code unless it was compiled from these very sources."""
    digest = hashlib.sha256(numba.__version__.encode())
    for mod in modules:
        digest.update(Path(mod.__file__).read_bytes())
    stamp = digest.hexdigest()
    prefixes = tuple(mod.__name__.rsplit(".", 1)[-1] + "." for mod in modules)
    for folder in cache_dirs(modules):
        marker = folder / STAMP
        try:
            if marker.is_file() and marker.read_text() == stamp:
                continue
            if folder.is_dir():
                for f in folder.iterdir():
                    if f.name.startswith(prefixes) and f.suffix in (".nbi", ".nbc"):
                        f.unlink(missing_ok=True)
            folder.mkdir(parents=True, exist_ok=True)
            marker.write_text(stamp)
        except OSError:
            # an unwritable cache folder: numba will not cache there either
            continue
