"""Cached machine code of the search is dropped when any compiled module's source changes.

numba keys a cached function on its own file only, so a kernel calling into an edited
module would otherwise keep running the old callee.
"""

from __future__ import annotations

import types

from zonedesign.search.cachestamp import STAMP, drop_stale_caches


def fake_module(tmp_path, name: str, source: str) -> types.ModuleType:
    src = tmp_path / f"{name}.py"
    src.write_text(source)
    mod = types.ModuleType(f"pkg.{name}")
    mod.__file__ = str(src)
    cache = types.SimpleNamespace(_cache_path=str(tmp_path / "cache"))
    mod.kernel = types.SimpleNamespace(_cache=cache)
    return mod


def test_cached_files_survive_until_a_source_changes(tmp_path):
    first = fake_module(tmp_path, "alpha", "x = 1\n")
    second = fake_module(tmp_path, "beta", "y = 2\n")
    cache = tmp_path / "cache"
    drop_stale_caches([first, second])
    assert (cache / STAMP).is_file()
    kept = [cache / "alpha.kernel-3.py311.nbi", cache / "beta.kernel-9.py311.1.nbc"]
    other = cache / "gamma.kernel-1.py311.nbi"  # another module's cache is not ours to drop
    for f in [*kept, other]:
        f.write_text("code")
    drop_stale_caches([first, second])
    assert all(f.exists() for f in kept)
    (tmp_path / "alpha.py").write_text("x = 3\n")
    drop_stale_caches([first, second])
    assert not any(f.exists() for f in kept)
    assert other.exists()
