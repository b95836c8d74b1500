"""The typed parts of a run summary and how each is read from and written to summary.json.

Each part is a dataclass whose fields name the keys the readers use. A field is one of:
- required: a summary.json without it is refused, naming the file and the key;
- written: always written, even as null (a part's fixed keys, such as a fence's `bound`);
- optional: written only when set (None means absent).
Keys a part does not name are kept in its `extra` mapping as they came, so a summary read
back writes the same JSON. A `partial` reading (a report of whatever a caller has) takes
missing keys as absent and leaves out a part of the wrong type instead of refusing it.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any, NoReturn

from zonedesign.errors import InputError
from zonedesign.plain import plain
from zonedesign.status import certificate_word

REQUIRED, WRITTEN, OPTIONAL, EXTRA, DERIVED = "required", "written", "optional", "extra", "derived"


def key(name: str | None = None, *, need: str = OPTIONAL, of: type | None = None, shape: str = "one",
        kind: type | tuple[type, ...] | None = None, default: Any = None, factory: Any = None) -> Any:
    """A field bound to a summary.json key. of: the part type of its value, read as one
    (shape "one"), a list of them ("list"), a mapping of name to part ("map") or of name to
    a list of parts ("maplist"); kind: the plain JSON type(s) its value must have."""
    meta = {"key": name, "need": need, "of": of, "shape": shape, "kind": kind}
    if factory is not None:
        return field(default_factory=factory, metadata=meta)
    return field(default=default, metadata=meta)


def extra() -> Any:
    return field(default_factory=dict, metadata={"need": EXTRA})


@dataclass(frozen=True)
class Where:
    """Where a value sits in the file being read: for errors that name the file and key."""

    source: str
    path: str = ""
    partial: bool = False

    def at(self, name: str | int) -> Where:
        step = f"[{name}]" if isinstance(name, int) else (f".{name}" if self.path else str(name))
        return dataclasses.replace(self, path=self.path + step)

    def fail(self, what: str) -> NoReturn:
        raise InputError(f"{self.source}: {what}")


_DROP = object()  # a value of the wrong type in a partial reading: left out


def _json_type(kind: type | tuple[type, ...]) -> str:
    kinds = kind if isinstance(kind, tuple) else (kind,)
    words = {str: "text", int: "a whole number", float: "a number", bool: "true or false", list: "a list",
             dict: "an object"}
    return " or ".join(words.get(k, k.__name__) for k in kinds)


def _wrong(value: Any, want: str, where: Where) -> Any:
    if where.partial:
        return _DROP
    where.fail(f"key {where.path} should be {want}, not {type(value).__name__} {value!r:.60}")


def _check(value: Any, kind: type | tuple[type, ...] | None, where: Where) -> Any:
    if kind is None or value is None:
        return value
    kinds = kind if isinstance(kind, tuple) else (kind,)
    if float in kinds and isinstance(value, int) and not isinstance(value, bool):
        return value
    if bool not in kinds and isinstance(value, bool) and (int in kinds or float in kinds):
        return _wrong(value, _json_type(kind), where)
    return value if isinstance(value, kinds) else _wrong(value, _json_type(kind), where)


def _read_value(value: Any, meta: dict, where: Where) -> Any:
    part, shape = meta.get("of"), meta.get("shape", "one")
    if part is None:
        return _check(value, meta.get("kind"), where)
    if value is None:
        return None
    if shape == "list":
        if not isinstance(value, list):
            return _wrong(value, "a list", where)
        items = [part.read(v, where.at(i)) for i, v in enumerate(value)]
        return [v for v in items if v is not _DROP]
    if shape == "map":
        if not isinstance(value, dict):
            return _wrong(value, "an object", where)
        items = {str(k): part.read(v, where.at(str(k))) for k, v in value.items()}
        return {k: v for k, v in items.items() if v is not _DROP}
    if shape == "maplist":  # name -> list of parts (a tier's overrides)
        if not isinstance(value, dict):
            return _wrong(value, "an object", where)
        lists = {str(k): _read_value(v, {**meta, "shape": "list"}, where.at(str(k))) for k, v in value.items()}
        return {k: v for k, v in lists.items() if v is not _DROP}
    return part.read(value, where)


def dump(value: Any) -> Any:
    """A part, or lists and mappings of parts, as JSON-ready values."""
    if isinstance(value, Part):
        return value.to_json()
    if isinstance(value, list | tuple):
        return [dump(v) for v in value]
    if isinstance(value, dict):
        return {k: dump(v) for k, v in value.items()}
    return value


class Part:
    """A summary part: read from a JSON object by its fields' keys, written back the same."""

    @classmethod
    def read(cls, data: Any, where: Where) -> Any:
        if not isinstance(data, dict):
            return _wrong(data, "an object", where)
        values: dict[str, Any] = {}
        known: set[str] = set()
        for f in dataclasses.fields(cls):  # type: ignore[arg-type]
            need = f.metadata.get("need")
            if need in (EXTRA, DERIVED) or need is None:
                continue
            name = f.metadata.get("key") or f.name
            known.add(name)
            if name not in data:
                if need == REQUIRED and not where.partial:
                    where.fail(f"required key {where.at(name).path} is missing")
                continue
            value = _read_value(data[name], f.metadata, where.at(name))
            if value is not _DROP:
                values[f.name] = value
        rest = {k: v for k, v in data.items() if k not in known}
        if any(f.metadata.get("need") == EXTRA for f in dataclasses.fields(cls)):  # type: ignore[arg-type]
            values["extra"] = rest
        return cls(**values)

    @classmethod
    def of(cls, value: Any) -> Any:
        """The part made from a result's plain form (a checker's record, a figures dict)."""
        return cls.read(plain(value), Where(source=cls.__name__))

    def to_json(self) -> dict:
        out: dict[str, Any] = {}
        for f in dataclasses.fields(self):  # type: ignore[arg-type]
            need = f.metadata.get("need")
            value = getattr(self, f.name)
            if need == EXTRA:
                out.update(value)
            elif need in (REQUIRED, WRITTEN) or (need == OPTIONAL and value is not None):
                out[f.metadata.get("key") or f.name] = dump(value)
        return out


