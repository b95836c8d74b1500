"""Output folders appear whole or not at all; JSON and GeoPackage writers."""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
import shapely

from zonedesign.errors import InputError
from zonedesign.io.output import atomic_output, sweep_leftovers, write_json, write_layers_gpkg


def folder_state(path: Path) -> dict[str, str]:
    return {p.name: p.read_text() for p in sorted(path.iterdir())}


def hidden_beside(path: Path) -> list[str]:
    return sorted(p.name for p in path.parent.iterdir() if p.name.startswith(f".{path.name}."))


def made(content: str, n: int = 3) -> dict[str, str]:
    """What `make_output` leaves: n parts and the summary.json that marks an output folder."""
    return {**{f"part{k}.txt": content for k in range(n)}, "summary.json": content}


def make_output(target: Path, content: str, n: int = 3) -> None:
    with atomic_output(target, overwrite=True) as tmp:
        for name, text in made(content, n).items():
            (tmp / name).write_text(text)


def test_a_finished_block_becomes_the_target(tmp_path: Path) -> None:
    target = tmp_path / "out"
    with atomic_output(target, overwrite=False) as tmp:
        assert tmp.parent == tmp_path and tmp.name.startswith(".out.tmp-")
        assert not target.exists()  # nothing visible until the block ends
        (tmp / "lookup.csv").write_text("x")
    assert folder_state(target) == {"lookup.csv": "x"}
    assert hidden_beside(target) == []


def test_a_failing_block_leaves_the_old_folder_untouched(tmp_path: Path) -> None:
    target = tmp_path / "out"
    make_output(target, "old")
    with pytest.raises(RuntimeError, match="search failed"):
        with atomic_output(target, overwrite=True) as tmp:
            (tmp / "part0.txt").write_text("new")
            raise RuntimeError("search failed")
    assert folder_state(target) == made("old")
    assert hidden_beside(target) == []


def test_overwriting_replaces_the_whole_folder(tmp_path: Path) -> None:
    target = tmp_path / "out"
    make_output(target, "old", n=3)
    make_output(target, "new", n=1)
    assert folder_state(target) == made("new", n=1)
    assert hidden_beside(target) == []


def test_an_existing_folder_is_refused_without_overwrite(tmp_path: Path) -> None:
    target = tmp_path / "out"
    make_output(target, "old")
    with pytest.raises(InputError, match=r"^--out .*out: the output folder exists \(add --overwrite to replace it\)$"):
        with atomic_output(target, overwrite=False):
            pytest.fail("the block must not run")
    assert folder_state(target) == made("old")


