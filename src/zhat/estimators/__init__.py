"""Published estimators of intractable factors, one module each (see each module's docstring)."""

from zhat.estimators._reference import maximum_pseudo_likelihood
from zhat.estimators.auxiliary import multiple_auxiliary, single_auxiliary
from zhat.estimators.importance import importance_sampling

__all__ = [
    "importance_sampling",
    "maximum_pseudo_likelihood",
    "multiple_auxiliary",
    "single_auxiliary",
]