# ------------------------------------------------------------------ the head: input and rules


@dataclass
class OverlapCut(Part):
    """One overlap mended under `overlaps = "cut"`: the area that kept it and the one cut."""

    kept_by: str | None = key(need=WRITTEN)
    cut_from: str | None = key(need=WRITTEN)
    overlap_m2: float | None = key(need=WRITTEN, kind=float)
    extra: dict = extra()


@dataclass
class DuplicateMerged(Part):
    """Identical polygons made one area: the id kept, the ids merged, their counts before."""

    kept: str | None = key(need=WRITTEN)
    merged: list = key(need=WRITTEN, kind=list, factory=list)
    counts: dict = key(need=WRITTEN, kind=dict, factory=dict)
    extra: dict = extra()


@dataclass
class AreasPart(Part):
    count: int | None = key(need=WRITTEN, kind=int)
    crs: str | None = key(need=WRITTEN)
    crs_choice: str | None = key(need=WRITTEN)  # why this CRS
    fences: int | None = key(need=WRITTEN, kind=int)
    fence_codes: list | None = key(need=WRITTEN, kind=list)
    fences_per_tier: dict | None = key(kind=dict)  # a tier with fences of its own counts them
    repaired_polygons: list = key(need=WRITTEN, kind=list, factory=list)
    overlaps_cut: list[OverlapCut] = key(need=WRITTEN, of=OverlapCut, shape="list", factory=list)
    duplicates_merged: list[DuplicateMerged] = key(need=WRITTEN, of=DuplicateMerged, shape="list", factory=list)
    notes: list = key(need=WRITTEN, kind=list, factory=list)
    extra: dict = extra()

    def fences_said(self) -> str:
        """The fences in words: "10 fences", or per tier where tiers keep to fences of their own."""
        per_tier = self.fences_per_tier or {}
        if len(set(per_tier.values())) > 1:
            return "fences per tier: " + ", ".join(f"{t} {k:,}" for t, k in per_tier.items())
        return f"{self.fences:,} fence(s)" if self.fences is not None else "fences unknown"


@dataclass
class GraphPart(Part):
    contiguity: str | None = key(need=WRITTEN)
    edges: int | None = key(need=WRITTEN, kind=int)
    links: int | None = key(need=WRITTEN, kind=int)
    islands: list | None = key(need=WRITTEN, kind=list)  # one object per island
    extra: dict = extra()


