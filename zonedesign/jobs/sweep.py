"""`sweep`: one design (or redraw) per variant of the rules, measured side by side."""

from __future__ import annotations

import dataclasses
import time
from pathlib import Path

from zonedesign.cli.progress import TaskBars
from zonedesign.errors import InputError
from zonedesign.jobs.design import closing
from zonedesign.jobs.inputs import Progress, check_out, prepare, read_previous, say
from zonedesign.jobs.summary import RunResult, run_head
from zonedesign.plain import plain
from zonedesign.rules import Rules
from zonedesign.summaryparts import InvalidVariant, SweepPart, VaryAxis


def sweep(
    areas_path: str | Path,
    rules: str | Path | Rules,
    vary: list[str],
    out: str | Path | None,
    *,
    previous: str | Path | None = None,
    layer: str | None = None,
    crs: str | None = None,
    overwrite: bool = False,
    executor: str = "local",
    workers: int = 1,
    scheduler: str | None = None,
    report: bool = True,
    progress: Progress | None = None,
) -> RunResult:
    """One design (or redraw) per variant of the rules, measured side by side.

    Writes sweep.csv, summary.json, charts/, report.html and variants/<name>/ (lookup.csv,
    zones.gpkg, rules.toml, summary.json) per valid variant.
    """
    from zonedesign.graph.areagraph import area_graph
    from zonedesign.io.output import atomic_output, write_json
    from zonedesign.sweep import (
        VariantTask,
        parse_vary,
        run_variant,
        sweep_table,
        variant_summary,
        variants,
        write_variant,
    )
    from zonedesign.tiers.executors import make_executor

    t_start = time.perf_counter()
    bars = TaskBars(progress, lambda tasks: "variants")
    run = bars.wrap(make_executor(executor, workers, scheduler, on_done=bars.done))
    if out is not None:
        check_out(Path(out), overwrite)
    prep = prepare(areas_path, rules, layer=layer, crs=crs, progress=progress)
    axes = parse_vary(vary, prep.rules)
    prev = None
    if previous is not None:
        prep.inputs.append(Path(previous))
        prev, _ = read_previous(previous, prep, mend=False)
    if out is not None:
        check_out(Path(out), overwrite, prep.inputs)
    vs = variants(prep.rules, axes)
    if all(v.rules is None for v in vs):
        raise InputError(f"--vary: no variant gives valid rules; variant {vs[0].name}: {vs[0].error}")
    # a variant that changes graph.* keys is designed and audited on its own graph
    graphs = {prep.rules.graph: (prep.graph, None)}
    tasks = []
    for v in vs:
        if v.rules is not None and v.rules.graph not in graphs:
            built = area_graph(prep.geometry, prep.areas, v.rules.graph, notes=[])
            graphs[v.rules.graph] = (built.graph, {"contiguity": v.rules.graph.contiguity,
                                                   "edges": built.graph.n_edges, "links": built.links,
                                                   "islands": [plain(x) for x in built.islands]})
        graph = graphs[v.rules.graph][0] if v.rules is not None else prep.graph
        tasks.append(VariantTask(variant=v, areas=prep.areas, graph=graph, previous=prev, locks=prep.locks or None))
    say(progress, f"sweeping {len(vs)} variant(s)")
    with closing(run):
        results = run(tasks, run_variant)
    tiers = [t.name for t in prep.rules.tiers]
    table = sweep_table(results, tiers)
    summary = run_head(prep, "sweep")
    head = dataclasses.replace(summary)
    summary.sweep = SweepPart(
        vary=[VaryAxis(keys=list(a.keys), values=[list(g) for g in a.values]) for a in axes],
        variants=plain(table.to_dict("records")),
        invalid=[InvalidVariant(variant=v.number, name=v.name, problem=v.error) for v in vs if v.rules is None],
    )
    summary.seconds = {"total": round(time.perf_counter() - t_start, 3)}
    failed = any(r.row.get("valid") is False or r.row.get("audit_ok") is False or r.breaks or r.failures
                 for r in results)
    summary.exit_code = 1 if failed else 0
    summary.settle()
    if out is not None:
        with atomic_output(Path(out), overwrite=overwrite, inputs=prep.inputs) as tmp:
            say(progress, f"writing {out}")
            table.to_csv(tmp / "sweep.csv", index=False, lineterminator="\n")
            layers = {}
            for v, r in zip(vs, results):
                if v.rules is None:
                    continue
                vsum = variant_summary(head, v, r, graphs[v.rules.graph][1])
                layers[v.number] = write_variant(tmp / "variants" / v.name, prep.geometry, prep.areas.ids, r, vsum)
            write_json(tmp / "summary.json", summary)
            if report:
                from zonedesign.report.sweepreport import write_sweep_report

                write_sweep_report(tmp, summary=summary, table=table, variants=vs, results=results, layers=layers)
    return RunResult(out=None if out is None else Path(out), record=summary, exit_code=summary.exit_code)
