"""The rules file: parsing, located errors, round trips, overrides and the starter file."""

from __future__ import annotations

import dataclasses
import re
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from zonedesign.errors import InputError, RulesError
from zonedesign.rules import (
    STABILITY_DEFAULT,
    AreasRules,
    GraphRules,
    Rules,
    SearchRules,
    TierRules,
    apply_override,
    check_rules_against,
    load_rules,
    parse_rules,
    rules_to_toml,
    tier_name_problem,
)

VALID = """\
[areas]
id = "code"
counts = ["persons", "households"]
attributes = ["owners"]
fence = "district"

[graph]
contiguity = "queen"
links = "ferries.csv"

[[tier]]
name = "tier1"
min = { households = 50, persons = 120 }
max = { households = 280, persons = 700 }
target = { households = 140 }
weights = { size = 1.0, homogeneity = 2.0 }

[[tier]]
name = "tier2"
min = { persons = 1100 }
homogeneity = "pairwise"
compactness = "cut"

[search]
method = "tabu"
seed = 7
cooling = 0.8
time_limit_fence = 5
"""
# line numbers in VALID, for the located-error cases below
LINE = {text: k for k, text in enumerate(VALID.splitlines(), start=1)}


def same(a: Rules, b: Rules) -> bool:
    return dataclasses.replace(a, source=None, text="") == dataclasses.replace(b, source=None, text="")


def first_line(err: BaseException) -> str:
    return str(err).splitlines()[0]


# ---------------------------------------------------------------- reading


def test_valid_file_gives_the_stated_records(tmp_path: Path) -> None:
    r = parse_rules(VALID, "rules.toml", base_dir=tmp_path)
    assert r.areas == AreasRules(id="code", counts=("persons", "households"), attributes=("owners",), fence="district")
    assert r.graph == GraphRules(contiguity="queen", links=tmp_path / "ferries.csv")
    first, second = r.tiers
    assert first.min == {"households": 50.0, "persons": 120.0}
    assert first.target == {"households": 140.0}
    # weights not given keep their defaults
    assert first.weights == {"size": 1.0, "homogeneity": 2.0, "compactness": 1.0, "stability": STABILITY_DEFAULT}
    assert second.max == {} and second.homogeneity == "pairwise" and second.compactness == "cut"
    assert r.search == SearchRules(method="tabu", seed=7, cooling=0.8, time_limit_fence=5.0)
    assert r.text == VALID and r.source == Path("rules.toml")


def test_load_rules_reads_the_file_and_resolves_links_beside_it(tmp_path: Path) -> None:
    path = tmp_path / "plan" / "rules.toml"
    path.parent.mkdir()
    path.write_text(VALID, encoding="utf-8")
    r = load_rules(path)
    assert r.source == path
    assert r.graph.links == path.parent / "ferries.csv"


def test_missing_rules_file_is_an_input_error_naming_it(tmp_path: Path) -> None:
    with pytest.raises(InputError, match=r"rules\.toml: rules file not found"):
        load_rules(tmp_path / "rules.toml")


def test_a_tier_without_any_bound_is_allowed() -> None:
    text = '[areas]\nid = "code"\ncounts = ["persons"]\n[[tier]]\nname = "free"\n'
    (tier,) = parse_rules(text).tiers
    assert tier.min == tier.max == tier.target == {}


def test_bound_sub_tables_and_dotted_keys_read_like_inline_tables() -> None:
    text = (
        '[areas]\nid = "code"\ncounts = ["persons", "households"]\n'
        '[[tier]]\nname = "tier1"\nmin.persons = 120\n[tier.max]\npersons = 700\n'
    )
    (tier,) = parse_rules(text).tiers
    assert tier.min == {"persons": 120.0} and tier.max == {"persons": 700.0}


# ---------------------------------------------------------------- located errors


def error_for(old: str, new: str) -> str:
    """The first message line for VALID with line `old` replaced by `new`."""
    assert old in LINE, old
    text = VALID.replace(old + "\n", new + "\n", 1)
    with pytest.raises(RulesError) as info:
        parse_rules(text, "rules.toml")
    assert info.value.problems, "every rules error lists its problems"
    return first_line(info.value)


