"""Published estimators of intractable factors, one module each (see each module's docstring)."""

from zhat.estimators.importance import importance_sampling

__all__ = ["importance_sampling"]
