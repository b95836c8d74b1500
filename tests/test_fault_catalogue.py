"""The fault catalogue: every class of fault a pipeline may meet, each with its exit code.

The README's exit codes (0 ok, 1 a rule broken or undecided, 2 bad input or usage, 3 a bug,
130/143 stopped by SIGINT/SIGTERM) are what a pipeline gates on. For each case below the
run must end with its code, write at most one line on stderr (`--quiet`), leave the input
files byte for byte as they were, and leave nothing beside `--out` (no temporary folder;
no output at all when it fails, or the previous output unchanged). 128 + the signal number
as the exit code of a stopped process is common practice of POSIX shells.

Each case names the class of the fault report it covers (1 to 10).
"""

from __future__ import annotations

import errno
import os
import signal
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import shapely
from cli_support import RULES, checksums, region, run_cli, write_areas, write_inputs

QUICK = ("--quiet", "--no-report", "--no-certificate")


@dataclass
class Case:
    """One fault: how to provoke it, the exit code it must give, and words of its one line."""

    name: str
    klass: int  # the class of the fault report it belongs to
    args: Callable[[dict], list]
    code: int
    says: str = ""
    patch: Callable[[pytest.MonkeyPatch], None] | None = None
    previous: bool = False  # a previous output at --out that must stay unchanged
    extra: dict = field(default_factory=dict)


@pytest.fixture(scope="module")
def world(tmp_path_factory) -> dict:
    """Small invented inputs: a 10 x 10 grid in four fences, its rules and a lookup."""
    root = tmp_path_factory.mktemp("catalogue")
    inputs = root / "in"
    areas, rules = write_inputs(inputs)
    from zonedesign.cli import main

    assert main(["design", str(areas), "--rules", str(rules), "--out", str(root / "designed"), *QUICK]) == 0
    good = pd.read_csv(root / "designed" / "lookup.csv", dtype=str)
    good.to_csv(inputs / "lookup.csv", index=False)
    broken = good.copy()
    broken.loc[broken["area"] == "G000001", "ward"] = "F1-ward-0099"
    broken.to_csv(inputs / "broken.csv", index=False)
    good.rename(columns={"block": "Block"}).to_csv(inputs / "renamed.csv", index=False)
    good.to_csv(inputs / "semicolon.csv", index=False, sep=";")
    (inputs / "header_only.csv").write_text("area,block,ward\n")
    (inputs / "doubled.csv").write_text("area,block,block\n" + "".join(f"{a},{b},{b}\n" for a, b in zip(good["area"], good["block"])))
    for name, tier in [("id_clash", "area"), ("case_twin", "Block"), ("reserved", "gpkg_block"), ("slash", "block/one")]:
        (inputs / f"{name}.toml").write_text(RULES.replace('name = "ward"', f'name = "{tier}"'))
    (inputs / "bom.toml").write_bytes(b"\xef\xbb\xbf" + RULES.encode())
    g = region()
    xy = shapely.get_coordinates(g.geometry.values[3])
    xy[1, 0] = np.inf
    g.loc[g.index[3], "geometry"] = shapely.polygons(xy)
    write_areas(g, inputs / "infinite.gpkg")
    g = region()
    g["attr_a"] = np.where(np.arange(len(g)) % 2 == 0, 1.7e308, -1.7e308)  # near the float limit
    write_areas(g, inputs / "huge_attrs.gpkg")
    (inputs / "a_file.txt").write_text("not a folder")
    (root / "not_an_output").mkdir()
    (root / "not_an_output" / "keep.txt").write_text("mine")
    return {"root": root, "in": inputs, "areas": areas, "rules": rules, "designed": root / "designed"}


def design(w: dict, *more, areas=None, rules=None) -> list:
    return ["design", areas or w["areas"], "--rules", rules or w["rules"], *more]


def audit(w: dict, lookup: str, *more) -> list:
    return ["audit", w["areas"], "--rules", w["rules"], "--lookup", w["in"] / lookup, *more]


def _stop_inside_a_solve(mp: pytest.MonkeyPatch) -> None:
    # OR-Tools once took SIGINT itself and returned early as if its time were up: here the
    # signal is remembered by the flag alone while the solve returns normally
    import zonedesign.verify.certificate as certificate
    from zonedesign import interrupts

    real = certificate.solve_model

    def solve(solver, model):
        interrupts.request(signal.SIGINT)
        return real(solver, model)

    mp.setattr(certificate, "solve_model", solve)


