"""MCMC kernels for exposed models, usable alone or as blocks of NumPyro's ``Gibbs``."""

from zhat.kernels._shell import BlockState, ModelKernel
from zhat.kernels.elliptical_slice import EllipticalSlice, EllipticalSliceInfo
from zhat.kernels.exchange import DoubleMetropolisHastings, Exchange, ExchangeInfo
from zhat.kernels.mcmc import MCMC
from zhat.kernels.noise_refresh import BlockRefresh, IndependentRefresh, RefreshInfo
from zhat.kernels.pseudo_marginal_gibbs import PseudoMarginalGibbs, pseudo_marginal_gibbs
from zhat.kernels.pseudo_marginal_mh import PseudoMarginalMH, PseudoMarginalMHInfo
from zhat.kernels.random_walk import RandomWalk
from zhat.kernels.slice import Slice, SliceInfo

__all__ = [
    "MCMC",
    "BlockRefresh",
    "BlockState",
    "DoubleMetropolisHastings",
    "EllipticalSlice",
    "EllipticalSliceInfo",
    "Exchange",
    "ExchangeInfo",
    "IndependentRefresh",
    "ModelKernel",
    "PseudoMarginalGibbs",
    "PseudoMarginalMH",
    "PseudoMarginalMHInfo",
    "RandomWalk",
    "RefreshInfo",
    "Slice",
    "SliceInfo",
    "pseudo_marginal_gibbs",
]