CASES = [
    # (line replaced, its replacement, message after "rules.toml:N: ", line of N, lines below it)
    # unknown keys at every level
    ('fence = "district"', 'fences = "district"', "areas.fences: unknown key in [areas]", 'fence = "district"', 0),
    ('contiguity = "queen"', 'adjacency = "queen"', "graph.adjacency: unknown key in [graph]", 'contiguity = "queen"', 0),
    ('name = "tier2"', 'name = "tier2"\ncolour = "red"', "tier.2.colour: unknown key in [[tier]]", 'name = "tier2"', 1),
    ("seed = 7", "seed = 7\nretries = 3", "search.retries: unknown key in [search]", "seed = 7", 1),
    ("[search]", "[searching]", "searching: unknown key in the rules file", "[search]", 0),
    ("min = { persons = 1100 }", "min = { persons = 1100, persns = 5 }",
     "tier.2.min.persns: unknown key in min (keys are [areas].counts) (allowed: persons, households); did you mean 'persons'?",
     "min = { persons = 1100 }", 0),
    # wrong types and ranges
    ("min = { persons = 1100 }", 'min = { persons = "forty" }', "tier.2.min.persons: expected a number, got 'forty'", "min = { persons = 1100 }", 0),
    ("min = { persons = 1100 }", "min = { persons = -5 }", "tier.2.min.persons: must be at least 0, got -5", "min = { persons = 1100 }", 0),
    ("min = { persons = 1100 }", "min = 1100", "tier.2.min: expected a table", "min = { persons = 1100 }", 0),
    ("max = { households = 280, persons = 700 }", "max = { households = 30, persons = 700 }",
     "tier.1.min.households: min 50 is above max 30", "min = { households = 50, persons = 120 }", 0),
    ("target = { households = 140 }", "target = { households = 300 }",
     "tier.1.target.households: target 300 is outside [min 50, max 280]", "target = { households = 140 }", 0),
    ('method = "tabu"', 'method = "genetic"', "search.method: 'genetic' is not one of 'descent', 'annealing', 'tabu'", 'method = "tabu"', 0),
    ('homogeneity = "pairwise"', 'homogeneity = "variance"', "tier.2.homogeneity: 'variance' is not one of 'ssd', 'pairwise'", 'homogeneity = "pairwise"', 0),
    ('compactness = "cut"', 'compactness = "round"', "tier.2.compactness: 'round' is not one of 'polsby', 'cut'", 'compactness = "cut"', 0),
    ('contiguity = "queen"', 'contiguity = "bishop"', "graph.contiguity: 'bishop' is not one of 'rook', 'queen'", 'contiguity = "queen"', 0),
    ("weights = { size = 1.0, homogeneity = 2.0 }", "weights = { size = 1.0, beauty = 2.0 }", "tier.1.weights.beauty: unknown key in weights",
     "weights = { size = 1.0, homogeneity = 2.0 }", 0),
    ("weights = { size = 1.0, homogeneity = 2.0 }", "weights = { size = -1.0 }", "tier.1.weights.size: must be at least 0, got -1",
     "weights = { size = 1.0, homogeneity = 2.0 }", 0),
    ('name = "tier2"', 'name = "tier1"', "tier.2.name: 'tier1' is already the name of tier 1", 'name = "tier2"', 0),
    ("seed = 7", "seed = 7.5", "search.seed: expected a whole number, got 7.5", "seed = 7", 0),
    ("seed = 7", 'seed = "7"', "search.seed: expected a whole number, got '7'", "seed = 7", 0),
    ("time_limit_fence = 5", "time_limit_fence = 0", "search.time_limit_fence: must be above 0, got 0", "time_limit_fence = 5", 0),
    ("time_limit_fence = 5", "time_limit_fence = -1.5", "search.time_limit_fence: must be above 0, got -1.5", "time_limit_fence = 5", 0),
    ("cooling = 0.8", "cooling = 1.0", "search.cooling: must be below 1, got 1", "cooling = 0.8", 0),
    ("cooling = 0.8", "cooling = 0", "search.cooling: must be above 0, got 0", "cooling = 0.8", 0),
    ('id = "code"', "id = 3", "areas.id: expected a non-empty text, got 3", 'id = "code"', 0),
    ('counts = ["persons", "households"]', 'counts = ["persons", "persons"]', "areas.counts: column 'persons' listed twice",
     'counts = ["persons", "households"]', 0),
]


