"""Random graph models: exponential-family models of an undirected graph, with their samplers."""

from zhat.families.network.graph import adjacency, check_adjacency, node_values
from zhat.families.network.models import dyad_design, model
from zhat.families.network.statistics import (
    Statistic,
    change_statistics,
    covariate,
    edges,
    same_group,
    stars,
    statistics,
    triangles,
    weighted_degrees,
    weighted_shared_partners,
)

__all__ = [
    "Statistic",
    "adjacency",
    "change_statistics",
    "check_adjacency",
    "covariate",
    "dyad_design",
    "edges",
    "model",
    "node_values",
    "same_group",
    "stars",
    "statistics",
    "triangles",
    "weighted_degrees",
    "weighted_shared_partners",
]
