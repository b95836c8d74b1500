"""Command line: argument parsing and exit codes; the work is in api.py.

Exit codes: 0 ok; 1 ran but a rule is broken; 2 bad input or usage, with one line on stderr
saying what is wrong and where; 3 an internal error (a bug: `--debug` shows its traceback);
130 and 143 when stopped by SIGINT or SIGTERM (no output folder is left half-written).
"""

from __future__ import annotations

import argparse
import signal
import sys
import textwrap
import warnings
from pathlib import Path
from typing import NoReturn

from zonedesign import __version__, interrupts
from zonedesign.demo.run import MIN_AREAS as DEMO_MIN_AREAS
from zonedesign.errors import InputError
from zonedesign.glossary import glossary_text

EXAMPLES = {
    "design": """\
        example (on the demo region):
          zonedesign demo --out demo-out
          zonedesign design demo-out/input/areas.gpkg --rules demo-out/input/rules.toml --out my-zones
        """,
    "redraw": """\
        example (on the demo region ten years on):
          zonedesign demo --scenario later --out later-out
          zonedesign redraw later-out/input/areas.later.gpkg --previous later-out/design/lookup.csv \\
              --rules later-out/input/rules.toml --out redrawn
        """,
    "audit": """\
        example (on the demo region):
          zonedesign demo --out demo-out
          zonedesign audit demo-out/input/areas.gpkg --lookup demo-out/lookup.csv \\
              --rules demo-out/input/rules.toml --out demo-audit
          zonedesign audit demo-out/input/areas.gpkg --tiers-from demo-out/zones.gpkg \\
              --rules demo-out/input/rules.toml --out demo-audit2
        """,
    "sweep": """\
        keys: tier.<N|name>.min.<count>, tier.<N|name>.max.<count>, tier.<N|name>.target.<count>,
              tier.<N|name>.weights.<size|homogeneity|compactness|stability>,
              tier.<N|name>.homogeneity, tier.<N|name>.compactness, search.<field>, graph.<field>
              (N counts tiers from 1 at the bottom)
        example (on the demo region):
          zonedesign demo --out demo-out
          zonedesign sweep demo-out/input/areas.gpkg --rules demo-out/input/rules.toml \\
              --vary tier.1.min.households=40,50,60 --vary tier.1.target.households=120,140 --out sweep-out
        """,
    "demo": """\
        example:
          zonedesign demo --out demo-out            # design the invented demo region
          zonedesign demo --scenario later --out later-out   # design, redraw ten years on, audit
        """,
    "rules": """\
        example:
          zonedesign rules init demo-out/input/areas.gpkg > rules.toml
          zonedesign rules check demo-out/input/rules.toml demo-out/input/areas.gpkg
        """,
    "show": """\
        example:
          zonedesign show demo-out
        """,
}


