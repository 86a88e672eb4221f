"""MCMC kernels for exposed models, usable alone or as blocks of NumPyro's ``Gibbs``."""

from zhat.kernels._shell import BlockState, ModelKernel
from zhat.kernels.elliptical_slice import EllipticalSlice, EllipticalSliceInfo
from zhat.kernels.mcmc import MCMC
from zhat.kernels.pseudo_marginal_gibbs import PseudoMarginalGibbs, pseudo_marginal_gibbs
from zhat.kernels.pseudo_marginal_mh import PseudoMarginalMH, PseudoMarginalMHInfo
from zhat.kernels.slice import Slice, SliceInfo

__all__ = [
    "MCMC",
    "BlockState",
    "EllipticalSlice",
    "EllipticalSliceInfo",
    "ModelKernel",
    "PseudoMarginalGibbs",
    "PseudoMarginalMH",
    "PseudoMarginalMHInfo",
    "Slice",
    "SliceInfo",
    "pseudo_marginal_gibbs",
]
