"""How much search a fence gets: effort presets, the move budget and the cooling schedule.

A fence's annealing moves grow with its units (`moves_per_unit` x units, with a floor so
that small fences, which are cheap, still get the several independent runs they need to
land near the optimum). The budget pays for independent runs (restarts): each run gets
at least `moves_per_unit` x units, so small fences get several runs and large ones one.
Within a run the moves are spread evenly over the temperatures of a full cooling
schedule, from the start temperature down to `FINAL_TEMPERATURE` of it by the factor
`cooling`: more effort means more moves per temperature, slower cooling more
temperatures, and no schedule is cut short by its budget.

A fence searched by one run (one of about 1,000 units or more, with the restarts left to
the schedule) gets `ONE_RUN_FACTOR` times its `moves_per_unit` x units, with focused
trials (`search.anneal`): a cooled zoning of that size is good almost everywhere, so its
trials are spent where the costliest zones are, and more of them are worth their price
there; several short runs of a small fence start hot and explore apart, where focusing
measured worse (benchmarks/results/quality.md).

The presets (`effort` in the rules' [search] table):

| effort | moves_per_unit | cooling | moves of a 2,000-unit fence |
|---|---|---|---|
| quick | 150 | 0.94 | 0.45 million |
| default | 350 | 0.97 | 1.05 million |
| thorough | 12,000 | 0.99 | 36 million |

`thorough` is what the `quality-scale` benchmark runs for its best-known references.
A stated `moves_per_unit` or `cooling` overrides the preset's value.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from zonedesign.rules import SearchRules

PRESETS: dict[str, tuple[int, float]] = {
    "quick": (150, 0.94),
    "default": (350, 0.97),
    "thorough": (12_000, 0.99),
}
FLOOR_UNITS = 1500  # a fence smaller than this gets about the moves of one this size
MAX_RUNS = 16
ONE_RUN_FACTOR = 1.5  # the moves of a fence searched by one focused run, per moves_per_unit x units
MIN_RUN_MOVES = 20_000  # fewer moves than this make too short a schedule to be worth a run
# a schedule ends at this share of its start temperature (with the default's cooling, 53
# steps of about 6.6 x units); with the start at 1 % acceptance of the average uphill move
# (engine.ANNEAL_START_ACCEPT) it spans the range where the best zonings of the
# quality-scale fences form; colder ends measured no better there
FINAL_TEMPERATURE = 0.2


@dataclass(frozen=True)
class Schedule:
    """The search a fence of `units` units gets.

    runs: independent runs; moves: annealing trial moves per run; cooling: temperature
    factor per step; temperatures: steps of a full schedule; per_temperature: trial moves
    at each temperature; focused: one run of ONE_RUN_FACTOR x the moves, its trials
    focused on the costliest zones.
    """

    units: int
    runs: int
    moves: int
    cooling: float
    temperatures: int
    per_temperature: int
    focused: bool = False


def effort_settings(rules: SearchRules) -> tuple[int, float]:
    """(moves_per_unit, cooling): the preset of `rules.effort`, stated values first."""
    per_unit, cooling = PRESETS[rules.effort]
    if rules.moves_per_unit > 0:
        per_unit = int(rules.moves_per_unit)
    if rules.cooling is not None:
        cooling = float(rules.cooling)
    return per_unit, cooling


def fence_schedule(rules: SearchRules, n: int) -> Schedule:
    """The runs, moves and cooling of a fence of n units under `rules`.

    >>> fence_schedule(SearchRules(), 2000).runs
    1
    """
    per_unit, cooling = effort_settings(rules)
    n = max(int(n), 1)
    run_moves = max(MIN_RUN_MOVES, per_unit * n)
    if rules.restarts > 0:
        runs = int(rules.restarts)
    else:
        budget = per_unit * max(n, FLOOR_UNITS)
        runs = int(min(MAX_RUNS, max(1, round(budget / run_moves))))
    focused = rules.restarts <= 0 and runs == 1
    if focused:
        run_moves = int(ONE_RUN_FACTOR * run_moves)
    temps = max(1, math.ceil(math.log(FINAL_TEMPERATURE) / math.log(cooling)))
    per_temp = int(rules.moves_per_temperature) or max(1, run_moves // temps)
    return Schedule(
        units=n, runs=runs, moves=run_moves, cooling=cooling, temperatures=temps, per_temperature=per_temp,
        focused=focused,
    )
