"""Families with intractable normalizers, one sub-package each."""

from zhat.families import lattice

__all__ = ["lattice"]
