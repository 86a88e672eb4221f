"""The XLA option that compiles small loops whole: setting it, refusing it once JAX has started,
and the toggle samplers making the same draws with it as without it (it changes how XLA runs a
loop, never what it computes)."""

import json
import os
import subprocess
import sys
import textwrap

import jax.numpy as jnp
import numpy as np
import pytest

from zhat import xla_options

# a 30-node graph, 3000 toggles per call: the loop body touches a few kilobytes, over XLA's
# default threshold (1024 bytes) and under ours
DRAW = textwrap.dedent(
    """
    import jax, jax.numpy as jnp
    from zhat.families import network
    from zhat.families.network.toggles import toggle_simulators

    def draws():
        n = 30
        upper = jnp.triu(jax.random.bernoulli(jax.random.key(3), 0.15, (n, n)), k=1)
        a = (upper + upper.T).astype(float)
        stats = (network.edges(), network.weighted_degrees(0.5),
                 network.weighted_shared_partners(0.5))
        params = {"coefficients": jnp.asarray([-2.0, 0.3, 0.4])}
        out, whole = {}, {}
        for name, sim in toggle_simulators(n, stats, 3000).items():
            z = jax.random.normal(jax.random.key(4), sim.noise_shape(a))
            compiled = jax.jit(sim.step).lower(params, a, z).compile()
            whole[name] = "xla_cpu_small_call" in compiled.as_text()
            out[name] = compiled(params, a, z).astype(int).tolist()
        return out, whole
    """
)


def test_merged_flags_keep_other_flags_and_options():
    flags = "--xla_force_host_platform_device_count=2 --xla_backend_extra_options=a=1,b"
    merged = xla_options.merged_flags(flags, 4096)
    assert merged.split() == [
        "--xla_force_host_platform_device_count=2",
        "--xla_backend_extra_options=a=1,b,xla_cpu_small_while_loop_byte_threshold=4096",
    ]
    # setting it again replaces the value, still one entry
    again = xla_options.merged_flags(merged, 8192)
    assert again.count("--xla_backend_extra_options=") == 1
    assert again.endswith("a=1,b,xla_cpu_small_while_loop_byte_threshold=8192")
    assert xla_options.merged_flags("") == xla_options.small_loops_flag()


def test_threshold_is_read_back_from_the_flags(monkeypatch):
    monkeypatch.delenv("XLA_FLAGS", raising=False)
    assert xla_options.small_loops_threshold() is None
    monkeypatch.setenv(
        "XLA_FLAGS", xla_options.merged_flags("--xla_backend_extra_options=a=1", 777)
    )
    assert xla_options.small_loops_threshold() == 777


@pytest.mark.parametrize("bad", [0, -5, 2.5, True, "1024"])
def test_bad_threshold_is_refused(bad):
    with pytest.raises(ValueError, match="positive whole number of bytes"):
        xla_options.compile_small_loops(bad)


def test_refused_once_jax_has_started(monkeypatch):
    jnp.zeros(1).block_until_ready()  # the backend of this process has started
    monkeypatch.setenv("XLA_FLAGS", "")
    with pytest.raises(RuntimeError, match="before JAX's first computation"):
        xla_options.compile_small_loops(12345)
    assert os.environ["XLA_FLAGS"] == ""


def run_python(code: str, env_flags: str | None = None) -> str:
    env = dict(os.environ)
    env.pop("XLA_FLAGS", None)
    if env_flags is not None:
        env["XLA_FLAGS"] = env_flags
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=600
    )
    assert done.returncode == 0, done.stderr
    return done.stdout


def test_importing_zhat_does_not_start_jax():
    code = (
        "import zhat, zhat.families.network, zhat.families.lattice, zhat.fit, zhat.check, "
        "zhat.cli.main\nfrom jax._src import xla_bridge\n"
        "print(xla_bridge.backends_are_initialized())"
    )
    assert run_python(code).strip() == "False"


def test_toggle_draws_are_the_same_with_loops_compiled_whole():
    code = (
        # 64-bit floats, as in this process (conftest.py)
        "import json, numpyro, zhat\nnumpyro.enable_x64()\nzhat.compile_small_loops()\n"
        + DRAW
        + "\nprint(json.dumps(draws()))"
    )
    out, whole = json.loads(run_python(code).strip().splitlines()[-1])
    assert whole == {"tie_no_tie": True, "toggle": True}  # the option took effect
    namespace: dict = {}
    exec(DRAW, namespace)  # the same draws in this process, default options
    here, here_whole = namespace["draws"]()
    assert here_whole == {"tie_no_tie": False, "toggle": False}
    for name in ("tie_no_tie", "toggle"):
        assert np.array_equal(np.asarray(out[name]), np.asarray(here[name])), name
        assert np.asarray(here[name]).sum() > 0
