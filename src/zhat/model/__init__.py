"""The modelling layer: intractable factors, their estimators' interface, and ``expose``."""

from zhat.model.degeneracy import DegenerateModelError
from zhat.model.expose import (
    ESTIMATE_SUFFIX,
    INFER_KEY,
    NOISE_SUFFIX,
    EstimatedFactor,
    FactorInfo,
    estimate_sites,
    expose,
    is_noise_site,
    noise_sites,
)
from zhat.model.factor import Estimator, IntractableFactor, NotExposedError
from zhat.model.integrate import IntegratedFactor, integrate_out
from zhat.model.potential import PotentialOnly, as_potential, potential_sites
from zhat.model.unnormalized import (
    Degeneracy,
    Family,
    PerfectSampler,
    Transition,
    UnnormalizedDistribution,
    unnormalized,
)

__all__ = [
    "Degeneracy",
    "DegenerateModelError",
    "ESTIMATE_SUFFIX",
    "INFER_KEY",
    "NOISE_SUFFIX",
    "EstimatedFactor",
    "Estimator",
    "FactorInfo",
    "Family",
    "IntegratedFactor",
    "IntractableFactor",
    "NotExposedError",
    "PotentialOnly",
    "PerfectSampler",
    "Transition",
    "UnnormalizedDistribution",
    "as_potential",
    "estimate_sites",
    "expose",
    "integrate_out",
    "is_noise_site",
    "noise_sites",
    "potential_sites",
    "unnormalized",
]
