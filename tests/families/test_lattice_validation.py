"""Bad data and bad arguments of the lattice families get errors that name the site and the fix,
whether the model runs under ``zhat.expose`` or ``zhat.model.as_potential``."""

import jax
import jax.numpy as jnp
import networkx as nx
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
from numpyro.handlers import seed, trace
from numpyro.infer.util import log_density

import zhat
from zhat.estimators import single_auxiliary
from zhat.families import lattice
from zhat.model import as_potential

NB = lattice.grid(3, 4)


def ising_model(y):
    coupling = numpyro.sample("coupling", dist.Uniform(0.0, 1.0))
    numpyro.sample("spins", lattice.ising(NB, coupling=coupling), obs=y)


def autologistic_model(y):
    coupling = numpyro.sample("coupling", dist.Uniform(0.0, 1.0))
    beta = numpyro.sample("beta", dist.Normal(0.0, 1.0).expand([1]).to_event(1))
    numpyro.sample("labels", lattice.autologistic(NB, coupling, coefficients=beta), obs=y)


def potts_model(y):
    coupling = numpyro.sample("coupling", dist.Uniform(0.0, 1.0))
    numpyro.sample("colours", lattice.potts(NB, coupling, q=3), obs=y)


MODELS = {"ising": ising_model, "autologistic": autologistic_model, "potts": potts_model}
SITES = {"ising": "spins", "autologistic": "labels", "potts": "colours"}
GOOD = {
    "ising": np.where(np.arange(12).reshape(3, 4) % 3 == 0, 1.0, -1.0),
    "autologistic": (np.arange(12).reshape(3, 4) % 2).astype(float),
    "potts": (np.arange(12).reshape(3, 4) % 3).astype(np.int32),
}


def run_exposed(model, y):
    # a simulator estimator serves all three families (Potts has no perfect sampler); the
    # reference is given because these tiny patterned maps have no finite pseudo-likelihood
    # maximum (tested in tests/estimators/test_auxiliary.py)
    estimator = single_auxiliary(
        num_draws=1, sampler="gibbs", sweeps=2, reference={"coupling": 0.1}
    )
    exposed = zhat.expose(model, estimator)
    return trace(seed(exposed, jax.random.key(0))).get_trace(y)


def run_potential(model, y):
    return log_density(as_potential(model), (y,), {}, {"coupling": 0.3, "beta": jnp.zeros(1)})


RUNNERS = {"expose": run_exposed, "as_potential": run_potential}


def bad_label(family):
    y = GOOD[family].copy()
    y[1, 2] = {"ising": 0.0, "autologistic": 2.0, "potts": 3}[family]
    return y


@pytest.mark.parametrize(
    "family,runner",
    [pytest.param(f, r, marks=()) for f in MODELS for r in RUNNERS],
)
def test_good_data_runs(family, runner):
    RUNNERS[runner](MODELS[family], jnp.asarray(GOOD[family]))


@pytest.mark.parametrize("runner", list(RUNNERS))
@pytest.mark.parametrize("family", list(MODELS))
def test_label_outside_the_family(family, runner):
    site = SITES[family]
    labels = {"ising": r"\[-1, 1\]", "autologistic": r"\[0, 1\]", "potts": r"\[0, 1, 2\]"}
    found = {"ising": r"\[0\.0\]", "autologistic": r"\[2\.0\]", "potts": r"\[3\]"}[family]
    pattern = rf"Site '{site}'.*labels must be in {labels[family]}; found {found} at \[\[1, 2\]\]"
    with pytest.raises(ValueError, match=pattern):
        RUNNERS[runner](MODELS[family], jnp.asarray(bad_label(family)))


def test_ising_with_zero_one_data_suggests_autologistic():
    with pytest.raises(ValueError, match="use the autologistic family"):
        run_exposed(ising_model, jnp.asarray(GOOD["autologistic"]))


@pytest.mark.parametrize("runner", list(RUNNERS))
@pytest.mark.parametrize("family", list(MODELS))
@pytest.mark.parametrize("shape", [(4, 3), (12, 1), (11,), (2, 6)])
def test_shape_not_matching_the_graph(family, runner, shape):
    y = np.resize(GOOD[family].reshape(-1), shape)
    pattern = rf"Site '{SITES[family]}'.*data have shape \({shape[0]},.*graph has 12 sites"
    with pytest.raises(ValueError, match=pattern):
        RUNNERS[runner](MODELS[family], jnp.asarray(y))


