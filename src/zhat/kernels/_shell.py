"""The thin NumPyro shell shared by zhat's kernels.

A zhat kernel is a pair of pure functions over a NamedTuple state,

    init(position, logdensity_fn) -> algorithm state
    step(rng_key, algorithm state, logdensity_fn) -> (algorithm state, info)

and this module wraps such a pair into a :class:`numpyro.infer.mcmc.MCMCKernel` that can run
alone under :class:`numpyro.infer.MCMC` or as a block of NumPyro's composable ``Gibbs``
(it implements ``refresh`` and ``wrap_model``). Positions are dicts of *unconstrained* site
values; ``init_params`` are *constrained* values (the convention of NumPyro's non-HMC blocks).
"""

from __future__ import annotations

import copy
from collections.abc import Callable, Sequence
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax import random
from numpyro.distributions.transforms import biject_to
from numpyro.handlers import seed
from numpyro.infer.gibbs import latent_sample_sites, prototype_trace
from numpyro.infer.mcmc import MCMCKernel
from numpyro.infer.util import constrain_fn, potential_energy, transform_fn
from numpyro.util import is_prng_key

Array = jax.Array
LogDensityFn = Callable[[dict[str, Array]], Array]


class BlockState(NamedTuple):
    """State of a zhat kernel.

    - **z** - dict of unconstrained values of the kernel's sites.
    - **logdensity** - the kernel's log density at ``z`` under the current conditioning.
    - **info** - diagnostics of the last step (an algorithm-specific NamedTuple).
    - **carry** - what the algorithm keeps between steps besides ``z`` (e.g. adaptation).
    - **rng_key** - random key for the next step.
    """

    z: dict[str, Array]
    logdensity: Array
    info: Any
    carry: Any
    rng_key: Array


def check_finite_if_concrete(value: Array, what: str) -> None:
    """Raise a clear error when a concrete initial log density is not finite."""
    try:
        ok = bool(jnp.all(jnp.isfinite(value)))
    except jax.errors.ConcretizationTypeError:
        return
    if not ok:
        raise ValueError(
            f"{what}: the log density at the initial point is {value}, not finite. Pass "
            "`init_params` inside the support (constrained values), or check the model's "
            "priors and data."
        )


