"""A wheel of zonedesign carries the search's compiled kernels.

The README's setup installs the package with `pip install .`; the wheel's build compiles
every kernel group into the package it ships (setup.py), so that the first run on a fresh
install loads the kernels instead of spending a minute compiling them. numba keys its
cache on a source file's contents, not its place or file times (numba.core.caching,
`_hash_source_file`), so the cache must stay valid when the files are unpacked elsewhere
with new file times, as an installer does.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

from benchmarks.common import project_copy

# runs every kernel group from the unpacked wheel and lists what numba had to compile
_LOAD = """
import json, sys
sys.path.insert(0, sys.argv[1])
from numba.core import event
compiled = []
class Seen(event.Listener):
    def on_start(self, ev):
        pass
    def on_end(self, ev):
        compiled.append(ev.data["dispatcher"].py_func.__qualname__)
event.register("numba:compile", Seen())
import zonedesign
from zonedesign.cli.commands import main
from zonedesign.precompile import compile_all
missed = compile_all()
# a whole job too: a kernel the job calls with other argument types than the warm-up's
# would compile here
rc = main(["demo", "--areas", "1500", "--out", sys.argv[2], "--quiet"])
print(json.dumps({"compiled": compiled, "missed": missed, "package": zonedesign.__file__, "rc": rc}))
"""


@pytest.mark.slow
def test_a_wheel_unpacked_elsewhere_runs_its_kernel_groups_and_a_demo_without_compiling(tmp_path: Path) -> None:
    project = project_copy(tmp_path / "project")
    env = {k: v for k, v in os.environ.items() if k not in ("NUMBA_CACHE_DIR", "PYTHONPATH")}
    env["ZONEDESIGN_PRECOMPILE"] = "0"
    built = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "-q", "--no-deps", "-w", str(tmp_path / "dist"), str(project)],
        env=env, capture_output=True, text=True, cwd=tmp_path,
    )
    assert built.returncode == 0, built.stderr[-3000:]
    (wheel,) = (tmp_path / "dist").glob("zonedesign-*.whl")
    with zipfile.ZipFile(wheel) as zf:
        names = zf.namelist()
        # an installer's way: another folder, every file written anew (fresh file times)
        zf.extractall(tmp_path / "site")
    for folder in ("zonedesign/search/__pycache__/", "zonedesign/verify/__pycache__/"):
        assert any(n.startswith(folder) and n.endswith(".nbc") for n in names), f"no compiled kernels under {folder}"
    loaded = subprocess.run([sys.executable, "-c", _LOAD, str(tmp_path / "site"), str(tmp_path / "demo")], env=env, capture_output=True, text=True, cwd=tmp_path)
    assert loaded.returncode == 0, loaded.stderr[-3000:]
    info = json.loads(loaded.stdout.strip().splitlines()[-1])
    assert info["package"].startswith(str(tmp_path / "site"))
    assert info["missed"] == []
    assert info["rc"] == 0
    assert info["compiled"] == [], f"compiled on the first run: {sorted(set(info['compiled']))}"
