"""speed: move throughput of the engine's compiled kernels against plain implementations.

One instance (a clustered Voronoi tessellation of about 5,000 cells, one fence, persons
bounds letting zones hold 3-6 cells), one start labelling (zones grown breadth-first from
random seeds, so many zones break a bound and many moves improve), and one fixed random
sequence of candidate moves (unit, target zone), drawn once from the start labelling: a
unit on a zone edge and the zone of one of its neighbours there.

Each implementation takes the moves in order and, for each: skips it when the unit is
already in the target zone or no longer touches it; checks that the donor zone stays
non-empty and connected without the unit; computes the change of (bound breaks,
objective); and applies the move when it improves (fewer breaks, or as many and a lower
objective). All three make the same decisions and end on the same labelling; the run
checks that.

- compiled: a small njit driver calling the engine's kernels (`search.moves` and `search.kernels`:
  unit_links, donor_ok, move_values, apply_move, better) on the engine's `ZoneState`;
- plain Python: the same algorithm with lists and dicts, incremental per-zone sums, and
  a breadth-first connectivity test, no numba and no numpy in the loop;
- naive AZP: networkx connectivity (`is_connected` on the donor zone's subgraph) and the
  full objective recomputed with `measures.score` for every move (on a prefix of the
  sequence: it is slow; rates are per move).

Goals: compiled >= 100 x naive and >= 15 x plain Python, in moves per second measured in
one run. numba's first compile (empty cache) is timed apart in a child process.
"""

from __future__ import annotations

import math
import subprocess
import sys
import tempfile
import time
from collections import deque
from pathlib import Path

import numpy as np
from numba import njit

from benchmarks.common import Clock, code_snapshot, frame_problem, md_table, write_results
from zonedesign import measures
from zonedesign.records import Problem
from zonedesign.search import kernels as K
from zonedesign.search import moves as KM

NAME = "speed"
TITLE = "speed (compiled move loop vs plain Python vs naive AZP)"
GOAL_NAIVE = 100.0
GOAL_PLAIN = 15.0
EPS = 1e-12  # the engine's tolerance (kernels.EPS_BRK / EPS_OBJ)

# outcome codes per move
SKIPPED, DISCONNECTS, REJECTED, APPLIED = 0, 1, 2, 3


# ---------------------------------------------------------------- instance and moves


def speed_instance(n: int = 5000, seed: int = 21) -> Problem:
    from zonedesign.demo.synthetic import voronoi_tessellation

    gdf = voronoi_tessellation(n, seed, clustered=True, n_fences=1)
    return frame_problem(gdf, "persons", ("attr_a", "attr_b"), "persons", (3.0, 6.0))


def start_labelling(problem: Problem, units_per_zone: float = 4.5, seed: int = 0) -> np.ndarray:
    """Zones grown breadth-first, one layer at a time, from random seed units (0..k-1)."""
    rng = np.random.default_rng(seed)
    n = problem.n
    k = max(1, int(round(n / units_per_zone)))
    labels = np.full(n, -1, dtype=np.int64)
    seeds = rng.choice(n, size=k, replace=False)
    labels[seeds] = np.arange(k)
    frontier = list(seeds)
    g = problem.graph
    while frontier:
        rng.shuffle(frontier)
        nxt = []
        for u in frontier:
            for v in g.neighbours(u):
                if labels[v] < 0:
                    labels[v] = labels[u]
                    nxt.append(int(v))
        frontier = nxt
    # units unreachable from any seed (other components) get zones of their own
    for u in np.flatnonzero(labels < 0):
        labels[u] = labels.max() + 1
    return measures.compact_labels(labels)[0]


def move_sequence(problem: Problem, labels: np.ndarray, count: int, seed: int = 1) -> np.ndarray:
    """(count, 2) int64: a zone-edge unit and the zone of one of its neighbours elsewhere."""
    rng = np.random.default_rng(seed)
    g = problem.graph
    rows = np.repeat(np.arange(g.n), np.diff(g.indptr))
    cross = np.flatnonzero(labels[rows] != labels[g.indices])  # directed edges between zones
    pick = cross[rng.integers(0, cross.shape[0], size=count)]
    return np.stack([rows[pick], labels[g.indices[pick]]], axis=1).astype(np.int64)