@pytest.mark.parametrize(("old", "new", "expected", "at", "below"), CASES)
def test_each_error_names_its_key_and_line(old: str, new: str, expected: str, at: str, below: int) -> None:
    message = error_for(old, new)
    assert message.startswith(f"rules.toml:{LINE[at] + below}: {expected}"), message


def test_a_valid_change_is_not_an_error() -> None:
    # guards the table above: changing a bound within range parses
    parse_rules(VALID.replace("min = { persons = 1100 }", "min = { persons = 700 }"))


def test_syntax_errors_give_line_and_column() -> None:
    with pytest.raises(RulesError) as info:
        parse_rules(VALID.replace("seed = 7", "seed = = 7"), "rules.toml")
    line = LINE["seed = 7"]
    assert re.match(rf"rules\.toml:{line}:\d+: ", first_line(info.value)), str(info.value)


def test_no_tiers_and_no_areas_are_errors() -> None:
    with pytest.raises(RulesError, match=r"^<rules>: tier: no \[\[tier\]\] tables"):
        parse_rules('[areas]\nid = "code"\ncounts = ["persons"]\n')
    with pytest.raises(RulesError, match=r"^<rules>: areas: missing \[areas\] table"):
        parse_rules('[[tier]]\nname = "tier1"\n')
    with pytest.raises(RulesError, match=r"^<rules>:4: tier: write each tier as a \[\[tier\]\] table"):
        parse_rules('[areas]\nid = "code"\ncounts = ["persons"]\n[tier]\nname = "tier1"\n')


def test_every_problem_is_listed_in_file_order() -> None:
    text = VALID.replace("seed = 7", "seed = -1").replace('fence = "district"', 'fence = ""')
    with pytest.raises(RulesError) as info:
        parse_rules(text, "rules.toml")
    problems = info.value.problems
    assert [p.split(":")[1] for p in problems] == [str(LINE['fence = "district"']), str(LINE["seed = 7"])]
    assert first_line(info.value).endswith("(and 1 more problem)")


# ---------------------------------------------------------------- checks against the data


def test_check_against_columns_names_key_line_and_a_near_match() -> None:
    r = parse_rules(VALID, "rules.toml")
    check_rules_against(r, ["code", "persons", "households", "owners", "district"], "areas.gpkg")
    with pytest.raises(RulesError) as info:
        check_rules_against(r, ["code", "Persons", "households", "owners"], "areas.gpkg")
    counts_line = LINE['counts = ["persons", "households"]']
    fence_line = LINE['fence = "district"']
    assert info.value.problems == [
        f"rules.toml:{counts_line}: areas.counts: column 'persons' is not in areas.gpkg; did you mean 'Persons'?",
        f"rules.toml:{fence_line}: areas.fence: column 'district' is not in areas.gpkg",
    ]


# ---------------------------------------------------------------- writing


def test_round_trip_of_the_valid_file() -> None:
    r = parse_rules(VALID)
    assert same(parse_rules(rules_to_toml(r)), r)


def test_round_trip_keeps_the_agency_input_keys(tmp_path: Path) -> None:
    text = VALID.replace(
        'fence = "district"',
        'fence = { column = "code", suffix = 2 }\ntable = "counts.csv"\nprefer = "table"\n'
        'work_crs = "EPSG:32633"\noverlaps = "cut"',
    )
    r = parse_rules(text, "rules.toml", base_dir=tmp_path)
    assert (r.areas.fence, r.areas.fence_suffix, r.areas.table) == ("code", 2, (tmp_path / "counts.csv").absolute())
    back = parse_rules(rules_to_toml(r))
    assert back.areas == r.areas


names = st.text(st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00"), min_size=1, max_size=12).filter(
    lambda s: s.strip() != ""
)
amounts = st.floats(min_value=0, max_value=1e9, allow_nan=False) | st.integers(0, 10**6).map(float)


