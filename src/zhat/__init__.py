"""zhat: Bayesian inference for models with intractable normalizing constants, on NumPyro.

Write a NumPyro model, mark the factor whose normalizer is intractable (an :func:`unnormalized`
family, or a latent block :func:`integrate_out`), choose an estimator from
:mod:`zhat.estimators`, wrap the model with :func:`expose` and run any kernel on the augmented
space, e.g. :func:`zhat.kernels.pseudo_marginal_gibbs`.
"""

from zhat import check, estimators, kernels
from zhat.kernels import MCMC
from zhat.model import (
    Estimator,
    Family,
    IntractableFactor,
    NotExposedError,
    expose,
    integrate_out,
    noise_sites,
    unnormalized,
)
from zhat.xla_options import compile_small_loops

__version__ = "0.1.0"

__all__ = [
    "MCMC",
    "Estimator",
    "Family",
    "IntractableFactor",
    "NotExposedError",
    "check",
    "compile_small_loops",
    "estimators",
    "expose",
    "integrate_out",
    "kernels",
    "noise_sites",
    "unnormalized",
]