@pytest.mark.parametrize("runner", list(RUNNERS))
@pytest.mark.parametrize("family", ["ising", "autologistic"])
def test_nan_in_data(family, runner):
    y = GOOD[family].copy()
    y[2, 3] = np.nan
    with pytest.raises(ValueError, match=rf"Site '{SITES[family]}'.*NaN at \[\[2, 3\]\]"):
        RUNNERS[runner](MODELS[family], jnp.asarray(y))


def test_flat_data_are_accepted_under_expose():
    """The validator accepts one label per site in a flat array (shape (num_sites,))."""
    tr = run_exposed(ising_model, jnp.asarray(GOOD["ising"].reshape(-1)))
    assert tr["spins_noise"]["value"].shape == (1, 2 * 12)


def test_flat_data_are_accepted_under_as_potential():
    """Flat data pass the family's validation and ``expose``; ``as_potential`` (and so the
    exchange kernel) should accept them too instead of NumPyro's shape-mismatch error."""
    log_joint, _ = run_potential(ising_model, jnp.asarray(GOOD["ising"].reshape(-1)))
    expected, _ = run_potential(ising_model, jnp.asarray(GOOD["ising"]))
    np.testing.assert_allclose(float(log_joint), float(expected))


def test_unexposed_lattice_model_names_site_and_fix():
    with pytest.raises(zhat.NotExposedError, match=r"ising.*site 'spins'.*zhat\.expose"):
        log_density(ising_model, (jnp.asarray(GOOD["ising"]),), {}, {"coupling": 0.3})


def test_autologistic_argument_errors():
    with pytest.raises(ValueError, match=r"covariates must have shape \(12, p\).*got \(13, 2\)"):
        lattice.autologistic(NB, 0.2, np.ones((13, 2)))
    with pytest.raises(ValueError, match=r"covariates must have shape \(12, p\).*\(12, 2, 1\)"):
        lattice.autologistic(NB, 0.2, np.ones((12, 2, 1)))
    with pytest.raises(ValueError, match=r"covariates must have shape \(12, p\).*got \(5, 1\)"):
        lattice.autologistic(NB, 0.2, np.ones(5))
    with pytest.raises(ValueError, match=r"coefficients must have shape \(2,\).*got \(3,\)"):
        lattice.autologistic(NB, 0.2, np.ones((12, 2)), np.zeros(3))
    with pytest.raises(ValueError, match=r"coefficients must have shape \(1,\).*got \(2, 1\)"):
        lattice.autologistic(NB, 0.2, coefficients=np.zeros((2, 1)))
    # a 1-D covariate is one column; the default is an intercept with coefficient 0
    d = lattice.autologistic(NB, 0.2, np.arange(12.0), 0.5)
    assert d.params["covariates"].shape == (12, 1) and d.params["coefficients"].shape == (1,)


def test_potts_argument_errors():
    for q in (1, 0, 2.5, "3"):
        with pytest.raises(ValueError, match="q must be an integer ≥ 2"):
            lattice.potts(NB, 0.2, q=q)
    with pytest.raises(ValueError, match=r"field must have shape \(3,\) or \(12, 3\); got \(4,\)"):
        lattice.potts(NB, 0.2, q=3, field=np.zeros(4))
    with pytest.raises(ValueError, match=r"field must have shape \(4,\) or \(12, 4\)"):
        lattice.potts(NB, 0.2, q=4, field=np.zeros((12, 3)))
    lattice.potts(NB, 0.2, q=np.int64(4), field=np.zeros((12, 4)))


def test_site_field_size_error():
    d = lattice.ising(NB, field=np.zeros(5), coupling=0.1)
    with pytest.raises(ValueError, match=r"site field needs 12 values; got shape \(5,\)"):
        d.log_potential(jnp.asarray(GOOD["ising"]))


@pytest.mark.parametrize(
    "graph",
    [nx.petersen_graph(), np.zeros((4, 4)), (3, 4), None],
    ids=["networkx", "matrix", "tuple", "None"],
)
@pytest.mark.parametrize("family", ["ising", "autologistic", "potts"])
def test_graph_must_be_a_neighbour_structure(family, graph):
    make = {"ising": lattice.ising, "autologistic": lattice.autologistic, "potts": lattice.potts}
    with pytest.raises(TypeError, match=r"need a neighbour structure: `lattice\.grid"):
        make[family](graph)