@st.composite
def rules_objects(draw: st.DrawFn) -> Rules:
    counts = tuple(draw(st.lists(names, min_size=1, max_size=3, unique=True)))
    areas = AreasRules(
        id=draw(names),
        counts=counts,
        attributes=tuple(draw(st.lists(names, max_size=3, unique=True))),
        fence=draw(st.none() | names),
        weight=draw(st.none() | names),
        layer=draw(st.none() | names),
        crs=draw(st.none() | st.just("EPSG:32633")),
    )
    tiers = []
    # a tier name must also be a lookup column and a GeoPackage layer (tier_name_problem)
    tier_names = draw(st.lists(
        names.filter(lambda s: not s.isdigit() and tier_name_problem(s, areas) is None),
        min_size=1, max_size=3, unique_by=str.casefold,
    ))
    for name in tier_names:
        lo, hi, target = {}, {}, {}
        for c in counts:
            a, b = sorted(draw(st.tuples(amounts, amounts)))
            if draw(st.booleans()):
                lo[c] = a
            if draw(st.booleans()):
                hi[c] = b
            if b > 0 and draw(st.booleans()):
                target[c] = b  # within [a, b] whether or not those bounds are set
        weights = {t: draw(amounts) for t in ("size", "homogeneity", "compactness", "stability")}
        tiers.append(
            TierRules(
                name=name,
                min=lo,
                max=hi,
                target=target,
                weights=weights,
                homogeneity=draw(st.sampled_from(["ssd", "pairwise"])),
                compactness=draw(st.sampled_from(["polsby", "cut"])),
            )
        )
    graph = GraphRules(
        contiguity=draw(st.sampled_from(["rook", "queen"])),
        min_shared_length=draw(amounts),
        tolerance=draw(amounts),
        links=draw(st.none() | names.map(Path)),
    )
    search = SearchRules(
        method=draw(st.sampled_from(["descent", "annealing", "tabu"])),
        seed=draw(st.integers(0, 2**40)),
        constructions=draw(st.integers(1, 50)),
        time_limit_fence=draw(st.floats(min_value=1e-3, max_value=1e6)),
        time_limit_total=draw(st.floats(min_value=1e-3, max_value=1e6)),
        cooling=draw(st.floats(min_value=1e-6, max_value=0.999999)),
        moves_per_temperature=draw(st.integers(0, 10**6)),
        tenure=draw(st.integers(0, 1000)),
        max_no_improve=draw(st.integers(0, 10**6)),
    )
    return Rules(areas=areas, tiers=tuple(tiers), graph=graph, search=search)


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rules_objects())
def test_rules_to_toml_round_trips_any_valid_rules(r: Rules) -> None:
    text = rules_to_toml(r)
    tomllib.loads(text)  # the Python standard library's TOML reader accepts it
    assert same(parse_rules(text), r)


# ---------------------------------------------------------------- overrides


def test_overrides_change_one_value_and_keep_the_rest() -> None:
    r = parse_rules(VALID, "rules.toml")
    r1 = apply_override(r, "tier.1.min.households", "30")
    assert r1.tiers[0].min == {"households": 30.0, "persons": 120.0}
    assert r1.tiers[1] == r.tiers[1] and r1.search == r.search and r1.source == r.source
    assert apply_override(r, "tier.tier2.max.persons", "5000").tiers[1].max == {"persons": 5000.0}
    assert apply_override(r, "tier.tier1.max.persons", "none").tiers[0].max == {"households": 280.0}
    assert apply_override(r, "tier.1.target.persons", "300").tiers[0].target == {"households": 140.0, "persons": 300.0}
    assert apply_override(r, "tier.2.weights.stability", "0.5").tiers[1].weights["stability"] == 0.5
    assert apply_override(r, "tier.2.homogeneity", "ssd").tiers[1].homogeneity == "ssd"
    assert apply_override(r, "search.method", "annealing").search.method == "annealing"
    assert apply_override(r, "search.seed", "11").search.seed == 11
    assert apply_override(r, "graph.contiguity", "rook").graph.contiguity == "rook"
    assert apply_override(r, "graph.tolerance", "0.5").graph.tolerance == 0.5


