"""Families with intractable normalizers, one sub-package each."""

from zhat.families import lattice, network

__all__ = ["lattice", "network"]
