"""The command line helps: worked examples, a starter rules file, progress, `show`, exit codes."""

from __future__ import annotations

import io
import json
import re
import shlex
import shutil
import textwrap
from pathlib import Path

import pandas as pd
import pytest
from cli_support import RULES, read_summary, region, run_cli, write_areas, write_inputs

from zonedesign import api
from zonedesign.cli.commands import EXAMPLES, _parser
from zonedesign.cli.progress import Progress
from zonedesign.rules import parse_rules

README = Path(__file__).resolve().parents[1] / "README.md"
QUICK = ("--quiet", "--no-report", "--no-certificate")


# ---------------------------------------------------------------- worked examples


def example_commands(name: str) -> list[str]:
    """The `zonedesign ...` command lines of one command's example, continuations joined."""
    text = textwrap.dedent(EXAMPLES[name]).replace("\\\n", " ")
    lines = [line.split("#")[0].strip() for line in text.splitlines()]
    return [line for line in lines if line.startswith("zonedesign ")]


@pytest.fixture(scope="module")
def demo_like(tmp_path_factory) -> Path:
    """A folder laid out as `zonedesign demo` leaves it (demo-out/ with input/, and a
    later-out/ with the later counts and the first design), on the small test region."""
    root = tmp_path_factory.mktemp("examples")
    staging = root / "staging"
    areas, rules = write_inputs(staging)
    files = {"input/areas.gpkg": areas, "input/rules.toml": rules}
    res = api.design(areas, rules, root / "demo-out", certify=False, report=False, extra_files=files)
    assert res.exit_code == 0
    later = root / "later-out"
    (later / "input").mkdir(parents=True)
    (later / "design").mkdir()
    g = region()
    g.loc[g["fence"] == "F1", "households"] *= 2  # growth in one quarter of the region
    write_areas(g, later / "input" / "areas.later.gpkg")
    shutil.copy(rules, later / "input" / "rules.toml")
    shutil.copy(root / "demo-out" / "lookup.csv", later / "design" / "lookup.csv")
    shutil.rmtree(staging)
    return root


@pytest.mark.parametrize("name", sorted(EXAMPLES))
def test_every_command_help_shows_its_worked_example(capsys, name: str) -> None:
    ran = run_cli(capsys, name, "--help")
    assert ran.code == 0
    example = textwrap.dedent(EXAMPLES[name]).strip()
    assert "example" in example
    for line in example.splitlines():
        assert line.strip() in ran.out
    assert "demo" in example  # every example runs on the demo region


@pytest.mark.parametrize("action", ["init", "check"])
def test_rules_actions_show_the_rules_example(capsys, action: str) -> None:
    ran = run_cli(capsys, "rules", action, "--help")
    assert ran.code == 0 and "zonedesign rules init demo-out/input/areas.gpkg > rules.toml" in ran.out


def test_every_example_command_parses() -> None:
    parser = _parser()
    for name in EXAMPLES:
        commands = example_commands(name)
        assert commands, name
        for line in commands:
            argv = shlex.split(line.split(">")[0])[1:]
            args = parser.parse_args(argv)
            assert args.command == argv[0]


@pytest.mark.parametrize("name", ["design", "audit", "redraw", "sweep", "rules", "show"])
def test_every_example_runs_on_a_demo_shaped_folder(capsys, monkeypatch, demo_like: Path, name: str) -> None:
    monkeypatch.chdir(demo_like)
    parser = _parser()
    for line in example_commands(name):
        command, _, redirect = line.partition(">")
        argv = shlex.split(command)[1:]
        if argv[0] == "demo":
            continue  # the fixture stands in for the (slow) demo run
        known = {a.dest for a in parser._subparsers._group_actions[0].choices[argv[0]]._actions}
        # the example as written, made quick: no report, no certificate
        argv += [flag for flag in ("--no-report", "--no-certificate") if flag[2:].replace("-", "_") in known]
        ran = run_cli(capsys, *argv)
        assert ran.code == 0, (line, ran)
        if redirect.strip():
            Path(redirect.strip()).write_text(ran.out)
        elif argv[0] == "sweep":  # three floors times two targets, counted as they finish
            assert any(re.search(r"\] variants: 6/6 done in ", x) for x in ran.err_lines), ran.err
    if name == "rules":
        assert parse_rules(Path("rules.toml").read_text()).tiers


# ---------------------------------------------------------------- rules init


