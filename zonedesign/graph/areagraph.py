"""The graph of the areas as the rules state it: adjacency, islands, then declared links.

`prepare` builds it once per run; a sweep builds it again for each variant whose `graph.*`
keys differ, so every variant is designed and audited on its own graph.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from zonedesign.graph.build import build_graph
from zonedesign.graph.components import Island, islands
from zonedesign.graph.links import add_links, read_links
from zonedesign.records import Areas, Graph
from zonedesign.rules import GraphRules


@dataclass(frozen=True)
class AreaGraph:
    graph: Graph  # adjacency plus declared links, across fences too
    islands: list[Island]  # found before links are added, so each one is reported
    links: int  # declared links added
    linked: frozenset[str]  # ids of areas at either end of a link


def area_graph(geometry, areas: Areas, graph_rules: GraphRules, *, notes: list[str] | None = None) -> AreaGraph:
    """Adjacency of `geometry` under `graph_rules`, its islands, then the declared links."""
    graph = build_graph(geometry, graph_rules, notes=notes)
    found = islands(graph, areas.fence, geometry, areas.ids)
    if graph_rules.links is None:
        return AreaGraph(graph=graph, islands=found, links=0, linked=frozenset())
    li, lj = read_links(graph_rules.links, areas.ids)
    linked = frozenset(areas.ids[li].tolist()) | frozenset(areas.ids[lj].tolist())
    return AreaGraph(graph=add_links(graph, li, lj), islands=found, links=int(np.asarray(li).shape[0]), linked=linked)
