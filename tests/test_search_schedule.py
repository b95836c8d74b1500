"""The search's effort is stated in the rules and grows with a fence's units.

A user states `effort = "quick" | "default" | "thorough"` (or `moves_per_unit` and
`cooling` themselves) in [search]; a fence's annealing moves are proportional to its
units above a floor, so a tier's search time follows its units, not its fence count.
"""

from __future__ import annotations

import math

import pytest

from zonedesign.errors import RulesError
from zonedesign.rules import SearchRules, parse_rules, rules_to_toml
from zonedesign.search.schedule import (
    FINAL_TEMPERATURE,
    FLOOR_UNITS,
    ONE_RUN_FACTOR,
    PRESETS,
    effort_settings,
    fence_schedule,
)

BASE = '[areas]\nid = "code"\ncounts = ["persons"]\n[[tier]]\nname = "tier1"\nmin = { persons = 10 }\n[search]\n'


def test_effort_keys_are_read_and_written_back() -> None:
    r = parse_rules(BASE + 'effort = "thorough"\nmoves_per_unit = 900\ncooling = 0.95\n')
    assert (r.search.effort, r.search.moves_per_unit, r.search.cooling) == ("thorough", 900, 0.95)
    # a rules file written out reads back to the same settings; an unstated cooling stays unstated
    assert parse_rules(rules_to_toml(r)).search == r.search
    plain = parse_rules(BASE)
    assert plain.search.cooling is None and parse_rules(rules_to_toml(plain)).search == plain.search


@pytest.mark.parametrize(
    ("line", "message"),
    [
        ('effort = "hard"', "rules.toml:8: search.effort: 'hard' is not one of 'quick', 'default', 'thorough'"),
        ("moves_per_unit = -5", "rules.toml:8: search.moves_per_unit: must be at least 0, got -5"),
        ("moves_per_unit = 2.5", "rules.toml:8: search.moves_per_unit"),
        ("cooling = 1.5", "rules.toml:8: search.cooling: must be below 1, got 1.5"),
    ],
)
def test_a_bad_effort_setting_names_its_key_and_line(line: str, message: str) -> None:
    with pytest.raises(RulesError) as info:
        parse_rules(BASE + line + "\n", "rules.toml")
    assert str(info.value).splitlines()[0].startswith(message)


def test_stated_values_override_the_preset() -> None:
    assert effort_settings(SearchRules(effort="quick")) == PRESETS["quick"]
    assert effort_settings(SearchRules(effort="quick", moves_per_unit=77, cooling=0.5)) == (77, 0.5)


def test_more_effort_means_more_moves_and_slower_cooling() -> None:
    quick, default, thorough = (fence_schedule(SearchRules(effort=e), 2000) for e in ("quick", "default", "thorough"))
    assert quick.moves * quick.runs < default.moves * default.runs < thorough.moves * thorough.runs
    assert quick.cooling < default.cooling < thorough.cooling
    assert quick.temperatures < default.temperatures < thorough.temperatures


@pytest.mark.parametrize("effort", ["quick", "default", "thorough"])
def test_a_fences_moves_are_proportional_to_its_units_above_the_floor(effort: str) -> None:
    rules = SearchRules(effort=effort)
    per_unit = PRESETS[effort][0]
    for n in (FLOOR_UNITS, 2 * FLOOR_UNITS, 5 * FLOOR_UNITS, 20 * FLOOR_UNITS):
        s = fence_schedule(rules, n)
        # one run there, focused, with ONE_RUN_FACTOR x the moves
        assert s.runs == 1 and s.focused and s.moves == int(ONE_RUN_FACTOR * per_unit * n)
    # below the floor a fence costs about what one of FLOOR_UNITS costs, in several runs
    for n in (FLOOR_UNITS // 10, FLOOR_UNITS // 4, FLOOR_UNITS // 2):
        small = fence_schedule(rules, n)
        assert small.runs == min(16, round(FLOOR_UNITS / n)) and small.moves == max(20_000, per_unit * n)
        assert not small.focused


def test_only_a_fence_left_to_one_run_by_the_schedule_is_focused() -> None:
    # stated restarts keep the stated schedule as it is, even at one run
    s = fence_schedule(SearchRules(restarts=1), 3 * FLOOR_UNITS)
    assert s.runs == 1 and not s.focused and s.moves == PRESETS["default"][0] * 3 * FLOOR_UNITS


def test_a_schedule_cools_over_its_whole_range() -> None:
    # common practice (geometric cooling): T_k = T_0 c^k ends at FINAL share of T_0
    s = fence_schedule(SearchRules(cooling=0.9), 3000)
    assert s.temperatures == math.ceil(math.log(FINAL_TEMPERATURE) / math.log(0.9))
    assert s.per_temperature * s.temperatures <= s.moves < (s.per_temperature + 1) * s.temperatures


def test_stated_restarts_win_over_the_budget() -> None:
    assert fence_schedule(SearchRules(restarts=3), 5000).runs == 3


def test_the_benchmarks_previous_default_is_the_schedule_the_engine_ran_before() -> None:
    # from memory of the engine before effort was a setting: one run of 600 n trial moves
    # in blocks of 8 n at cooling 0.97 for a fence of 1,500 units or more
    from benchmarks.quality_scale import previous_default

    s = fence_schedule(previous_default(2000), 2000)
    assert (s.runs, s.moves, s.per_temperature, s.cooling) == (1, 1_200_000, 16_000, 0.97)


def test_the_readme_states_the_moves_per_unit_each_preset_runs() -> None:
    import re
    from pathlib import Path

    readme = " ".join((Path(__file__).resolve().parent.parent / "README.md").read_text().split())
    m = re.search(r"quick ([\d,]+), default ([\d,]+), thorough ([\d,]+)\)", readme)
    assert m, "README no longer states the presets' moves per unit"
    stated = [int(g.replace(",", "")) for g in m.groups()]
    assert stated == [PRESETS[e][0] for e in ("quick", "default", "thorough")]