def test_rules_init_prints_a_commented_starter_that_parses_and_checks(capsys, tmp_path: Path) -> None:
    areas, _ = write_inputs(tmp_path)
    ran = run_cli(capsys, "rules", "init", areas)
    assert ran.code == 0 and ran.err == ""
    text = ran.out
    assert text.startswith("# zonedesign rules")
    assert sum(line.lstrip().startswith("#") for line in text.splitlines()) >= 3
    rules = parse_rules(text, "starter.toml")
    assert rules.areas.id == "id"
    assert set(rules.areas.counts) == {"households", "persons"}
    assert rules.areas.fence == "fence"
    names = [t.name for t in rules.tiers]
    assert names and names == [f"tier{k}" for k in range(1, len(names) + 1)]
    starter = tmp_path / "starter.toml"
    starter.write_text(text)
    ran = run_cli(capsys, "rules", "check", starter, areas)
    assert ran.code == 0
    assert ran.out.strip() == f"{starter}: ok ({len(names)} tiers: {', '.join(names)})"


def test_rules_check_names_a_column_the_data_lacks(capsys, tmp_path: Path) -> None:
    areas, rules = write_inputs(tmp_path, region().rename(columns={"fence": "district"}))
    ran = run_cli(capsys, "rules", "check", rules, areas)
    assert ran.code == 2
    assert re.fullmatch(r"zonedesign: error: .*rules\.toml:\d+: areas\.fence: column 'fence' is not in .*", ran.err.strip())


# ---------------------------------------------------------------- progress


def test_quiet_runs_say_nothing_and_results_go_to_files(capsys, tmp_path: Path) -> None:
    areas, rules = write_inputs(tmp_path)
    ran = run_cli(capsys, "design", areas, "--rules", rules, "--out", tmp_path / "out", *QUICK)
    assert (ran.code, ran.out, ran.err) == (0, "", "")
    assert (tmp_path / "out" / "lookup.csv").exists()


def test_progress_lines_go_to_stderr_with_elapsed_time(capsys, tmp_path: Path) -> None:
    areas, rules = write_inputs(tmp_path)
    ran = run_cli(capsys, "design", areas, "--rules", rules, "--out", tmp_path / "out", "--no-report")
    assert ran.code == 0 and ran.out == ""
    lines = ran.err_lines
    assert all(re.match(r"^\[\s*\d+\.\ds\] ", line) for line in lines), lines
    text = "\n".join(lines)
    for phase in ("reading", "building the rook graph of 100 areas", "tier 'block' by fence: 4/4",
                  "tier 'ward' by fence: 4/4", "certificate", "writing"):
        assert phase in text
    assert lines[-1].endswith("finished: every rule holds, certificate confirmed")


def test_bars_are_drawn_per_tier_by_fence_on_a_terminal(tmp_path: Path) -> None:
    areas, rules = write_inputs(tmp_path)
    stream = io.StringIO()
    res = api.design(areas, rules, None, certify=False, report=False, progress=Progress(stream=stream, bars=True))
    assert res.exit_code == 0
    drawn = stream.getvalue()
    # tqdm redraws at most every 0.1 s, so the states shown depend on timing; the totals do not
    assert re.search(r"\rtier 'block' by fence: +\d+%\|.*\| [0-4]/4 ", drawn)
    assert re.search(r"\rtier 'ward' by fence: +\d+%\|.*\| [0-4]/4 ", drawn)
    assert re.search(r"\rpreparing: +\d+%\|.*\| [0-2]/2 ", drawn)
    # log lines stay whole: the bar is wiped, the line written, the bar redrawn below it
    assert re.search(r"\r\[ +\d+\.\ds\] reading .*areas\.gpkg\n", drawn)


def test_the_api_takes_a_plain_callable_as_progress(tmp_path: Path) -> None:
    areas, rules = write_inputs(tmp_path)
    lines: list[str] = []
    assert api.design(areas, rules, None, certify=False, report=False, progress=lines.append).exit_code == 0
    assert lines[0] == f"reading {areas}"
    assert "tier 2/2 'ward' designed" in lines


# ---------------------------------------------------------------- show


TOP_FIRST_RULES = RULES.replace('name = "block"', 'name = "street"').replace('name = "ward"', 'name = "borough"')


def test_show_summarises_a_run_with_tiers_in_rules_order(capsys, tmp_path: Path) -> None:
    areas, rules = write_inputs(tmp_path / "in", rules=TOP_FIRST_RULES)
    out = tmp_path / "out"
    assert run_cli(capsys, "design", areas, "--rules", rules, "--out", out, "--quiet").code == 0
    ran = run_cli(capsys, "show", out)
    assert ran.code == 0 and ran.err == ""
    lines = ran.out.splitlines()
    lookup = pd.read_csv(out / "lookup.csv", dtype=str)
    tier_lines = [line for line in lines if line.startswith("  tier ")]
    # rules order (street below borough), not the alphabetical order of summary.json keys
    assert [line.split(":")[0] for line in tier_lines] == ["  tier street", "  tier borough"]
    for line, tier in zip(tier_lines, ["street", "borough"]):
        assert f"{lookup[tier].nunique()} zones, 0 bound break(s)" in line
    assert "  audit: passed" in lines
    assert f"  report: {out / 'report.html'}" in lines
    assert lines[-1] == "  exit code of the run: 0"
    assert lines[0].startswith(f"{out}  (design, zonedesign ") and lines[0].endswith(", search seed 5)")