@pytest.mark.parametrize(
    ("key", "value", "expected"),
    [
        ("tier.3.min.persons", "5", "override key 'tier.3.min.persons': no tier 3 (tiers: 1 'tier1', 2 'tier2')"),
        ("tier.town.min.persons", "5", "override key 'tier.town.min.persons': no tier named 'town'"),
        ("tier.1.size.persons", "5", "override key 'tier.1.size.persons': tier field 'size'"),
        ("tier.1.min", "5", "override key 'tier.1.min': tier field 'min'"),
        ("search.speed", "5", "override key 'search.speed': no field 'speed' in [search]; allowed: tier.<N or name>"),
        ("rules.seed", "5", "override key 'rules.seed': not a sweep key; allowed: "),
        ("tier.1.min.persons", "-5", "override tier.1.min.persons=-5: tier.1.min.persons: must be at least 0, got -5"),
        ("tier.1.min.persons", "800", "override tier.1.min.persons=800: tier.1.min.persons: min 800 is above max 700"),
        ("tier.1.min.people", "5", "override tier.1.min.people=5: tier.1.min.people: unknown key in min"),
        ("search.cooling", "2", "override search.cooling=2: search.cooling: must be below 1, got 2"),
        ("search.method", "random", "override search.method=random: search.method: 'random' is not one of"),
    ],
)
def test_bad_overrides_name_the_key_and_what_is_allowed(key: str, value: str, expected: str) -> None:
    r = parse_rules(VALID)
    with pytest.raises(RulesError) as info:
        apply_override(r, key, value)
    assert first_line(info.value).startswith(expected), str(info.value)


# ---------------------------------------------------------------- fuzzing


def named_or_located(message: str, source: str) -> bool:
    """A rejection names a line (source:N) or a key (source: key: ...)."""
    first = message.splitlines()[0]
    return bool(re.match(rf"{re.escape(source)}:\d+", first) or re.match(rf"{re.escape(source)}: \S+: ", first))


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=300))
def test_random_text_is_parsed_or_rejected_with_a_location(text: str) -> None:
    try:
        parse_rules(text, "rules.toml")
    except RulesError as exc:
        assert named_or_located(str(exc), "rules.toml"), str(exc)


VALUES = st.sampled_from(['"x"', "-1", "0", "1e9", "nan", "inf", "true", "[]", "{}", '{ persons = "a" }', "3.5", '""', "[1, 2]"])


@settings(max_examples=200, deadline=None)
@given(st.data())
def test_mutations_of_a_valid_file_are_parsed_or_rejected_with_a_location(data: st.DataObject) -> None:
    lines = VALID.splitlines()
    for _ in range(data.draw(st.integers(1, 3))):
        k = data.draw(st.integers(0, len(lines) - 1))
        action = data.draw(st.sampled_from(["drop", "repeat", "value", "key", "insert"]))
        if action == "drop":
            lines.pop(k)
        elif action == "repeat":
            lines.insert(k, lines[k])
        elif action == "value" and "=" in lines[k]:
            lines[k] = lines[k].split("=")[0] + "= " + data.draw(VALUES)
        elif action == "key" and "=" in lines[k]:
            lines[k] = data.draw(st.from_regex(r"[a-z_]{1,10}", fullmatch=True)) + " =" + lines[k].split("=", 1)[1]
        else:
            lines.insert(k, data.draw(st.from_regex(r"\[?\[?[a-z.]{1,8}\]?\]?( = [0-9a-z\"{}]{1,6})?", fullmatch=True)))
        if not lines:
            lines = [""]
    text = "\n".join(lines) + "\n"
    try:
        parse_rules(text, "rules.toml")
    except RulesError as exc:
        assert named_or_located(str(exc), "rules.toml"), str(exc)


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.sampled_from(["tier", "1", "2", "3", "tier1", "min", "max", "target", "weights", "size", "persons", "households", "search", "graph", "seed", "cooling", "links", "homogeneity", "x", ""]), min_size=1, max_size=5),
    st.sampled_from(["1", "0", "-3", "0.5", "none", "tabu", "rook", "ssd", "x", "", "1e400", "[1]"]),
)
def test_any_override_key_is_applied_or_rejected_by_name(parts: list[str], value: str) -> None:
    r = parse_rules(VALID)
    key = ".".join(parts)
    try:
        out = apply_override(r, key, value)
    except RulesError as exc:
        assert key in first_line(exc) or f"override {key}=" in first_line(exc), str(exc)
    else:
        assert isinstance(out, Rules)