# ---------------------------------------------------------------- compiled


@njit(cache=True)
def compiled_moves(st, moves, outcome):
    """Evaluate moves in order with the engine's kernels; returns the number applied."""
    applied = 0
    labels = st.labels
    for t in range(moves.shape[0]):
        i = moves[t, 0]
        b = moves[t, 1]
        a = labels[i]
        if a == b:
            outcome[t] = 0
            continue
        la, nda, nt = KM.unit_links(st, i, a)
        lb = -1.0
        for q in range(nt):
            if st.ztouch[q] == b:
                lb = st.zacc[b]
        if lb < 0.0:
            outcome[t] = 0
            continue
        if not KM.donor_ok(st, i):
            outcome[t] = 1
            continue
        ca, ba, cb, bb = KM.move_values(st, i, a, b, la, lb)
        db = (ba + bb) - (st.brk[a] + st.brk[b])
        do = (ca + cb) - (st.cost[a] + st.cost[b])
        if K.better(db, do):
            KM.apply_move(st, i, b, la, lb)
            outcome[t] = 3
            applied += 1
        else:
            outcome[t] = 2
    return applied


def run_compiled(problem: Problem, labels: np.ndarray, moves: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """(final labels, outcome per move, seconds of the move loop alone)."""
    from zonedesign.search.state import ZoneState

    state = ZoneState(problem, labels.copy())
    outcome = np.zeros(moves.shape[0], dtype=np.int64)
    with Clock() as c:
        compiled_moves(state.st, moves, outcome)
    return state.labels(), outcome, c.seconds


# ---------------------------------------------------------------- plain Python


class PlainState:
    """Per-zone sums in Python lists, updated move by move (the engine's formulas)."""

    def __init__(self, problem: Problem, labels: np.ndarray):
        g = problem.graph
        n = problem.n
        self.adj = [
            list(zip(g.indices[g.indptr[i] : g.indptr[i + 1]].tolist(), g.length[g.indptr[i] : g.indptr[i + 1]].tolist()))
            for i in range(n)
        ]
        self.counts = np.asarray(problem.counts, dtype=np.float64).reshape(n, -1).tolist()
        self.x = np.asarray(problem.attrs, dtype=np.float64).reshape(n, -1).tolist()
        self.w = np.asarray(problem.weight, dtype=np.float64).tolist()
        self.q = [wi * sum(v * v for v in xi) for wi, xi in zip(self.w, self.x)]
        self.area = np.asarray(problem.area, dtype=np.float64).tolist()
        self.perim = np.asarray(problem.perimeter, dtype=np.float64).tolist()
        b = problem.bounds
        self.lo = [float(v) for v in b.lo]
        self.hi = [float(v) for v in b.hi]
        self.target = [float(v) if math.isfinite(v) else None for v in b.target]
        norm = measures.normalisers(problem)
        tw = problem.term_weights
        self.c_size = tw.get("size", 0.0) / norm["size"]
        self.c_hom = tw.get("homogeneity", 0.0) / norm["homogeneity"]
        self.c_comp = tw.get("compactness", 0.0) / norm["compactness"]
        if problem.homogeneity != "ssd" or problem.compactness != "polsby" or problem.previous is not None:
            raise ValueError("the plain benchmark implements ssd homogeneity and polsby compactness only")
        self.labels = [int(v) for v in labels]
        k = max(self.labels) + 1
        nc, na = len(self.counts[0]), len(self.x[0])
        self.members = [set() for _ in range(k)]
        self.csum = [[0.0] * nc for _ in range(k)]
        self.W = [0.0] * k
        self.npos = [0] * k
        self.S = [[0.0] * na for _ in range(k)]
        self.Q = [0.0] * k
        self.A = [0.0] * k
        self.P = [0.0] * k
        for i, z in enumerate(self.labels):
            # boundary shared with members added so far: each internal edge counted once
            shared = sum(length for j, length in self.adj[i] if j < i and self.labels[j] == z)
            self.members[z].add(i)
            self._add(z, i, +1.0, shared)
        self.cost = [0.0] * k
        self.brk = [0.0] * k
        for z in range(k):
            self.cost[z], self.brk[z] = self._value(self.csum[z], self.npos[z], self.W[z], self.S[z], self.Q[z], self.A[z], self.P[z])

    def _add(self, z: int, i: int, sign: float, shared: float) -> None:
        cs = self.csum[z]
        for c, v in enumerate(self.counts[i]):
            cs[c] += sign * v
        wi = self.w[i]
        self.W[z] += sign * wi
        if wi > 0.0:
            self.npos[z] += int(sign)
        s = self.S[z]
        for t, v in enumerate(self.x[i]):
            s[t] += sign * wi * v
        self.Q[z] += sign * self.q[i]
        self.A[z] += sign * self.area[i]
        self.P[z] += sign * (self.perim[i] - 2.0 * shared)

    def _value(self, cs, npos, W, S, Q, A, P) -> tuple[float, float]:
        size = 0.0
        brk = 0.0
        for c, v in enumerate(cs):
            t = self.target[c]
            if t is not None:
                size += abs(v - t) / t
            lo, hi = self.lo[c], self.hi[c]
            if math.isfinite(lo) and v < lo:
                brk += (lo - v) / max(abs(lo), 1.0)
            if math.isfinite(hi) and v > hi:
                brk += (v - hi) / max(abs(hi), 1.0)
        hom = max(Q - sum(v * v for v in S) / W, 0.0) if npos > 0 else 0.0
        comp = 1.0 - 4.0 * math.pi * A / (P * P) if P > 0.0 else 1.0
        return self.c_size * size + self.c_hom * hom + self.c_comp * comp, brk

    def _value_with(self, z: int, i: int, sign: float, shared: float) -> tuple[float, float]:
        wi = self.w[i]
        cs = [v + sign * u for v, u in zip(self.csum[z], self.counts[i])]
        S = [v + sign * wi * u for v, u in zip(self.S[z], self.x[i])]
        npos = self.npos[z] + (int(sign) if wi > 0.0 else 0)
        return self._value(
            cs, npos, self.W[z] + sign * wi, S, self.Q[z] + sign * self.q[i],
            self.A[z] + sign * self.area[i], self.P[z] + sign * (self.perim[i] - 2.0 * shared),
        )

    def donor_connected(self, i: int, a: int) -> bool:
        """Zone a without i: non-empty and connected (breadth-first search)."""
        rest = self.members[a]
        if len(rest) <= 1:
            return False
        lab = self.labels
        want = {j for j, _ in self.adj[i] if lab[j] == a}
        if len(want) <= 1:
            return True
        start = next(iter(want))
        seen = {start, i}
        queue = deque([start])
        found = 1
        while queue:
            u = queue.popleft()
            for v, _ in self.adj[u]:
                if v in seen or lab[v] != a:
                    continue
                seen.add(v)
                if v in want:
                    found += 1
                    if found == len(want):
                        return True
                queue.append(v)
        return found == len(want)

    def evaluate(self, i: int, b: int) -> int:
        lab = self.labels
        a = lab[i]
        if a == b:
            return SKIPPED
        la = 0.0
        lb = 0.0
        touches = False
        for j, length in self.adj[i]:
            lj = lab[j]
            if lj == a:
                la += length
            elif lj == b:
                lb += length
                touches = True
        if not touches:
            return SKIPPED
        if not self.donor_connected(i, a):
            return DISCONNECTS
        ca, ba = self._value_with(a, i, -1.0, la)
        cb, bb = self._value_with(b, i, +1.0, lb)
        db = (ba + bb) - (self.brk[a] + self.brk[b])
        do = (ca + cb) - (self.cost[a] + self.cost[b])
        if not (db < -EPS or (db <= EPS and do < -EPS)):
            return REJECTED
        self._add(a, i, -1.0, la)
        self._add(b, i, +1.0, lb)
        self.members[a].discard(i)
        self.members[b].add(i)
        lab[i] = b
        self.cost[a], self.brk[a] = ca, ba
        self.cost[b], self.brk[b] = cb, bb
        return APPLIED


def run_plain(problem: Problem, labels: np.ndarray, moves: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    state = PlainState(problem, labels)
    seq = moves.tolist()
    outcome = [0] * len(seq)
    with Clock() as c:
        for t, (i, b) in enumerate(seq):
            outcome[t] = state.evaluate(i, b)
    return np.array(state.labels, dtype=np.int64), np.array(outcome, dtype=np.int64), c.seconds


# ---------------------------------------------------------------- naive AZP


def run_naive(problem: Problem, labels: np.ndarray, moves: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """networkx connectivity and a full `measures.score` per move."""
    import networkx as nx

    i_, j_, _ = problem.graph.edges()
    G = nx.Graph()
    G.add_nodes_from(range(problem.n))
    G.add_edges_from(zip(i_.tolist(), j_.tolist()))
    labels = labels.copy()
    outcome = np.zeros(moves.shape[0], dtype=np.int64)
    with Clock() as c:
        current = measures.score(problem, labels)
        for t, (i, b) in enumerate(moves.tolist()):
            a = labels[i]
            if a == b or not any(labels[j] == b for j in G.neighbors(i)):
                outcome[t] = SKIPPED
                continue
            rest = [u for u in np.flatnonzero(labels == a).tolist() if u != i]
            if not rest or not nx.is_connected(G.subgraph(rest)):
                outcome[t] = DISCONNECTS
                continue
            labels[i] = b
            after = measures.score(problem, labels)
            db = after.breaks - current.breaks
            do = after.total - current.total
            if db < -EPS or (db <= EPS and do < -EPS):
                current = after
                outcome[t] = APPLIED
            else:
                labels[i] = a
                outcome[t] = REJECTED
    return labels, outcome, c.seconds


# ---------------------------------------------------------------- first compile

_COMPILE_SCRIPT = """
import time, sys
t0 = time.perf_counter()
import numpy as np
from benchmarks.speed import speed_instance, start_labelling, move_sequence, run_compiled
from zonedesign.search.engine import solve
p = speed_instance(200, seed=3)
lab = start_labelling(p)
t1 = time.perf_counter()
solve(p, seed=1, method="descent", time_limit=600)
t2 = time.perf_counter()
run_compiled(p, lab, move_sequence(p, lab, 100))
t3 = time.perf_counter()
print(f"{t1 - t0:.3f} {t2 - t1:.3f} {t3 - t2:.3f}")
"""


def first_compile() -> dict:
    """Seconds for the first descent solve and first driver call: empty cache, then warm."""
    out = {}
    with tempfile.TemporaryDirectory(prefix="zd-numba-") as tmp:
        # a copy of the code with an empty numba cache of its own: edits to the working
        # tree between the two children cannot make the second compile again
        env = code_snapshot(Path(tmp))
        for label in ("cold", "warm"):
            done = subprocess.run([sys.executable, "-c", _COMPILE_SCRIPT], env=env, capture_output=True, text=True, cwd=tmp, timeout=1800)
            if done.returncode != 0:
                out[f"{label}_error"] = (done.stderr or done.stdout).strip().splitlines()[-1:]
                continue
            imp, eng, drv = (float(v) for v in done.stdout.split()[-3:])
            out[f"{label}_import_s"] = imp
            out[f"{label}_first_solve_s"] = eng
            out[f"{label}_driver_s"] = drv
    return out


# ---------------------------------------------------------------- the benchmark


def main(quick: bool = False, folder: Path | None = None, log=print) -> dict:
    t0 = time.perf_counter()
    n_moves = 100_000 if quick else 400_000
    n_naive = 150 if quick else 600
    log("  first compile (empty numba cache, then warm) ...")
    compile_times = first_compile()
    problem = speed_instance(5000)
    labels = start_labelling(problem)
    moves = move_sequence(problem, labels, n_moves)
    k = int(labels.max()) + 1
    # warm the driver and kernels on a copy (compile or cache load is timed apart above)
    run_compiled(problem, labels, moves[:1000])

    lab_c, out_c, s_c = run_compiled(problem, labels, moves)
    log(f"  compiled: {n_moves / s_c:,.0f} moves/s")
    lab_p, out_p, s_p = run_plain(problem, labels, moves)
    log(f"  plain Python: {n_moves / s_p:,.0f} moves/s")
    lab_n, out_n, s_n = run_naive(problem, labels, moves[:n_naive])
    log(f"  naive: {n_naive / s_n:,.1f} moves/s")
    # the compiled loop on the naive prefix, for the agreement check (and its own rate)
    lab_cn, out_cn, s_cn = run_compiled(problem, labels, moves[:n_naive])

    rate_c, rate_p, rate_n = n_moves / s_c, n_moves / s_p, n_naive / s_n
    agree_plain = bool((out_c == out_p).all() and (lab_c == lab_p).all())
    agree_naive = bool((out_cn == out_n).all() and (lab_cn == lab_n).all())
    rows = []
    for impl, rate, m, out, s in (
        ("compiled (engine kernels)", rate_c, n_moves, out_c, s_c),
        ("plain Python", rate_p, n_moves, out_p, s_p),
        ("naive AZP (networkx + measures.score)", rate_n, n_naive, out_n, s_n),
    ):
        rows.append(
            {
                "implementation": impl,
                "moves": m,
                "seconds": s,
                "moves_per_s": rate,
                "compiled_x_faster": rate_c / rate,
                "skipped": int((out == SKIPPED).sum()),
                "disconnecting": int((out == DISCONNECTS).sum()),
                "rejected": int((out == REJECTED).sum()),
                "applied": int((out == APPLIED).sum()),
            }
        )
    ratio_naive = rate_c / rate_n
    ratio_plain = rate_c / rate_p
    start = measures.score(problem, labels)
    end = measures.score(problem, lab_c)
    goals = (
        f"- compiled vs naive AZP: **{ratio_naive:,.0f} x** (goal >= {GOAL_NAIVE:.0f} x: "
        f"{'met' if ratio_naive >= GOAL_NAIVE else 'MISSED'})\n"
        f"- compiled vs plain Python: **{ratio_plain:,.1f} x** (goal >= {GOAL_PLAIN:.0f} x: "
        f"{'met' if ratio_plain >= GOAL_PLAIN else 'MISSED'})\n"
        f"- same decisions and final labelling: compiled = plain Python on all {n_moves:,} moves: "
        f"{'yes' if agree_plain else 'NO'}; compiled = naive on the first {n_naive:,}: "
        f"{'yes' if agree_naive else 'NO'}\n"
    )
    ct = compile_times
    compile_text = (
        "A child process with an empty `NUMBA_CACHE_DIR` times its first descent solve on a 200-cell "
        "instance (compiling every kernel the engine uses) and the first call of the benchmark's "
        "driver; a second child with the cache then filled times the same steps.\n\n"
        + md_table(
            [
                {
                    "cache": label,
                    "import + instance s": ct.get(f"{label}_import_s", math.nan),
                    "first solve s": ct.get(f"{label}_first_solve_s", math.nan),
                    "first driver call s": ct.get(f"{label}_driver_s", math.nan),
                }
                for label in ("cold", "warm")
            ]
        )
        + "".join(f"\n{key}: {val}\n" for key, val in ct.items() if key.endswith("error"))
    )
    sections = [
        ("Goals", goals),
        (
            "Throughput (one run; ratios are the figures to quote)",
            f"Instance: {problem.n:,} Voronoi cells, {problem.graph.n_edges:,} rook edges, start labelling "
            f"of {k:,} zones (objective {start.total:.4f}, breaks {start.breaks:.3f}; after the "
            f"full sequence {end.total:.4f}, breaks {end.breaks:.3f}).\n\n" + md_table(rows, digits=2),
        ),
        ("numba first compile", compile_text),
        ("Method", __doc__.split("\n\n", 1)[1]),
    ]
    summary = {
        "compiled_moves_per_s": rate_c,
        "plain_moves_per_s": rate_p,
        "naive_moves_per_s": rate_n,
        "ratio_naive": ratio_naive,
        "ratio_plain": ratio_plain,
        "agree_plain": agree_plain,
        "agree_naive": agree_naive,
        **compile_times,
    }
    csv_rows = rows + [{"implementation": f"summary: {key}", "moves_per_s": val if isinstance(val, float) else math.nan, "note": str(val)} for key, val in summary.items()]
    write_results(NAME, TITLE, csv_rows, sections, quick=quick, seconds=time.perf_counter() - t0, folder=folder)
    return summary