def test_show_lists_breaks_with_their_proofs(capsys, tmp_path: Path) -> None:
    # a ward floor above every quarter's total: each fence's one ward breaks it, provably
    text = RULES.replace("min = { households = 300 }", "min = { households = 1000 }").replace(
        "max = { households = 1200 }", "max = { households = 2000 }").replace(
        "target = { households = 600 }", "target = { households = 1500 }")
    areas, rules = write_inputs(tmp_path / "in", rules=text)
    out = tmp_path / "out"
    assert run_cli(capsys, "design", areas, "--rules", rules, "--out", out, *QUICK).code == 1
    shown = run_cli(capsys, "show", out).out
    assert shown.count("  break: tier ward zone ") == 4
    assert shown.count("  proof (infeasible): fence F") == 4
    assert "  audit: 4 violation(s) (4 bounds)" in shown


@pytest.mark.parametrize(("statuses", "verdict"), [
    (["confirmed", "confirmed"], "confirmed (2 confirmed of 2 fence-tier models)"),
    (["confirmed", "undecided"], "undecided (1 confirmed, 1 undecided of 2 fence-tier models)"),
    (["OPTIMAL", "UNKNOWN"], "undecided (1 confirmed, 1 undecided of 2 fence-tier models)"),
    (["undecided", "refuted"], "refuted (1 refuted, 1 undecided of 2 fence-tier models)"),
])
def test_show_never_shows_an_undecided_certificate_as_a_pass(capsys, tmp_path: Path, statuses, verdict) -> None:
    # one vocabulary: a certificate is confirmed, refuted or undecided (older summaries
    # with solver words are read through the same words)
    summary = {"command": "audit", "exit_code": 1, "audit": {"ok": True, "violations": []},
               "certificate": [{"fence": f"F{k}", "tier": "t1", "status": st} for k, st in enumerate(statuses)],
               "repair": {"status": "unknown", "moves": 0, "method": "cp-sat", "repaired_lookup_passes": False}}
    (tmp_path / "summary.json").write_text(json.dumps(summary))
    shown = run_cli(capsys, "show", tmp_path).out
    assert f"  certificate: {verdict}" in shown
    assert "  repair: undecided, cp-sat, 0 area move(s)" in shown
    assert not re.search(r"OPTIMAL|FEASIBLE|UNKNOWN|feasible\)", shown)


def test_show_refuses_a_folder_that_is_not_an_output(capsys, tmp_path: Path) -> None:
    ran = run_cli(capsys, "show", tmp_path)
    assert ran.code == 2
    assert ran.err.strip() == f"zonedesign: error: {tmp_path}: no summary.json or audit.json here; is it a zonedesign output folder?"


# ---------------------------------------------------------------- exit codes


def readme_exit_examples() -> dict[int, str]:
    """code -> the `what it looks like` cell of README.md's exit-code table."""
    section = README.read_text(encoding="utf-8").split("## Exit codes", 1)[1].split("\n## ", 1)[0]
    rows = {}
    for m in re.finditer(r"^\| (\d) \|.*\| `(.+)` \|$", section, flags=re.M):
        rows[int(m.group(1))] = m.group(2)
    return rows


def as_pattern(example: str) -> str:
    """A README example as a pattern: its figures stand for any figures."""
    return re.sub(r"\d+", r"\\d+", re.escape(example))


