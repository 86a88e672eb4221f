"""Point estimation with Optax: maximum pseudo-likelihood, stochastic-approximation and Monte
Carlo maximum likelihood (or MAP), standard errors from the simulated Fisher information, and
log Z along a path of parameters."""

from zhat.fit.fisher import FisherInformation, fisher_information
from zhat.fit.log_partition import (
    AnnealedLogZ,
    PathLogZ,
    annealed_log_z,
    concentrated_grid,
    log_likelihood,
    path_sampling_log_z,
    rule_weights,
)
from zhat.fit.monte_carlo import maximum_likelihood, monte_carlo_likelihood
from zhat.fit.pseudo_likelihood import PseudoLikelihoodFit, pseudo_likelihood
from zhat.fit.result import LikelihoodFit
from zhat.fit.stochastic import stochastic_approximation
from zhat.fit.tuning import (
    DrawsTuning,
    FactorEstimate,
    chain_inits,
    factor_estimate,
    reference_at,
    tune_num_draws,
)

__all__ = [
    "AnnealedLogZ",
    "DrawsTuning",
    "FactorEstimate",
    "FisherInformation",
    "LikelihoodFit",
    "PathLogZ",
    "PseudoLikelihoodFit",
    "annealed_log_z",
    "chain_inits",
    "concentrated_grid",
    "factor_estimate",
    "fisher_information",
    "log_likelihood",
    "maximum_likelihood",
    "monte_carlo_likelihood",
    "path_sampling_log_z",
    "pseudo_likelihood",
    "reference_at",
    "rule_weights",
    "stochastic_approximation",
    "tune_num_draws",
]
