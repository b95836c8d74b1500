"""The build of a zonedesign wheel ships the search's compiled kernels.

A run on an empty numba cache spends about a minute compiling the search's kernels before
its first search. numba keys its cached code on the source file's contents, the numba
version and the CPU, not on where the file lives, so the cache compiled in the build
folder is valid in the installed package on the machine that built it. After the
ordinary build, `build_py` runs `zonedesign.precompile.compile_all` on the built copy of
the package, in a separate process of the build's Python (with the build requirements of
pyproject.toml), and the cache files it writes into the copy's `__pycache__` folders go
into the wheel. A wheel installed on another CPU, or next to another numba version,
simply misses the cache and compiles on its first run, as it would without it. An
editable install compiles nothing here: its first run fills the cache in the source tree.
"""

import os
import subprocess
import sys

from setuptools import setup
from setuptools.command.build_py import build_py

# set to "0" to build a wheel without compiled kernels
ENV_SWITCH = "ZONEDESIGN_BUILD_KERNELS"

_CODE = (
    "import sys; sys.path.insert(0, sys.argv[1]); "
    "from zonedesign.precompile import compile_all; missed = compile_all(); "
    "print('not cached: ' + ', '.join(missed) if missed else 'all kernel groups cached'); "
    "sys.exit(1 if missed else 0)"
)


class BuildWithKernels(build_py):
    def run(self) -> None:
        super().run()
        if getattr(self, "editable_mode", False) or os.environ.get(ENV_SWITCH, "1") == "0":
            return
        env = {k: v for k, v in os.environ.items() if k != "NUMBA_CACHE_DIR"}
        env["ZONEDESIGN_PRECOMPILE"] = "0"
        print("compiling the search kernels into the build (about a minute) ...", flush=True)
        done = subprocess.run([sys.executable, "-c", _CODE, os.path.abspath(self.build_lib)], env=env, capture_output=True, text=True)
        if done.returncode != 0:
            # the wheel still works: its first run compiles what is missing
            tail = (done.stdout + done.stderr).strip().splitlines()[-5:]
            print("warning: the kernels were not all compiled into the build: " + " | ".join(tail), flush=True)
        else:
            print(done.stdout.strip(), flush=True)


setup(cmdclass={"build_py": BuildWithKernels})
