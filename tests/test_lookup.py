"""Lookups: deterministic writing, aligned reading, located problems, lenient reading."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from zonedesign.errors import InputError
from zonedesign.io.lookup import read_lookup, write_lookup

IDS = np.array(["A1", "A2", "A3", "A4"], dtype=object)
TIERS = ["block", "quarter"]


def csv_file(tmp_path: Path, text: str, name: str = "lookup.csv") -> Path:
    path = tmp_path / name
    path.write_bytes(text.encode("utf-8"))
    return path


def problems(path: Path, ids: np.ndarray | None = IDS, tiers: list[str] | None = TIERS) -> list[str]:
    with pytest.raises(InputError) as info:
        read_lookup(path, ids, tiers)
    assert info.value.problems, "every lookup error lists its problems"
    assert str(info.value).splitlines()[0].startswith(info.value.problems[0])
    return info.value.problems


GOOD = "code,block,quarter\nA1,b1,q1\nA2,b1,q1\nA3,b2,q1\nA4,b3,q2\n"


# ---------------------------------------------------------------- writing and reading back


def test_written_lookup_has_a_fixed_byte_layout(tmp_path: Path) -> None:
    path = tmp_path / "lookup.csv"
    write_lookup(path, IDS, {"block": np.array([0, 0, 1, 2]), "quarter": np.array(["q1", "q1", "q1", "q2"])}, id_column="code")
    assert path.read_bytes() == b"code,block,quarter\nA1,0,q1\nA2,0,q1\nA3,1,q1\nA4,2,q2\n"
    again = tmp_path / "again.csv"
    write_lookup(again, IDS, {"block": np.array([0, 0, 1, 2]), "quarter": np.array(["q1", "q1", "q1", "q2"])}, id_column="code")
    assert again.read_bytes() == path.read_bytes()


def test_ids_needing_quotes_survive_the_round_trip(tmp_path: Path) -> None:
    ids = np.array(["North, 1", 'say "hi"', "7", "ünï"], dtype=object)
    path = tmp_path / "lookup.csv"
    write_lookup(path, ids, {"block": np.array(["a,b", "c", "d", "e"])})
    frame = read_lookup(path, ids, ["block"])
    assert frame.index.tolist() == ids.tolist()
    assert frame["block"].tolist() == ["a,b", "c", "d", "e"]
    assert b"\r" not in path.read_bytes()


def test_read_aligns_rows_to_the_areas_and_columns_to_the_tiers(tmp_path: Path) -> None:
    text = "code,quarter,block\nA3,q1,b2\nA1,q1,b1\nA4,q2,b3\nA2,q1,b1\n"
    frame = read_lookup(csv_file(tmp_path, text), IDS, TIERS)
    assert frame.index.name == "code"
    assert frame.index.tolist() == IDS.tolist()
    assert frame.columns.tolist() == TIERS
    assert frame["block"].tolist() == ["b1", "b1", "b2", "b3"]


def test_every_cell_is_text_even_when_it_looks_like_a_number(tmp_path: Path) -> None:
    frame = read_lookup(csv_file(tmp_path, "code,block\n007,01\n8,2.50\n"), None, None)
    assert frame.index.tolist() == ["007", "8"]
    assert frame["block"].tolist() == ["01", "2.50"]


def test_parquet_lookups_read_like_csv(tmp_path: Path) -> None:
    pd.DataFrame({"code": IDS, "block": ["b1", "b1", "b2", "b3"], "quarter": ["q1", "q1", "q1", "q2"]}).to_parquet(
        tmp_path / "lookup.parquet"
    )
    from_parquet = read_lookup(tmp_path / "lookup.parquet", IDS, TIERS)
    from_csv = read_lookup(csv_file(tmp_path, GOOD), IDS, TIERS)
    pd.testing.assert_frame_equal(from_parquet, from_csv)


# ---------------------------------------------------------------- located problems


def test_missing_and_empty_files(tmp_path: Path) -> None:
    assert problems(tmp_path / "lookup.csv")[0].startswith("lookup.csv: lookup file not found")
    assert problems(csv_file(tmp_path, ""))[0].startswith("lookup.csv: no header row (the file is empty)")


def test_header_must_name_exactly_the_tiers(tmp_path: Path) -> None:
    text = "code,block,tract\nA1,b1,t1\nA2,b1,t1\nA3,b2,t1\nA4,b3,t2\n"
    assert problems(csv_file(tmp_path, text)) == [
        "lookup.csv: header row: no column for tier(s) 'quarter'; column(s) 'tract' are not tiers "
        "(header: 'code', 'block', 'tract'; expected the area id column, then 'block', 'quarter')",
    ]
    # the same clear line for a strict read (redraw) and a lenient one (audit, repair)
    for body, says in [
        ("code,Block,quarter\nA1,b1,q1\n", "no column for tier(s) 'block'; column(s) 'Block' are not tiers"),
        ("code;block;quarter\nA1;b1;q1\n", "header row has 1 column(s); need the area id column, then one per tier "
                                          "(the header holds ';': a lookup is comma-separated)"),
        ("code,block,quarter\n", "no rows below the header row"),
        ("code,block,block\nA1,b1,b1\n", "header row: column(s) 'block' appear more than once"),
    ]:
        for strict in (True, False):
            with pytest.raises(InputError) as info:
                read_lookup(csv_file(tmp_path, body), IDS, TIERS, strict=strict)
            assert says in str(info.value), (body, strict, str(info.value))


def test_duplicate_area_ids_are_named_with_their_lines(tmp_path: Path) -> None:
    text = GOOD + "A2,b9,q9\n"
    assert problems(csv_file(tmp_path, text)) == [
        "lookup.csv: column 'code': 1 area id(s) on more than one row: 'A2' (lines 3, 6)"
    ]


def test_missing_zone_ids_are_named_by_area_and_column(tmp_path: Path) -> None:
    text = "code,block,quarter\nA1,b1,q1\nA2,,q1\nA3,b2,\nA4,,q2\n"
    assert problems(csv_file(tmp_path, text)) == [
        "lookup.csv: column 'block', rows 'A2', 'A4': no zone id",
        "lookup.csv: column 'quarter', row 'A3': no zone id",
    ]


def test_missing_area_id_is_named_by_line(tmp_path: Path) -> None:
    text = GOOD + ",b1,q1\n"
    assert problems(csv_file(tmp_path, text)) == ["lookup.csv: column 'code', line 6: no area id"]


def test_unknown_and_missing_area_ids(tmp_path: Path) -> None:
    text = "code,block,quarter\nA1,b1,q1\nA2,b1,q1\nX7,b2,q1\nX8,b3,q2\n"
    assert problems(csv_file(tmp_path, text)) == [
        "lookup.csv: column 'code': 2 area id(s) not in the areas file: 'X7', 'X8'",
        "lookup.csv: 2 area(s) of the areas file have no row: 'A3', 'A4'",
    ]


def test_ragged_rows_and_bad_bytes_are_located(tmp_path: Path) -> None:
    (p,) = problems(csv_file(tmp_path, "code,block,quarter\nA1,b1\nA2,b1,q1,extra\n"))
    assert p == "lookup.csv: rows must have 3 cells like the header row: line 2 has 2, line 3 has 4"
    path = tmp_path / "bytes.csv"
    path.write_bytes(b"code,block,quarter\nA1,b1,q1\nA2,\xff,q1\n")
    (p,) = problems(path)
    assert p == "bytes.csv: line 3: not UTF-8 text (byte 0xff)"


def test_lenient_read_returns_aligned_frame_and_problems(tmp_path: Path) -> None:
    text = "code,block,quarter\nA1,b1,t1\nA1,b5,t5\nX7,b2,t1\nA3,,t2\n"
    frame, found = read_lookup(csv_file(tmp_path, text), IDS, TIERS, strict=False)
    assert frame.index.tolist() == IDS.tolist()
    assert frame.columns.tolist() == TIERS
    # the first row of a duplicated id is kept; missing areas are None
    assert frame["block"].tolist() == ["b1", None, None, None]
    assert frame["quarter"].tolist() == ["t1", None, "t2", None]
    assert found == [
        "lookup.csv: column 'code': 1 area id(s) on more than one row: 'A1' (lines 2, 3)",
        "lookup.csv: column 'block', row 'A3': no zone id",
        "lookup.csv: column 'code': 1 area id(s) not in the areas file: 'X7'",
        "lookup.csv: 2 area(s) of the areas file have no row: 'A2', 'A4'",
    ]


# ---------------------------------------------------------------- fuzzing


cells = st.sampled_from(["A1", "A2", "A3", "A4", "X", "", "b1", "q1", '"', '"a,b"', "\r", "\n", "\x00", "é", ",", "block"])


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    st.lists(st.lists(cells, max_size=5), max_size=7),
    st.booleans(),
    st.binary(max_size=4),
)
def test_any_csv_content_is_read_or_rejected_with_a_row_or_column(
    tmp_path: Path, rows: list[list[str]], strict: bool, noise: bytes
) -> None:
    path = tmp_path / "fuzz.csv"
    path.write_bytes("\n".join(",".join(r) for r in rows).encode("utf-8") + noise)
    try:
        out = read_lookup(path, IDS, TIERS, strict=strict)
    except InputError as exc:
        first = str(exc).splitlines()[0]
        assert first.startswith("fuzz.csv: ")
        assert any(word in first for word in ("line", "row", "column")), first
    else:
        frame, found = (out, []) if strict else out
        assert frame.index.tolist() == IDS.tolist() and frame.columns.tolist() == TIERS
        for p in found:
            assert any(word in p for word in ("line", "row", "column")), p