def test_readme_exit_code_examples_match_what_the_cli_prints(capsys, tmp_path: Path) -> None:
    examples = readme_exit_examples()
    assert sorted(examples) == [0, 1, 2, 3]
    assert examples[3] == "zonedesign: internal error: ..."  # shape checked in the exit-3 test below
    # the table renders whole: a blank line inside it would end the table in Markdown
    section = README.read_text(encoding="utf-8").split("## Exit codes", 1)[1].split("\n## ", 1)[0]
    table = section.strip().split("\n\n", 1)[0].splitlines()
    assert [line.split("|")[1].strip() for line in table[2:]] == ["0", "1", "2", "3", "130 / 143"]

    # with the certificate, as a run goes by default
    areas, rules = write_inputs(tmp_path / "ok")
    ran = run_cli(capsys, "design", areas, "--rules", rules, "--out", tmp_path / "ok" / "out", "--no-report")
    assert ran.code == 0 and ran.err_lines[-1].endswith("] " + examples[0])

    text = RULES.replace("min = { households = 300 }", "min = { households = 1000 }").replace(
        "max = { households = 1200 }", "max = { households = 2000 }").replace(
        "target = { households = 600 }", "target = { households = 1500 }")
    areas, rules = write_inputs(tmp_path / "breaks", rules=text)
    ran = run_cli(capsys, "design", areas, "--rules", rules, "--out", tmp_path / "breaks" / "out", "--no-report")
    assert ran.code == 1
    assert re.fullmatch(as_pattern(examples[1]), ran.err_lines[-1].split("] ", 1)[1])
    assert ran.err_lines[-1].endswith(
        "finished with 4 bound break(s), 0 audit violation(s), 0 failed fence(s), certificate refuted: exit 1")

    # the README's own bad-input example, reproduced row for row
    g = region()
    g["id"] = [f"A{k}" for k in range(1, len(g) + 1)]
    g["persons"] = g["persons"].astype(str)
    g.loc[[11, 12], "persons"] = ["x", ""]
    areas, rules = write_inputs(tmp_path / "bad", g)
    ran = run_cli(capsys, "design", areas, "--rules", rules, "--out", tmp_path / "bad" / "out", "--no-report")
    assert ran.code == 2
    assert ran.err_lines[-1] == examples[2]


def test_debug_shows_the_traceback_behind_an_error(tmp_path: Path) -> None:
    from zonedesign.cli import main
    from zonedesign.errors import InputError

    _, rules = write_inputs(tmp_path)
    with pytest.raises(InputError, match="file not found"):
        main(["design", str(tmp_path / "nope.gpkg"), "--rules", str(rules), "--out", str(tmp_path / "o"), "--debug"])


def test_an_internal_error_is_one_line_and_exit_3(capsys, monkeypatch, tmp_path: Path) -> None:
    def broken(*args, **kwargs):
        raise RuntimeError("boom\nsecond line")

    monkeypatch.setattr(api, "design", broken)
    areas, rules = write_inputs(tmp_path)
    ran = run_cli(capsys, "design", areas, "--rules", rules, "--out", tmp_path / "o", "--quiet")
    assert ran.code == 3
    assert ran.err_lines == ["zonedesign: internal error: RuntimeError: boom (rerun with --debug for the traceback)"]


def test_summary_records_seed_versions_and_settings(capsys, tmp_path: Path) -> None:
    areas, rules = write_inputs(tmp_path)
    assert run_cli(capsys, "design", areas, "--rules", rules, "--out", tmp_path / "out", *QUICK).code == 0
    s = read_summary(tmp_path / "out")
    assert s["search"] == {"method": "descent", "seed": 5, "executor": "local", "workers": 1}
    assert {"zonedesign", "python", "numpy", "shapely", "ortools", "numba"} <= set(s["versions"])
    assert json.loads(json.dumps(s)) == s


def test_help_and_readme_define_the_same_words(capsys) -> None:
    from zonedesign.glossary import WORDS

    ran = run_cli(capsys, "--help")
    assert ran.code == 0
    readme = README.read_text(encoding="utf-8").split("## Words", 1)[1].split("\n## ", 1)[0]
    help_text = " ".join(ran.out.split())  # argparse may rewrap nothing here, but spacing varies
    for word, meaning in WORDS:
        assert f"{word} {meaning}" in help_text, word
        assert f"| `{word}` | {meaning} |" in readme, word
    # the zone tables' columns that needed a definition are among them
    assert {"within_spread", "n_areas / n_units", "<count>_vs_target"} <= {w for w, _ in WORDS}


def test_crs_help_names_the_demo_region_s_own_utm_zone(capsys) -> None:
    ran = run_cli(capsys, "design", "--help")
    assert ran.code == 0 and "e.g. EPSG:32631" in " ".join(ran.out.split())


def test_developers_guide_lists_every_exit_code_and_the_status_words() -> None:
    from zonedesign.status import CERTIFICATE_WORDS, SOLVE_WORDS

    guide = (README.parent / "DEVELOPERS.md").read_text(encoding="utf-8")
    codes = guide.split("## Exit codes", 1)[1].split("\n## ", 1)[0]
    for code in ("0 ok", "1 ran", "2 bad input", "3 an internal error", "130 / 143 interrupted"):
        assert code in " ".join(codes.split()), code
    readme = README.read_text(encoding="utf-8").split("## Status words", 1)[1].split("\n## ", 1)[0]
    for word in (*CERTIFICATE_WORDS, *SOLVE_WORDS):
        assert f"`{word}`" in readme and f"`{word}`" in guide, word
