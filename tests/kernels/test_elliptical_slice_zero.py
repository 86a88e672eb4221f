"""Elliptical slice sampling at a point of zero likelihood: it stays there instead of shrinking
its bracket forever (a noise value whose estimate came out 0, as a perfect draw that did not
coalesce gives, has log likelihood -inf, and so has the slice level)."""

import subprocess
import sys
import textwrap

CODE = textwrap.dedent(
    """
    import jax, jax.numpy as jnp
    from zhat.kernels.elliptical_slice import build_kernel

    init, step = build_kernel(["u", "w"])
    u0 = {"u": jnp.arange(3.0), "w": jnp.ones(2)}

    def loglik(z):  # zero likelihood wherever u[0] < 0.5, so at u0; w is free
        return jnp.where(z["u"][0] < 0.5, -jnp.inf, -jnp.sum(z["w"] ** 2))

    state = init(u0, loglik)
    new, info = jax.jit(lambda k, s: step(k, s, loglik))(jax.random.key(0), state)
    assert bool(jnp.all(new.z["u"] == u0["u"])), new.z
    assert bool(jnp.all(new.z["w"] == u0["w"])), new.z
    assert info.subiter.tolist() == [0, 0], info
    # from a point of positive likelihood the move still moves
    start = init({"u": jnp.ones(3), "w": jnp.ones(2)}, loglik)
    moved, info = step(jax.random.key(1), start, loglik)
    assert bool(jnp.isfinite(moved.logdensity)) and int(info.subiter[0]) >= 1
    print("ok")
    """
)


def test_zero_likelihood_point_is_kept_not_looped_on():
    # in a child process with a time limit: the failure this guards against is a hang
    done = subprocess.run([sys.executable, "-c", CODE], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().endswith("ok")