@dataclass
class Override(Part):
    """One [[tier.override]]: the fences it covers and the bounds it gives there."""

    fences: list = key(need=WRITTEN, kind=list, factory=list)
    min: dict = key(need=WRITTEN, kind=dict, factory=dict)
    max: dict = key(need=WRITTEN, kind=dict, factory=dict)
    target: dict = key(need=WRITTEN, kind=dict, factory=dict)
    weights: dict = key(need=WRITTEN, kind=dict, factory=dict)
    extra: dict = extra()


@dataclass
class TierObjective(Part):
    homogeneity: str | None = key(need=WRITTEN)
    compactness: str | None = key(need=WRITTEN)
    weights: dict = key(need=WRITTEN, kind=dict, factory=dict)
    extra: dict = extra()


@dataclass
class SearchPart(Part):
    method: str | None = key(need=WRITTEN)
    seed: int | None = key(need=WRITTEN, kind=int)
    executor: str | None = key(need=WRITTEN)
    workers: int | None = key(need=WRITTEN, kind=int)
    extra: dict = extra()


# ------------------------------------------------------------------ design and redraw


@dataclass
class FenceRow(Part):
    """One fence of one tier as the tier runner left it, with the exact step's proof."""

    tier: str = key(need=REQUIRED, kind=str, default="")
    fence: str = key(need=REQUIRED, kind=str, default="")
    zones: int | None = key(need=WRITTEN, kind=int)
    units: int | None = key(need=WRITTEN, kind=int)
    breaks: float | None = key(need=WRITTEN, kind=float)
    objective: float | None = key(need=WRITTEN, kind=float)
    terms: dict | None = key(need=WRITTEN, kind=dict)
    seconds: float | None = key(need=WRITTEN, kind=float)
    error: str | None = key(need=WRITTEN)
    proof: str | None = key(need=WRITTEN)  # "optimal" | "none"
    bound: float | None = key(need=WRITTEN, kind=float)
    proof_reason: str | None = key(need=WRITTEN)
    info: dict | None = key(need=WRITTEN, kind=dict)
    extra: dict = extra()


@dataclass
class FenceFailure(Part):
    fence: str = key(need=REQUIRED, default="")
    tier: str = key(need=REQUIRED, default="")
    error: str | None = key(need=WRITTEN)
    extra: dict = extra()


@dataclass
class PreviousPart(Part):
    """A redraw's previous lookup and counts file, with what reading the lookup found."""

    lookup: str | None = key(need=WRITTEN)
    counts: str | None = key(need=WRITTEN)
    extra: dict = extra()


@dataclass
class RedrawPart(Part):
    code_policy: str | None = key(need=WRITTEN)
    stability: dict | None = key(kind=dict)  # stability weight per tier
    moved_areas: str | None = key()  # what an area moved means
    extra: dict = extra()


@dataclass
class TierChanges(Part):
    """A redraw's (or a repair's) figures of one tier against the previous zones."""

    code_policy: str | None = key()
    previous_zones: int | None = key(kind=int)
    kept: int | None = key(kind=int)
    share_unchanged: float | None = key(kind=float)
    share_changed: float | None = key(kind=float)
    areas_moved: int | None = key(kind=int)
    areas_new: int | None = key(kind=int)
    codes_retired: int | None = key(kind=int)
    kinds: dict | None = key(kind=dict)  # zones per kind of change
    extra: dict = extra()


# ------------------------------------------------------------------ checks


@dataclass
class Violation(Part):
    kind: str = key(need=REQUIRED, kind=str, default="")
    tier: str | None = key(need=WRITTEN)
    zone: str | None = key(need=WRITTEN)
    areas: list | None = key(need=WRITTEN, kind=list)
    n_areas: int | None = key(need=WRITTEN, kind=int)
    fences: list | None = key(need=WRITTEN, kind=list)
    figures: dict | None = key(need=WRITTEN, kind=dict)
    message: str | None = key(need=WRITTEN)
    extra: dict = extra()


@dataclass
class Overlay(Part):
    """An audit of zone layers: the share of an area a zone may miss, areas split between zones."""

    tolerance_share: float | None = key(need=WRITTEN, kind=float)
    flags: list = key(need=WRITTEN, kind=list, factory=list)
    extra: dict = extra()


@dataclass
class AuditPart(Part):
    """The independent audit: whether every rule holds and each violation it found."""

    ok: bool = key(need=REQUIRED, kind=bool, default=False)
    violations: list[Violation] = key(need=WRITTEN, of=Violation, shape="list", factory=list)
    source: str | None = key()  # the lookup or layers audited
    overlay: Overlay | None = key(of=Overlay)
    extra: dict = extra()