def test_outputs_that_would_overwrite_an_input_are_refused(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    areas = data / "areas.gpkg"
    areas.write_bytes(b"input")
    with pytest.raises(InputError, match="the folder of the input"):
        with atomic_output(data, overwrite=True, inputs=[areas]):
            pytest.fail("the block must not run")
    with pytest.raises(InputError, match="holds the input"):
        with atomic_output(tmp_path, overwrite=True, inputs=[areas]):
            pytest.fail("the block must not run")
    assert areas.read_bytes() == b"input"


def _spawned_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_leftovers_of_dead_runs_are_cleared_and_an_orphaned_old_folder_restored(tmp_path: Path) -> None:
    target = tmp_path / "out"
    pid = _spawned_pid()
    stale = tmp_path / f".out.tmp-{pid}-0a1b2c3d"
    stale.mkdir()
    (stale / "half.txt").write_text("half")
    old = tmp_path / f".out.old-{pid}-0a1b2c3d"
    old.mkdir()
    (old / "part0.txt").write_text("old")
    sweep_leftovers(target)
    assert folder_state(target) == {"part0.txt": "old"}
    assert hidden_beside(target) == []


CHILD = textwrap.dedent(
    """
    import sys, time
    from pathlib import Path
    from zonedesign.io.output import atomic_output

    with atomic_output(Path(sys.argv[1]), overwrite=True) as tmp:
        for k in range(400):
            (tmp / f"part{k}.txt").write_text("new")
            time.sleep(0.002)
    """
)


@pytest.mark.parametrize("previous", [False, True])
def test_a_run_killed_while_writing_leaves_nothing_or_the_previous_folder(tmp_path: Path, previous: bool) -> None:
    target = tmp_path / "out"
    if previous:
        make_output(target, "old")
    before = folder_state(target) if previous else None
    proc = subprocess.Popen([sys.executable, "-c", CHILD, str(target)])
    try:
        deadline = time.monotonic() + 2.5
        while time.monotonic() < deadline:
            tmps = [p for p in tmp_path.glob(".out.tmp-*") if len(list(p.iterdir())) >= 20]
            if tmps:
                break
            time.sleep(0.01)
        assert tmps, "the child never started writing"
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
    if previous:
        assert folder_state(target) == before  # the previous complete folder, untouched
    else:
        assert not target.exists()  # nothing, never half a folder
    sweep_leftovers(target)
    assert hidden_beside(target) == []


# ---------------------------------------------------------------- places never written


def test_no_option_value_can_empty_a_folder_the_user_did_not_name(tmp_path: Path, monkeypatch) -> None:
    """--out must name a new folder or a zonedesign output (issue: `--out ""` once emptied the
    current folder); the refused folders keep every file."""
    here = tmp_path / "work"
    here.mkdir()
    (here / "notes.txt").write_text("keep")
    monkeypatch.chdir(here)
    kept = tmp_path / "kept"
    kept.mkdir()
    (kept / "notes.txt").write_text("keep")
    refused = {
        "": "the current folder",
        ".": "the current folder",
        str(here): "the current folder or one above it",
        "..": "the current folder or one above it",
        "/": "the current folder or one above it",  # also a root: refused either way
        str(Path.home()): "home folder" if not str(here).startswith(str(Path.home())) else "one above it",
        str(kept): "is not a zonedesign output (no summary.json)",
        str(kept / "notes.txt"): "a file of that name exists; name a folder",
    }
    for value, says in refused.items():
        for overwrite in (False, True):
            with pytest.raises(InputError, match=re.escape(says)):
                with atomic_output(value, overwrite=overwrite):
                    pytest.fail("the block must not run")
    assert (here / "notes.txt").read_text() == "keep" and (kept / "notes.txt").read_text() == "keep"
    # the refusal for a file does not suggest --overwrite, which could not help
    with pytest.raises(InputError) as info:
        with atomic_output(kept / "notes.txt", overwrite=False):
            pass
    assert "--overwrite" not in str(info.value)
    # an empty folder may be filled with --overwrite
    empty = tmp_path / "empty"
    empty.mkdir()
    with atomic_output(empty, overwrite=True) as tmp:
        (tmp / "summary.json").write_text("{}")
    assert folder_state(empty) == {"summary.json": "{}"}


def test_a_parent_that_cannot_hold_the_folder_is_named_not_the_temporary_path(tmp_path: Path) -> None:
    blocker = tmp_path / "report.txt"
    blocker.write_text("a file where a folder would go")
    with pytest.raises(InputError, match=f"{re.escape(str(blocker))} is a file, so the output folder cannot be made"):
        with atomic_output(blocker / "sub" / "out", overwrite=False):
            pytest.fail("the block must not run")
    assert blocker.read_text() == "a file where a folder would go"


def test_a_failed_final_move_removes_the_temporary_folder_and_names_the_target(tmp_path: Path, monkeypatch) -> None:
    import zonedesign.io.output as output

    target = tmp_path / "out"
    make_output(target, "old")
    real_replace = os.replace

    def refuse(src, dst):
        if Path(src).name.startswith(".out.tmp-"):
            raise PermissionError(13, "Permission denied", str(dst))
        return real_replace(src, dst)

    monkeypatch.setattr(output.os, "replace", refuse)
    with pytest.raises(InputError) as info:
        with atomic_output(target, overwrite=True) as tmp:
            (tmp / "summary.json").write_text("new")
    text = str(info.value)
    assert text.startswith(f"cannot put the output in place at {target}: Permission denied")
    assert ".tmp-" not in text
    assert folder_state(target) == made("old")  # the old folder was put back
    assert hidden_beside(target) == []


def test_a_write_that_fails_for_lack_of_space_is_a_located_input_error(tmp_path: Path) -> None:
    import errno

    target = tmp_path / "out"
    with pytest.raises(InputError, match=f"cannot write the output folder {re.escape(str(target))}: No space left"):
        with atomic_output(target, overwrite=False) as tmp:
            raise OSError(errno.ENOSPC, "No space left on device", str(tmp / "zones.gpkg"))
    assert not target.exists() and hidden_beside(target) == []


def test_a_stopped_run_never_moves_its_output_into_place(tmp_path: Path) -> None:
    from zonedesign import interrupts

    target = tmp_path / "out"
    make_output(target, "old")
    try:
        with pytest.raises(interrupts.Interrupted):
            with atomic_output(target, overwrite=True) as tmp:
                (tmp / "summary.json").write_text("new")
                # a library swallowed the signal: only the flag is left to tell
                interrupts.request(signal.SIGTERM)
    finally:
        interrupts.reset()
    assert folder_state(target) == made("old")
    assert hidden_beside(target) == []


# ---------------------------------------------------------------- writers


def test_json_is_deterministic_and_plain(tmp_path: Path) -> None:
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    write_json(a, {"zones": np.int64(12), "share": np.float32(0.5), "gap": float("nan"), "ids": np.array([1, 2]), "path": Path("x")})
    write_json(b, {"path": Path("x"), "ids": [1, 2], "gap": None, "share": 0.5, "zones": 12})
    assert a.read_bytes() == b.read_bytes()
    text = a.read_text()
    # the standard library's JSON reader (reference) reads it back
    assert json.loads(text) == {"gap": None, "ids": [1, 2], "path": "x", "share": 0.5, "zones": 12}
    assert text.startswith('{\n  "gap": null,') and text.endswith("}\n")
    write_json(a, {"inf": float("inf"), "nested": {"k": np.float64("nan")}})
    assert json.loads(a.read_text()) == {"inf": None, "nested": {"k": None}}


def test_layers_are_written_one_per_tier_in_order(tmp_path: Path) -> None:
    block = gpd.GeoDataFrame({"zone": ["b1", "b2"], "persons": [120.0, 130.0]}, geometry=[shapely.box(0, 0, 1, 1), shapely.box(1, 0, 2, 1)], crs="EPSG:32633")
    quarter = gpd.GeoDataFrame({"zone": ["q1"], "persons": [250.0]}, geometry=[shapely.box(0, 0, 2, 1)], crs="EPSG:32633")
    path = tmp_path / "zones.gpkg"
    path.write_bytes(b"stale file from before")
    write_layers_gpkg(path, {"block": block, "quarter": quarter})
    # pyogrio (reference library) lists and reads the layers back
    assert pyogrio.list_layers(path)[:, 0].tolist() == ["block", "quarter"]
    back = pyogrio.read_dataframe(path, layer="block")
    assert back["zone"].tolist() == ["b1", "b2"] and back["persons"].tolist() == [120.0, 130.0]
    assert shapely.equals(back.geometry.to_numpy(), block.geometry.to_numpy()).all()
    assert back.crs.to_epsg() == 32633


def test_a_full_disk_reported_by_gdal_without_an_errno_is_still_a_located_input_error(tmp_path: Path) -> None:
    target = tmp_path / "out"
    with pytest.raises(InputError, match="cannot write the output folder .*out: sqlite3_step.*disk is full"):
        with atomic_output(target, overwrite=False):
            # the form of GDAL's GeoPackage driver message (from memory)
            raise RuntimeError("sqlite3_step() failed: database or disk is full")
    assert not target.exists() and hidden_beside(target) == []