class ModelKernel(MCMCKernel):
    """Shell around pure ``init``/``step`` functions; subclasses define the algorithm.

    Subclasses implement :meth:`_algorithm` returning ``(init, step)`` for the block's sites,
    and may override :meth:`_check_sites`, :meth:`_block_logdensity` and :meth:`_target`.
    """

    sample_field = "z"
    full_joint = True
    """Whether ``logdensity`` is the model's log joint of the constrained values plus
    :meth:`own_offset` (then a composite can hand a sibling's fresh log density on instead of
    evaluating the model again)."""

    def __init__(self, model: Callable) -> None:
        if not callable(model):
            raise TypeError(f"{type(self).__name__} needs a NumPyro model, got {model!r}.")
        self._model = model
        self._reset()

    def _reset(self) -> None:
        self._sites: tuple[str, ...] = ()
        self._transforms: dict[str, Any] = {}
        self._step_fn: Callable | None = None

    # --- hooks -------------------------------------------------------------------------
    def _check_sites(self, model_trace: dict[str, Any], sites: Sequence[str]) -> None:
        """Validate the block's sites against the prototype trace (raise a clear error)."""

    def _algorithm(self, model_trace: dict[str, Any], num_warmup: int) -> tuple[Callable, Callable]:
        raise NotImplementedError

    def _target(self, model_args: tuple, model_kwargs: dict | None) -> Any:
        """What the algorithm's pure functions receive; by default the log density function."""
        return self.logdensity_fn(model_args, model_kwargs)

    def _block_logdensity(
        self, model_args: tuple, model_kwargs: dict, full: LogDensityFn
    ) -> LogDensityFn:
        """The density the algorithm sees; by default the full log joint of the block."""
        return full

    # --- NumPyro interface ------------------------------------------------------------
    @property
    def model(self) -> Callable:
        return self._model

    @property
    def _sample_fn(self) -> Callable | None:
        # NumPyro's MCMC re-initialises a sampler whose `_sample_fn` is None even when given a
        # `post_warmup_state`; exposing the step function keeps warmup -> run continuous.
        return self._step_fn

    @property
    def default_fields(self) -> tuple[str, ...]:
        return ("z",)

    def logdensity_fn(self, model_args: tuple, model_kwargs: dict | None) -> LogDensityFn:
        """Log density of the block's unconstrained values under the given conditioning."""
        model_kwargs = {} if model_kwargs is None else model_kwargs
        model = seed(self._model, random.key(0))

        def full(z: dict[str, Array]) -> Array:
            return -potential_energy(model, model_args, model_kwargs, z)

        return self._block_logdensity(model_args, model_kwargs, full)

    def init(
        self,
        rng_key: Array,
        num_warmup: int,
        init_params: dict[str, Any] | None,
        model_args: tuple,
        model_kwargs: dict | None,
    ) -> BlockState:
        model_kwargs = {} if model_kwargs is None else dict(model_kwargs)
        vectorized = not is_prng_key(rng_key)
        first_key = rng_key[0] if vectorized else rng_key
        model_trace = prototype_trace(self._model, first_key, model_args, model_kwargs)
        sites = latent_sample_sites(model_trace)
        if not sites:
            raise ValueError(f"{type(self).__name__}: the model has no latent sites to sample.")
        discrete = [s for s in sites if model_trace[s]["fn"].support.is_discrete]
        if discrete:
            raise ValueError(
                f"{type(self).__name__} samples continuous sites only; {discrete} are "
                "discrete. Give them a discrete block (numpyro.infer.DiscreteGibbs)."
            )
        self._check_sites(model_trace, sites)
        self._sites = sites
        self._transforms = {s: biject_to(model_trace[s]["fn"].support) for s in sites}
        algo_init, algo_step = self._algorithm(model_trace, num_warmup)
        self._step_fn = algo_step
        target = self._target(model_args, model_kwargs)

        def init_one(key: Array) -> BlockState:
            key, key_trace = random.split(key)
            if init_params:
                missing = sorted(set(sites) - set(init_params))
                if missing:
                    raise ValueError(f"{type(self).__name__}: `init_params` lacks sites {missing}.")
                values = {s: jnp.asarray(init_params[s]) for s in sites}
            else:
                proto = prototype_trace(self._model, key_trace, model_args, model_kwargs)
                values = {s: proto[s]["value"] for s in sites}
            z = transform_fn(self._transforms, values, invert=True)
            algo_state = algo_init(z, target)
            return BlockState(z, algo_state.logdensity, algo_state.info, algo_state.carry, key)

        state = jax.vmap(init_one)(rng_key) if vectorized else init_one(rng_key)
        check_finite_if_concrete(state.logdensity, type(self).__name__)
        return state

    def sample(self, state: BlockState, model_args: tuple, model_kwargs: dict | None) -> BlockState:
        assert self._step_fn is not None, "`init` must be called before `sample`."
        target = self._target(model_args, model_kwargs)
        step = self._step_fn

        def one(state: BlockState) -> BlockState:
            key, key_step = random.split(state.rng_key)
            new, info = step(key_step, state, target)
            return BlockState(new.z, new.logdensity, info, new.carry, key)

        if not is_prng_key(state.rng_key):
            return jax.vmap(one)(state)
        return one(state)

    def own_offset(self, z: dict[str, Array]) -> Array:
        """``logdensity`` minus the log joint at ``z``: the log-Jacobian of the block's transforms
        from unconstrained to constrained values."""
        terms = [
            jnp.sum(transform.log_abs_det_jacobian(z[site], transform(z[site])))
            for site, transform in self._transforms.items()
        ]
        dtype = jnp.result_type(*[z[site] for site in self._transforms])
        return sum(terms, jnp.zeros((), dtype))

    def refresh(
        self, state: BlockState, model_args: tuple, model_kwargs: dict | None
    ) -> BlockState:
        """Recompute the cached log density at ``state.z`` for the new conditioning."""
        logdensity_fn = self.logdensity_fn(model_args, model_kwargs)
        return state._replace(logdensity=logdensity_fn(state.z))

    def wrap_model(self, wrapper: Callable) -> ModelKernel:
        kernel = copy.copy(self)
        kernel._model = wrapper(self._model)
        kernel._reset()
        return kernel

    def get_constrain_fn(self, model_args: tuple, model_kwargs: dict | None) -> Callable:
        transforms = self._transforms
        return lambda z: transform_fn(transforms, z)

    def postprocess_fn(self, model_args: tuple, model_kwargs: dict | None) -> Callable:
        model_kwargs = {} if model_kwargs is None else model_kwargs
        model = seed(self._model, random.key(0))
        return lambda z: constrain_fn(model, model_args, model_kwargs, z, return_deterministic=True)

    def get_diagnostics_str(self, state: BlockState) -> str:
        return ""

    def __getstate__(self) -> dict[str, Any]:
        state = self.__dict__.copy()
        state["_step_fn"] = None
        return state


class AlgorithmState(NamedTuple):
    """What an algorithm's pure functions return to the shell (``info`` only from ``init``)."""

    z: dict[str, Array]
    logdensity: Array
    info: Any = None
    carry: Any = None