@dataclass
class LocksPart(Part):
    file: str | None = key(need=WRITTEN)
    zones: dict = key(need=WRITTEN, kind=dict, factory=dict)  # locked zone codes per tier
    kept: bool = key(need=WRITTEN, kind=bool, default=True)
    extra: dict = extra()


@dataclass
class CertificateEntry(Part):
    """The CP-SAT certificate's verdict on one fence-tier."""

    tier: str = key(need=REQUIRED, default="")
    fence: str = key(need=REQUIRED, default="")
    status: str = key(need=WRITTEN, kind=str, default="")
    seconds: float | None = key(kind=float)
    text: str | None = key()
    extra: dict = extra()  # the model's size: zones, units, arcs, areas

    @property
    def word(self) -> str:
        """confirmed / refuted / undecided (older summaries' solver words read the same)."""
        return certificate_word({"verdict": self.extra.get("verdict"), "status": self.status})

    @property
    def decided(self) -> bool:
        return self.word != "undecided"


@dataclass
class TierFigures(Part):
    """One tier's totals from its zone table."""

    zones: int | None = key(kind=int)
    bound_breaks: int | None = key(kind=int)
    counts: dict | None = key(kind=dict)  # per count: mean, min, max
    share_within_10pct_of_target: dict | None = key(kind=dict)
    polsby_popper: dict | None = key(kind=dict)  # median, p10, p90
    within_spread: dict | None = key(kind=dict)
    extra: dict = extra()


@dataclass
class BoundBreak(Part):
    """One zone outside its bounds."""

    tier: str = key(need=REQUIRED, default="")
    zone: str = key(need=REQUIRED, default="")
    fence: str | None = key(need=WRITTEN)
    breaks: str | None = key(need=WRITTEN)  # what is out of bounds, in words
    locked: bool | None = key(kind=bool)  # set where a lock file is given
    extra: dict = extra()


@dataclass
class ProofEntry(Part):
    """Why one fence's breaks could not be avoided (or that it could not be decided)."""

    tier: str | None = key(need=WRITTEN)
    fence: str | None = key(need=WRITTEN)
    kind: str | None = key(need=WRITTEN)  # "arithmetic", "cp-sat" or "lock"
    status: str | None = key(need=WRITTEN)
    text: str | None = key(need=WRITTEN)
    floors: list | None = key(kind=list)  # the highest floor per count
    extra: dict = extra()


@dataclass
class RepairPart(Part):
    """An audit's repair: its method, whether its moves are proven fewest, where it is."""

    method: str | None = key(need=WRITTEN)
    status: str | None = key(need=WRITTEN)
    proven_fewest: bool | None = key(need=WRITTEN, kind=bool)
    moves: int | None = key(need=WRITTEN, kind=int)
    repaired_lookup_passes: bool | None = key(need=WRITTEN, kind=bool)
    moved_per_tier: dict | None = key(kind=dict)
    folder: str | None = key()
    zones: dict | None = key(kind=dict)  # per tier, what the repair does to each zone it touches
    breaks_left: int | None = key(kind=int)  # what the repaired hierarchy still breaks
    breaks_left_forced: int | None = key(kind=int)  # of them, proven forced (a proof, a lock)
    extra: dict = extra()


# ------------------------------------------------------------------ sweep


@dataclass
class VaryAxis(Part):
    keys: list = key(need=WRITTEN, kind=list, factory=list)
    values: list = key(need=WRITTEN, kind=list, factory=list)
    extra: dict = extra()


@dataclass
class InvalidVariant(Part):
    variant: int | None = key(need=WRITTEN, kind=int)
    name: str | None = key(need=WRITTEN)
    problem: str | None = key(need=WRITTEN)
    extra: dict = extra()


@dataclass
class SweepPart(Part):
    vary: list[VaryAxis] = key(need=WRITTEN, of=VaryAxis, shape="list", factory=list)
    variants: list = key(need=WRITTEN, kind=list, factory=list)  # sweep.csv's rows
    invalid: list[InvalidVariant] = key(need=WRITTEN, of=InvalidVariant, shape="list", factory=list)
    extra: dict = extra()

    @property
    def varied(self) -> list[str]:
        return [str(k) for axis in self.vary for k in axis.keys]
