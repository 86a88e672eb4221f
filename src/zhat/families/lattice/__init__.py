"""Lattice and map models: Ising, autologistic and Potts families with their samplers."""

from zhat.families.lattice.graph import Neighbours, from_adjacency, grid
from zhat.families.lattice.models import autologistic, ising, potts
from zhat.families.lattice.perfect import coupling_from_the_past
from zhat.families.lattice.spin_sweep import gibbs_sweeps
from zhat.families.lattice.sweeps import (
    heat_bath_sweep,
    neighbour_sum,
    potts_gibbs_sweeps,
    swendsen_wang,
)

__all__ = [
    "Neighbours",
    "autologistic",
    "coupling_from_the_past",
    "from_adjacency",
    "gibbs_sweeps",
    "grid",
    "heat_bath_sweep",
    "ising",
    "neighbour_sum",
    "potts",
    "potts_gibbs_sweeps",
    "swendsen_wang",
]
