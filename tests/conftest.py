"""Test configuration: two host devices (for chain_method="parallel"), 64-bit floats, and silent
rank promotion made an error, before JAX initialises its backend."""

import numpyro

numpyro.set_host_device_count(2)
numpyro.enable_x64()

import jax  # noqa: E402
import pytest  # noqa: E402

jax.config.update("jax_numpy_rank_promotion", "raise")


@pytest.fixture
def key():
    """A fixed PRNG key; tests derive others with fold_in."""
    return jax.random.key(20261201)