def _fence_raises(exc: BaseException, stop: int | None = None) -> Callable[[pytest.MonkeyPatch], None]:
    def patch(mp: pytest.MonkeyPatch) -> None:
        import zonedesign.exactfence as exactfence
        import zonedesign.search.engine as engine
        from zonedesign import interrupts

        def solve(problem, *args, **kw):
            if stop is not None:  # a signal landing in compiled code: only the flag tells
                interrupts.request(stop)
            raise exc

        # a fence's work is the exact step, then the search: the fault strikes either
        mp.setattr(engine, "solve", solve)
        mp.setattr(exactfence, "prove_fence", solve)

    return patch


def _disk_full(mp: pytest.MonkeyPatch) -> None:
    import zonedesign.io.output as output

    def full(path, obj):
        raise OSError(errno.ENOSPC, "No space left on device", str(path))

    mp.setattr(output, "write_json", full)


def _final_move_fails(mp: pytest.MonkeyPatch) -> None:
    import zonedesign.io.output as output

    real = os.replace

    def replace(src, dst):
        if ".tmp-" in Path(src).name:
            raise PermissionError(errno.EACCES, "Permission denied", str(dst))
        return real(src, dst)

    mp.setattr(output.os, "replace", replace)


CASES = [
    # 1: an interrupt during a CP-SAT solve is never read as the solve's result
    Case("stop during the certificate", 1, lambda w: ["design", w["areas"], "--rules", w["rules"], "--quiet",
         "--no-report"], 130, "interrupted (SIGINT)", _stop_inside_a_solve, previous=True),
    # 2: no option value may empty a folder the user did not name
    Case("--out empty with --overwrite", 2, lambda w: design(w, "--out", "", "--overwrite", *QUICK), 2,
         "--out: an empty path"),
    Case("--out a folder that is no output", 2, lambda w: design(w, "--out", w["root"] / "not_an_output",
         "--overwrite", *QUICK), 2, "is not a zonedesign output"),
    Case("--out the inputs' folder", 2, lambda w: design(w, "--out", w["in"], "--overwrite", *QUICK), 2,
         "--out "),
    # 3: a signal inside compiled code, SystemError, MemoryError: never "a failed fence"
    Case("SIGTERM surfacing as SystemError in a fence", 3, lambda w: design(w, *QUICK), 143, "stopped (SIGTERM)",
         _fence_raises(SystemError("error return without exception set"), signal.SIGTERM), previous=True),
    Case("SystemError in a fence, no signal", 3, lambda w: design(w, *QUICK), 3, "internal error: SystemError",
         _fence_raises(SystemError("error return without exception set")), previous=True),
    Case("MemoryError in a fence", 3, lambda w: design(w, *QUICK), 2, "out of memory",
         _fence_raises(MemoryError()), previous=True),
    # 5: tier names that a lookup or a GeoPackage cannot hold, refused at rules check
    *[Case(f"tier name {kind}", 5, lambda w, f=f: ["rules", "check", w["in"] / f], 2, says)
      for kind, f, says in [
          ("like the id column", "id_clash.toml", "'area' is also the id column"),
          ("equal but for case", "case_twin.toml", "must differ in more than case"),
          ("with a reserved prefix", "reserved.toml", "reserved by GeoPackage"),
          ("with a path character", "slash.toml", "a tier name may hold letters"),
      ]],
    # 6: lookup headers that do not match the tiers: one clear line, in audit as in redraw
    *[Case(f"audit: lookup {kind}", 6, lambda w, f=f: audit(w, f, *QUICK, "--out", w["out"]), 2, says)
      for kind, f, says in [
          ("with a renamed column", "renamed.csv", "no column for tier(s) 'block'"),
          ("with another separator", "semicolon.csv", "a lookup is comma-separated"),
          ("with a header only", "header_only.csv", "no rows below the header row"),
          ("with a doubled column", "doubled.csv", "appear more than once"),
      ]],
    Case("redraw: lookup with a renamed column", 6, lambda w: ["redraw", w["areas"], "--rules", w["rules"],
         "--previous", w["in"] / "renamed.csv", "--out", w["out"], *QUICK], 2, "no column for tier(s) 'block'"),
    # 7: a failed final rename removes the temporary folder and names the user's folder
    Case("final move refused", 7, lambda w: design(w, "--overwrite", *QUICK), 2, "cannot put the output in place at",
         _final_move_fails, previous=True),
    # 8: faults of the machine or of the values: exit 2 with what and where
    Case("no space left while writing", 8, lambda w: design(w, "--overwrite", *QUICK), 2,
         "No space left on device", _disk_full, previous=True),
    Case("non-finite coordinates", 8, lambda w: design(w, *QUICK, areas=w["in"] / "infinite.gpkg"), 2,
         "row 'G000004': coordinates that are not finite"),
    Case("--tolerance out of range", 8, lambda w: audit(w, "lookup.csv", "--tolerance", "nan", *QUICK), 2,
         "--tolerance: must be a share from 0"),
    Case("--workers out of range", 8, lambda w: design(w, "--workers", "0", *QUICK), 2, "--workers: must be at least 1"),
    Case("--seed out of range", 8, lambda w: ["demo", "--seed", "-1", *QUICK], 2, "--seed: must be from 0"),
    # 9: values near the float limit: no raw warning, a finite result
    Case("attributes near the float limit", 9, lambda w: design(w, *QUICK, areas=w["in"] / "huge_attrs.gpkg"), 0),
    # 10: messages that say what to do
    Case("rules with a byte-order mark", 10, lambda w: ["rules", "check", w["in"] / "bom.toml"], 0),
    Case("--out names a file", 10, lambda w: design(w, "--out", w["in"] / "a_file.txt", "--overwrite", *QUICK), 2,
         "a file of that name exists; name a folder"),
    Case("--max-memory in TB", 10, lambda w: design(w, "--max-memory", "1TB", *QUICK), 0),
    Case("audit --repair still ends 1 on a broken lookup", 10,
         lambda w: audit(w, "broken.csv", "--repair", *QUICK), 1),
]


