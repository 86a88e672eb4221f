"""What ``zhat fit`` reads: a model file and data files, checked against each other.

A model file is a Python file defining

- ``model`` (required): a NumPyro model; its arguments are filled by name from the data;
- ``estimators`` (required): an :class:`~zhat.Estimator`, a dict site → estimator, or ``None``
  (each site's own or default estimator), passed to :func:`zhat.expose`;
- ``sampler`` (optional): ``sampler(exposed_model)`` returning a NumPyro kernel built on that
  exposed model (default :func:`zhat.kernels.pseudo_marginal_gibbs`);
- ``init_params`` (optional): initial values as NumPyro's ``init_params`` (unconstrained
  values by site name), used for every chain.

Data come from ``--data FILE`` or ``--data NAME=FILE`` (repeatable):

==========================  ============================================================
``.npy``                    one array, named NAME or else the file's stem
``.npz``                    one array per stored name
``.csv``                    a header row of column names, numbers below: one array per
                            column; with NAME, the whole table as one 2-D array
``.graphml .gml .edgelist`` (needs networkx) the adjacency matrix, named NAME or else
                            ``adjacency``, and one array per numeric node attribute; nodes in
                            the order the file lists them
==========================  ============================================================
"""

from __future__ import annotations

import hashlib
import importlib.util
import inspect
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np

__all__ = ["CommandError", "ModelFile", "file_digest", "load_data", "load_model_file", "match"]

GRAPH_FORMATS = (".graphml", ".gml", ".edgelist")
FORMATS = (".npy", ".npz", ".csv", *GRAPH_FORMATS)


class CommandError(Exception):
    """A problem with the user's input: printed as one line, exit code 2, no traceback."""


class ModelFile(NamedTuple):
    """The names a model file defines (see the module docstring)."""

    path: Path
    model: Callable
    estimators: Any
    sampler: Callable | None
    init_params: Any


