"""Elliptical slice sampling where its bracket cannot close on an acceptable point: at a point of
zero likelihood (an estimate of 0, as a perfect draw that did not coalesce gives) and where the
stored log likelihood exceeds the value recomputed at the same point (rounding, with the level
within rounding of it). The move stops after its evaluation budget and keeps the value, instead
of looping forever; elsewhere it moves as before (the Geweke tests check its invariance)."""

import subprocess
import sys
import textwrap

import pytest

from zhat.kernels.elliptical_slice import build_kernel

CODE = textwrap.dedent(
    """
    import jax, jax.numpy as jnp
    from zhat.kernels.elliptical_slice import build_kernel

    init, step = build_kernel(["u", "w"], max_evaluations=50)
    step = jax.jit(step, static_argnums=2)
    u0 = {"u": jnp.arange(3.0), "w": jnp.ones(2)}

    def nowhere(z):  # zero likelihood everywhere
        return jnp.full((), -jnp.inf)

    new, info = step(jax.random.key(0), init(u0, nowhere), nowhere)
    assert all(bool(jnp.all(new.z[s] == u0[s])) for s in u0), new.z
    assert info.subiter.tolist() == [50, 50], info

    def flat(z):  # constant likelihood: the stored value below is 1 above what it recomputes
        return jnp.zeros(())

    state = init(u0, flat)._replace(logdensity=jnp.ones(()))
    stuck = 0
    for k in range(20):
        new, info = step(jax.random.key(k), state, flat)
        assert bool(jnp.all(info.subiter <= 50)), info
        stuck += int(info.subiter[0] == 50)
    assert stuck > 0  # level above every value: P = 1 - e^-1 per move, the budget was hit

    def gauss(z):  # a positive likelihood: the move moves, in few evaluations
        return -0.5 * jnp.sum(z["w"] ** 2) - 0.5 * jnp.sum(z["u"] ** 2)

    moved, info = step(jax.random.key(1), init(u0, gauss), gauss)
    assert bool(jnp.all(moved.z["u"] != u0["u"])) and bool(jnp.all(info.subiter < 50)), info
    assert bool(jnp.isclose(moved.logdensity, gauss(moved.z))), moved
    print("ok")
    """
)


def test_move_stops_at_its_budget_where_no_point_is_acceptable():
    # in a child process with a time limit: the failure this guards against is a hang
    done = subprocess.run([sys.executable, "-c", CODE], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().endswith("ok")


def test_bad_budget_is_refused():
    with pytest.raises(ValueError, match="at least 1"):
        build_kernel(["u"], max_evaluations=0)
    with pytest.raises(TypeError, match="whole number"):
        build_kernel(["u"], max_evaluations=2.5)