def test_every_class_of_the_fault_report_has_a_case() -> None:
    # classes of the report except 4 (sweep graph keys, whose own tests live with the sweep)
    assert {c.klass for c in CASES} >= {1, 2, 3, 5, 6, 7, 8, 9, 10}


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_a_fault_ends_with_its_exit_code_one_line_and_nothing_touched(
    case: Case, world: dict, capsys, monkeypatch, tmp_path: Path
) -> None:
    out = tmp_path / "out"
    w = {**world, "out": out}
    args = case.args(w)
    if "--out" not in map(str, args) and args[0] not in ("rules", "show"):
        args = [*args, "--out", out]
    if case.previous:
        args = [*args, "--overwrite"] if "--overwrite" not in map(str, args) else args
        assert run_cli(capsys, "design", w["areas"], "--rules", w["rules"], "--out", out, *QUICK).code == 0
        previous = checksums(out)
    here = tmp_path / "cwd"
    here.mkdir()
    (here / "mine.txt").write_text("keep")
    monkeypatch.chdir(here)
    inputs = checksums(world["in"])
    if case.patch:
        case.patch(monkeypatch)
    from zonedesign import interrupts

    try:
        ran = run_cli(capsys, *args)
    finally:
        interrupts.reset()
    assert ran.code == case.code, ran
    assert len(ran.err_lines) <= 1 and "Traceback" not in ran.err and "Warning" not in ran.err, ran.err
    if case.code not in (0, 1):  # 1 is a finished run: its findings are in the output
        assert len(ran.err_lines) == 1 and case.says in ran.err_lines[0], ran.err
    assert checksums(world["in"]) == inputs, "an input file changed"
    assert checksums(here) == {"mine.txt": checksums(here)["mine.txt"]} and (here / "mine.txt").read_text() == "keep"
    beside = sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".out."))
    assert beside == [], f"left beside --out: {beside}"
    if case.previous and case.code in (2, 3, 130, 143):
        assert checksums(out) == previous, "the previous output changed"
    elif case.code in (2, 130, 143) and not case.previous:
        assert not out.exists()
    if case.name == "attributes near the float limit":
        import json

        # the within-zone spread is measured on standardised attributes: finite, and at most
        # the spread of two values at opposite ends (z-scores of +-1 around 0: variance 1)
        spread = json.loads((out / "summary.json").read_text())["tiers"]["block"]["within_spread"]
        assert all(v is not None and 0 <= float(v) <= 1.0 + 1e-9 for v in spread.values()), spread