class _Parser(argparse.ArgumentParser):
    """argparse with usage errors on one line, like every other error."""

    def error(self, message: str) -> NoReturn:
        self.exit(2, f"zonedesign: error: {self.prog}: {message} (see {self.prog} --help)\n")


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number: {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, not {value}")
    return value


def _share(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not 0.0 <= value < 1.0:  # also refuses nan and infinities
        raise argparse.ArgumentTypeError(f"must be a share from 0 up to (not including) 1, not {text}")
    return value


def _seed(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number: {text!r}") from None
    if not 0 <= value < 2**32:
        raise argparse.ArgumentTypeError(f"must be from 0 to {2**32 - 1}, not {value}")
    return value


def _out_folder(text: str) -> Path:
    # an unset shell variable gives "": never read as the current folder
    if not text.strip():
        raise argparse.ArgumentTypeError("an empty path; name a new folder for the output")
    return Path(text)


def _demo_areas(text: str) -> int:
    value = _positive_int(text)
    if value < DEMO_MIN_AREAS:
        raise argparse.ArgumentTypeError(f"the demo region needs at least {DEMO_MIN_AREAS} areas, not {value}")
    return value


def _parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="zonedesign",
        description="Design, redraw and audit nested statistical-geography zones.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog=textwrap.dedent(
            """\
            commands: design, redraw, audit, sweep, demo, rules, show
            exit codes: 0 ok, 1 ran but a rule is broken or undecided, 2 bad input or usage,
                        3 internal error (--debug shows the traceback),
                        130/143 stopped by SIGINT/SIGTERM (previous output unchanged)
            status words: a certificate is confirmed, refuted or undecided; a solve (proof,
                          repair) is optimal, feasible, infeasible or undecided

            Thresholds must follow your own statistical-disclosure-control rules; results
            need review by the responsible statistician before publication.
            """
        )
        + "\nwords:\n"
        + glossary_text()
        + "\n\n"
        + textwrap.dedent(EXAMPLES["demo"]),
    )
    p.add_argument("--version", action="version", version=f"zonedesign {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    def talk(sp: argparse.ArgumentParser) -> None:
        sp.add_argument("--quiet", action="store_true", help="no progress lines or bars")
        sp.add_argument("--debug", action="store_true", help="show the traceback behind an error")

    def common(sp: argparse.ArgumentParser, out_required: bool = True) -> None:
        sp.add_argument("--out", required=out_required, type=_out_folder, help="output folder (written atomically)")
        sp.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
        sp.add_argument("--no-report", action="store_true", help="skip report.html")
        talk(sp)

    def inputs(sp: argparse.ArgumentParser) -> None:
        sp.add_argument("areas", type=Path, help="areas file (GeoPackage, GeoJSON, Shapefile, GeoParquet)")
        sp.add_argument("--rules", required=True, type=Path, help="rules file (TOML)")
        sp.add_argument("--layer", help="layer name in a GeoPackage")
        sp.add_argument("--crs", help="CRS of a file that carries none, e.g. EPSG:32631 (the demo region's UTM zone 31N)")

    def executor(sp: argparse.ArgumentParser) -> None:
        sp.add_argument(
            "--executor", choices=["local", "dask"], default="local",
            help="where fences are solved: local worker processes, or a dask cluster (default local)",
        )
        sp.add_argument("--workers", type=_positive_int, default=1, help="worker processes (default 1)")
        sp.add_argument("--scheduler", help="address of a running dask scheduler")
        sp.add_argument(
            "--max-memory",
            help="stop cleanly (exit 2, nothing written) once the run's resident memory, "
            "workers included, passes this size, e.g. 4GB",
        )

    def sp_(name: str, help_: str) -> argparse.ArgumentParser:
        return sub.add_parser(
            name,
            help=help_,
            description=help_,
            epilog=textwrap.dedent(EXAMPLES.get(name, "")),
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )

    d = sp_("design", "design every tier of a nested hierarchy from base areas")
    inputs(d)
    common(d)
    executor(d)
    d.add_argument("--no-certificate", action="store_true", help="skip the CP-SAT certificate")

    r = sp_("redraw", "redraw a published hierarchy after new counts, changing as little as possible")
    inputs(r)
    r.add_argument("--previous", required=True, type=Path, help="previous lookup (CSV or Parquet)")
    r.add_argument("--mend", action="store_true", help="mend a previous lookup that does not match or nest")
    r.add_argument("--previous-counts", type=Path,
                   help="the previous areas file (or a table of id and counts) whose zone totals were published")
    common(r)
    executor(r)
    r.add_argument("--no-certificate", action="store_true", help="skip the CP-SAT certificate")

    a = sp_("audit", "check any hierarchy against the rules with the independent checker")
    inputs(a)
    src = a.add_mutually_exclusive_group(required=True)
    src.add_argument("--lookup", type=Path, help="lookup CSV: area id, then one column per tier")
    src.add_argument("--tiers-from", type=Path, help="GeoPackage with one polygon layer per tier")
    a.add_argument("--tolerance", type=_share, default=0.01, help="share of an area allowed in another zone (--tiers-from)")
    a.add_argument("--repair", action="store_true", help="find the fewest area moves that mend every break")
    a.add_argument("--no-certificate", action="store_true", help="skip the CP-SAT certificate")
    a.add_argument("--max-memory", help="stop cleanly (exit 2, nothing written) past this resident size, e.g. 4GB")
    common(a)

    s = sp_("sweep", "compare threshold rules: design (or redraw) for every combination of values")
    inputs(s)
    s.add_argument(
        "--vary", action="append", required=True, metavar="KEY=V1,V2,...",
        help="values of one rules key (a:b:step is a range, ends included); tied keys "
        "K1,K2=A1/A2,B1/B2 move together; every combination of the --vary items is one variant",
    )
    s.add_argument("--previous", type=Path, help="redraw against this lookup instead of designing")
    common(s)
    executor(s)

    m = sp_("demo", "run the main job on the built-in invented demo region")
    m.add_argument(
        "--scenario", choices=["base", "later"], default="base",
        help="base: design the region; later: design it, redraw it on counts ten years on, audit the redraw",
    )
    m.add_argument(
        "--seed", type=_seed, default=7,
        help="seed of the invented region (its map and counts); the search seed is in OUT/input/rules.toml",
    )
    m.add_argument(
        "--areas", type=_demo_areas, default=5000,
        help=f"number of base areas (at least {DEMO_MIN_AREAS}; default 5000)",
    )
    m.add_argument("--no-certificate", action="store_true", help="skip the CP-SAT certificate")
    common(m)
    executor(m)

    rl = sp_("rules", "write or check a rules file")
    rsub = rl.add_subparsers(dest="rules_command", metavar="ACTION", parser_class=_Parser)
    ri = rsub.add_parser(
        "init",
        help="print a commented starter rules file for a data file",
        description="print a commented starter rules file for a data file (to stdout)",
        epilog=textwrap.dedent(EXAMPLES["rules"]),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    ri.add_argument("areas", type=Path, help="areas file to start from (GeoPackage, GeoJSON, Shapefile, GeoParquet)")
    ri.add_argument("--layer", help="layer name in a GeoPackage with several layers")
    rc = rsub.add_parser(
        "check",
        help="validate a rules file (against a data file when given)",
        description="validate a rules file, and its column names against a data file when given",
        epilog=textwrap.dedent(EXAMPLES["rules"]),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    rc.add_argument("rules", type=Path)
    rc.add_argument("areas", type=Path, nargs="?", help="areas file whose columns the rules must name (optional)")
    rc.add_argument("--layer", help="layer name in a GeoPackage with several layers")
    for x in (ri, rc):
        x.add_argument("--debug", action="store_true", help="show the traceback behind an error")
    rl.add_argument("--debug", action="store_true", help="show the traceback behind an error")

    sh = sp_("show", "print a terminal summary of an output folder")
    sh.add_argument("folder", type=Path, help="an output folder of design, redraw, audit, sweep or demo")
    sh.add_argument("--debug", action="store_true", help="show the traceback behind an error")
    return p


def _error(text: str) -> None:
    print(f"zonedesign: error: {_one_line(text)}", file=sys.stderr, flush=True)


def _one_line(text: str) -> str:
    return " ".join(text.split()) if text else ""


STOPPED = {
    130: "zonedesign: interrupted (SIGINT); the temporary folder was removed and any previous output is unchanged",
    143: "zonedesign: stopped (SIGTERM); the temporary folder was removed and any previous output is unchanged",
}


def _stopped(signum: int) -> int:
    code = interrupts.EXIT_CODES.get(signum, 128 + signum)
    print(STOPPED.get(code, f"zonedesign: stopped by signal {signum}"), file=sys.stderr, flush=True)
    return code


def main(argv: list[str] | None = None) -> int:
    """Run one command; returns the exit code (see the module docstring)."""
    with interrupts.handling_signals():
        try:
            return _main(argv)
        except interrupts.Interrupted as exc:  # landed after the last handler below
            return _stopped(exc.signum)
        finally:
            from zonedesign.precompile import stop_background

            stop_background()


def _main(argv: list[str] | None) -> int:
    parser = _parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version and usage errors
        return exc.code if isinstance(exc.code, int) else 2
    if not args.command:
        _error("a command is needed: design, redraw, audit, sweep, demo, rules or show (see zonedesign --help)")
        return 2
    debug = getattr(args, "debug", False)
    caught: list[warnings.WarningMessage] = []
    try:
        from zonedesign.cli.memory import memory_guard

        # numeric warnings of numpy, shapely and the rest are never printed raw: the run's
        # own checks turn what matters into located errors; the rest is one note at the end
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            with memory_guard(getattr(args, "max_memory", None)):
                code = _run(args)
        interrupts.check()
        _note_warnings(caught, args)
        return code
    except KeyboardInterrupt as exc:
        return _stopped(getattr(exc, "signum", interrupts.requested() or signal.SIGINT))
    except InputError as exc:
        if interrupts.requested():
            return _stopped(interrupts.requested())
        # one line: the first problem says what and where, and how many more there are
        if debug:
            raise
        _error(str(exc).splitlines()[0] if str(exc) else type(exc).__name__)
        return 2
    except MemoryError:
        if interrupts.requested():
            return _stopped(interrupts.requested())
        if debug:
            raise
        _error("out of memory; stopped before writing any output (try --max-memory, fewer workers or a smaller input)")
        return 2
    except OSError as exc:
        if interrupts.requested():
            return _stopped(interrupts.requested())
        if debug:
            raise
        where = f"{exc.filename}: " if exc.filename else ""
        _error(f"{where}{exc.strerror or exc}")
        return 2
    except Exception as exc:  # noqa: BLE001 - a bug: one line, the traceback on request
        if interrupts.requested():
            # a signal landing in compiled code surfaces as an error of the library's own
            return _stopped(interrupts.requested())
        if debug:
            raise
        first = _one_line((str(exc).splitlines() or [""])[0])
        print(
            f"zonedesign: internal error: {type(exc).__name__}: {first} (rerun with --debug for the traceback)",
            file=sys.stderr,
        )
        return 3


def _note_warnings(caught: list[warnings.WarningMessage], args: argparse.Namespace) -> None:
    """One note line for warnings the run's own checks did not turn into errors (not with --quiet)."""
    if not caught or getattr(args, "quiet", False):
        return
    first = caught[0]
    print(
        f"zonedesign: note: {len(caught)} numeric warning(s) while computing, first: "
        f"{first.category.__name__}: {_one_line(str(first.message))[:120]}",
        file=sys.stderr,
    )


# the commands that search, and so compile the search's kernels on a first run
SEARCHING = ("design", "demo", "redraw", "sweep")


def _run(args: argparse.Namespace) -> int:
    from zonedesign import api
    from zonedesign.cli.progress import Progress

    say = Progress(quiet=getattr(args, "quiet", False))
    cmd = args.command
    if cmd in SEARCHING:
        from zonedesign.precompile import start_background

        # a first run on an empty numba cache compiles in a second process meanwhile
        start_background()
    if cmd == "design":
        res = api.design(
            args.areas, args.rules, args.out, layer=args.layer, crs=args.crs,
            overwrite=args.overwrite, executor=args.executor, workers=args.workers,
            scheduler=args.scheduler, certify=not args.no_certificate,
            report=not args.no_report, progress=say,
        )
        return _done(res, say)
    if cmd == "demo":
        from zonedesign.demo.run import run_demo

        res = run_demo(
            args.out, scenario=args.scenario, seed=args.seed, n=args.areas,
            overwrite=args.overwrite, executor=args.executor, workers=args.workers,
            scheduler=args.scheduler, report=not args.no_report, progress=say,
            certify=not args.no_certificate,
        )
        return _done(res, say)
    if cmd == "audit":
        res = api.audit(
            args.areas, args.rules, args.out, lookup=args.lookup, tiers_from=args.tiers_from,
            tolerance=args.tolerance, repair=args.repair, layer=args.layer, crs=args.crs,
            overwrite=args.overwrite, certify=not args.no_certificate,
            report=not args.no_report, progress=say,
        )
        return _done(res, say)
    if cmd == "redraw":
        res = api.redraw(
            args.areas, args.rules, args.previous, args.out, layer=args.layer, crs=args.crs,
            overwrite=args.overwrite, mend=args.mend, executor=args.executor, previous_counts=args.previous_counts,
            workers=args.workers, scheduler=args.scheduler, certify=not args.no_certificate,
            report=not args.no_report, progress=say,
        )
        return _done(res, say)
    if cmd == "sweep":
        res = api.sweep(
            args.areas, args.rules, args.vary, args.out, previous=args.previous,
            layer=args.layer, crs=args.crs, overwrite=args.overwrite, executor=args.executor,
            workers=args.workers, scheduler=args.scheduler, report=not args.no_report,
            progress=say,
        )
        return _done(res, say)
    if cmd == "rules":
        return _rules(args)
    if cmd == "show":
        from zonedesign.cli.show import show

        print(show(args.folder))
        return 0
    raise InputError(f"unknown command {cmd!r}")


def _rules(args: argparse.Namespace) -> int:
    from zonedesign.io.table import rule_columns
    from zonedesign.rules import check_rules_against, load_rules

    if args.rules_command == "init":
        from zonedesign.starter import read_starter_input, starter_rules

        table, graph, note = read_starter_input(args.areas, layer=args.layer)
        sys.stdout.write(starter_rules(table, graph, note=note))
        return 0
    if args.rules_command == "check":
        rules = load_rules(args.rules)
        if args.areas is not None:
            columns, table_columns = rule_columns(args.areas, rules.areas, layer=args.layer or rules.areas.layer)
            check_rules_against(rules, columns, str(args.areas), table_columns)
            if any(t.overrides for t in rules.tiers) or rules.lock.file is not None or rules.areas.tier_fences:
                from zonedesign.api import prepare

                # override fences and locked zones are checked against the areas as read:
                # their fence codes, and the graph a locked zone must be contiguous in
                prepare(args.areas, rules, layer=args.layer)
        tiers = ", ".join(t.name for t in rules.tiers)
        print(f"{args.rules}: ok ({len(rules.tiers)} tiers: {tiers})")
        return 0
    raise InputError("rules needs an action: init or check (see zonedesign rules --help)")


def _done(res, say) -> int:
    """Log how the run ended; the exit code is the api's (0 ok, 1 a rule is broken), and the
    break counts are the summary's own, counted once when it was built."""
    s = res.record
    if res.out is not None:
        say(f"wrote {res.out}")
    failed = s.fence_failures or []
    if failed:
        # shown even with --quiet, on one line: the run is incomplete there
        f = failed[0]
        more = f"; and {len(failed) - 1} more (see summary.json)" if len(failed) > 1 else ""
        print(
            f"zonedesign: fence {f.fence} of tier {f.tier} failed: {_one_line(str(f.error))} (its units "
            f"form one zone per connected piece; every other fence is written){more}",
            file=sys.stderr,
        )
    for bad in s.sweep.invalid if s.sweep is not None else []:
        say(f"variant {bad.name} not run: {bad.problem}")
    code = int(res.exit_code)
    done = s.outcome
    # an undecided (or refuted) certificate is never reported as a pass
    if code == 0 and done.certificate in (None, "confirmed"):
        say("finished: every rule holds" + (", certificate confirmed" if done.certificate else ""))
    else:
        said = (f"finished with {done.bound_breaks} bound break(s), {done.violations} audit violation(s), "
                f"{done.failed_fences} failed fence(s)")
        say(said + (f", certificate {done.certificate}" if done.certificate else "") + f": exit {code}")
    return code


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
