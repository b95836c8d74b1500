"""Open test data: the polygon shapefiles of Debian's r-cran-spdata package.

The shapes are read straight out of the .deb (no R needed): `apt-get download` fetches the
package into a cache folder and `dpkg-deb -x` unpacks it. `ZONEDESIGN_SPDATA` points at an
unpacked `shapes` folder and skips the fetch.

    python -m zonedesign.io.opendata      # fetch once (CI runs this), print the folder
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import geopandas as gpd

ENV_VAR = "ZONEDESIGN_SPDATA"
PACKAGE = "r-cran-spdata"
SHAPES_IN_DEB = Path("usr/lib/R/site-library/spData/shapes")
MARKER = "NY8_utm18.shp"  # one file every usable copy has


class OpenDataUnavailable(RuntimeError):
    """The r-cran-spdata shapes are neither present nor fetchable here."""


def cache_dir() -> Path:
    return Path.home() / ".cache" / "zonedesign" / "spdata"


def spdata_dir(*, fetch: bool = True) -> Path:
    """The folder holding the r-cran-spdata shapefiles, fetched into the cache when missing."""
    stated = os.environ.get(ENV_VAR)
    if stated:
        folder = Path(stated)
        if not (folder / MARKER).is_file():
            raise OpenDataUnavailable(f"{ENV_VAR}={stated}: no {MARKER} in that folder")
        return folder
    shapes = cache_dir() / "shapes"
    if (shapes / MARKER).is_file():
        return shapes
    if not fetch:
        raise OpenDataUnavailable(f"{shapes}: not fetched yet (python -m zonedesign.io.opendata)")
    _fetch(cache_dir())
    return shapes


def spdata(fetch: bool = True) -> Path | None:
    """Like `spdata_dir`, but None when the data cannot be had."""
    try:
        return spdata_dir(fetch=fetch)
    except OpenDataUnavailable:
        return None


def read_spdata(name: str) -> gpd.GeoDataFrame:
    """One shapefile of the package, e.g. `read_spdata("NY8_utm18.shp")`."""
    path = spdata_dir() / name
    if not path.is_file():
        raise OpenDataUnavailable(f"{path}: no such file in {PACKAGE}")
    return gpd.read_file(path, engine="pyogrio")


def _fetch(cache: Path) -> None:
    if shutil.which("apt-get") is None or shutil.which("dpkg-deb") is None:
        raise OpenDataUnavailable(
            f"cannot fetch {PACKAGE}: apt-get and dpkg-deb are needed (or set {ENV_VAR})"
        )
    cache.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(dir=cache, prefix=".fetch-") as tmp:
        work = Path(tmp)
        try:
            _run(["apt-get", "download", PACKAGE], work)
        except OpenDataUnavailable:
            # a fresh machine often has no package lists yet
            _run(["apt-get", "update"], work)
            _run(["apt-get", "download", PACKAGE], work)
        debs = sorted(work.glob(f"{PACKAGE}_*.deb"))
        if not debs:
            raise OpenDataUnavailable(f"apt-get download {PACKAGE} left no .deb in {work}")
        unpacked = work / "x"
        _run(["dpkg-deb", "-x", str(debs[-1]), str(unpacked)], work)
        found = unpacked / SHAPES_IN_DEB
        if not (found / MARKER).is_file():
            raise OpenDataUnavailable(f"{debs[-1].name}: no {SHAPES_IN_DEB}/{MARKER} inside")
        target = cache / "shapes"
        if target.exists():
            shutil.rmtree(target)
        # a rename inside one folder: a reader never sees half the shapes
        os.replace(found, target)


def _run(cmd: list[str], cwd: Path) -> None:
    try:
        done = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=600)
    except (OSError, subprocess.TimeoutExpired) as exc:
        raise OpenDataUnavailable(f"{' '.join(cmd)}: {exc}") from exc
    if done.returncode != 0:
        tail = (done.stderr or done.stdout).strip().splitlines()[-1:] or ["no output"]
        raise OpenDataUnavailable(f"{' '.join(cmd)} failed ({done.returncode}): {tail[0]}")


def main() -> int:
    try:
        folder = spdata_dir()
    except OpenDataUnavailable as exc:
        print(f"zonedesign: {exc}", file=sys.stderr)
        return 1
    print(folder)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
