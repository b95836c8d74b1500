"""Area graphs: adjacency from polygons, links, fences, islands, collapsing a tier."""

from zonedesign.graph.adjacency import queen_graph, rook_graph, unmatched_contacts
from zonedesign.graph.build import build_graph
from zonedesign.graph.collapse import collapse, collapse_perimeter, collapse_values
from zonedesign.graph.components import (
    FenceComponents,
    Island,
    components,
    fence_components,
    islands,
)
from zonedesign.graph.links import add_links, fence_graph, read_links
from zonedesign.graph.tolerant import tolerant_graph

__all__ = [
    "FenceComponents",
    "Island",
    "add_links",
    "build_graph",
    "collapse",
    "collapse_perimeter",
    "collapse_values",
    "components",
    "fence_components",
    "fence_graph",
    "islands",
    "queen_graph",
    "read_links",
    "rook_graph",
    "tolerant_graph",
    "unmatched_contacts",
]