def file_digest(path: Path) -> str:
    """SHA-256 of a file's bytes (to refuse resuming with a changed model or data file)."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def load_model_file(path: str | Path) -> ModelFile:
    """Import a model file and check that it defines what ``zhat fit`` needs."""
    path = Path(path)
    if not path.is_file():
        raise CommandError(f"model file {path} not found; give the path of a Python file.")
    if path.suffix != ".py":
        raise CommandError(f"model file {path} is not a .py file; give a Python file.")
    name = f"zhat_user_model_{file_digest(path)[:12]}"
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module  # dataclasses and pickling look the module up by name
    try:
        spec.loader.exec_module(module)
    except Exception as error:  # any failure of user code is reported in one line
        del sys.modules[name]
        raise CommandError(
            f"model file {path} failed to import ({type(error).__name__}: {error}); fix it "
            f"(`python {path}` shows the full traceback)."
        ) from None
    model = getattr(module, "model", None)
    if not callable(model):
        raise CommandError(
            f"model file {path} defines no function `model`; add `def model(...)`, a NumPyro "
            "model whose arguments are filled from the data."
        )
    if not hasattr(module, "estimators"):
        raise CommandError(
            f"model file {path} defines no `estimators`; add e.g. `estimators = "
            "zhat.estimators.importance_sampling(32)` (or a dict site → estimator, or None for "
            "each site's default)."
        )
    sampler = getattr(module, "sampler", None)
    if sampler is not None and not callable(sampler):
        raise CommandError(
            f"`sampler` in {path} is not a function; define `def sampler(exposed_model): ...` "
            "returning a kernel, or remove it to use pseudo_marginal_gibbs."
        )
    return ModelFile(path, model, module.estimators, sampler, getattr(module, "init_params", None))


def _split_spec(spec: str) -> tuple[str | None, Path]:
    name, sep, file = spec.partition("=")
    if sep and name.isidentifier():
        return name, Path(file)
    return None, Path(spec)


def load_data(specs: list[str]) -> tuple[dict[str, np.ndarray], list[Path]]:
    """Arrays by name from ``--data`` specs, and the files they came from."""
    data: dict[str, np.ndarray] = {}
    files = []
    for spec in specs:
        name, path = _split_spec(spec)
        if not path.is_file():
            raise CommandError(f"data file {path} not found; check the path given to --data.")
        suffix = path.suffix.lower()
        if suffix not in FORMATS:
            raise CommandError(
                f"data file {path}: unknown format '{path.suffix or '(none)'}'; use one of "
                f"{', '.join(FORMATS)}."
            )
        try:
            arrays = _READERS[suffix](path, name)
        except CommandError:
            raise
        except Exception as error:  # a malformed file of a known format
            raise CommandError(
                f"data file {path} could not be read as {suffix} ({type(error).__name__}: "
                f"{error}); check its contents."
            ) from None
        for key, value in arrays.items():
            if key in data:
                raise CommandError(
                    f"data name '{key}' comes twice (again in {path}); rename one of them."
                )
            data[key] = value
        files.append(path)
    return data, files


def _read_npy(path: Path, name: str | None) -> dict[str, np.ndarray]:
    return {name or path.stem: np.load(path, allow_pickle=False)}


def _read_npz(path: Path, name: str | None) -> dict[str, np.ndarray]:
    if name is not None:
        raise CommandError(
            f"{path} is an .npz file, whose arrays carry their own names; drop '{name}='."
        )
    with np.load(path, allow_pickle=False) as stored:
        return {key: stored[key] for key in stored.files}


def _read_csv(path: Path, name: str | None) -> dict[str, np.ndarray]:
    with path.open() as handle:
        header = [h.strip().strip('"') for h in handle.readline().split(",")]
    table = np.loadtxt(path, delimiter=",", skiprows=1, ndmin=2)
    if table.shape[1] != len(header):
        raise CommandError(
            f"{path} has {len(header)} header names but {table.shape[1]} columns; make them agree."
        )
    if name is not None:
        return {name: table}
    bad = [h for h in header if not h.isidentifier()]
    if bad:
        raise CommandError(
            f"{path}: the header {bad} are not valid argument names (a header row of names is "
            f"needed); rename the columns, or pass NAME={path} to read the table as one array."
        )
    return {h: table[:, i] for i, h in enumerate(header)}


def _read_graph(path: Path, name: str | None) -> dict[str, np.ndarray]:
    try:
        import networkx as nx
    except ImportError:
        raise CommandError(
            f"reading the graph file {path} needs networkx: `pip install networkx`."
        ) from None
    suffix = path.suffix.lower()
    if suffix == ".graphml":
        graph = nx.read_graphml(path)
    elif suffix == ".gml":
        graph = nx.read_gml(path)
    else:
        graph = nx.read_edgelist(path)
    nodes = list(graph.nodes)
    arrays = {name or "adjacency": nx.to_numpy_array(graph, nodelist=nodes, weight=None)}
    attributes = set.intersection(*(set(graph.nodes[n]) for n in nodes)) if nodes else set()
    for attribute in sorted(attributes):
        values = [graph.nodes[n][attribute] for n in nodes]
        if all(isinstance(v, (int, float, bool)) for v in values) and attribute.isidentifier():
            arrays[attribute] = np.asarray(values)
    return arrays


_READERS = {
    ".npy": _read_npy,
    ".npz": _read_npz,
    ".csv": _read_csv,
    **dict.fromkeys(GRAPH_FORMATS, _read_graph),
}


def match(model: Callable, data: dict[str, np.ndarray], where: str) -> None:
    """Check that the data names are exactly what ``model`` takes (those without defaults)."""
    signature = inspect.signature(model)
    params = signature.parameters
    named = [p.name for p in params.values() if p.kind in (p.POSITIONAL_OR_KEYWORD, p.KEYWORD_ONLY)]
    takes = f"model({', '.join(named)}) in {where}"
    if any(p.kind == p.POSITIONAL_ONLY for p in params.values()):
        raise CommandError(f"{takes} has positional-only arguments; make them ordinary ones.")
    extra = [k for k in data if k not in named]
    if extra and not any(p.kind == p.VAR_KEYWORD for p in params.values()):
        raise CommandError(
            f"the data name(s) {extra} are not arguments of {takes}; rename them to one of "
            f"{named} (NAME=FILE for .npy, .csv and graph files)."
        )
    missing = [
        p.name
        for p in params.values()
        if p.name in named and p.default is p.empty and p.name not in data
    ]
    if missing:
        raise CommandError(
            f"{takes} needs {missing}, which the data do not provide (found {sorted(data)}); "
            "add them with --data NAME=FILE."
        )
