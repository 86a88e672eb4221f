"""Reading model files and data, and the one-line errors for bad input (in process: fast)."""

from __future__ import annotations

import sys

import numpy as np
import pytest

from tests.cli.helpers import write_inputs
from zhat.cli.inputs import CommandError, load_data, load_model_file, match
from zhat.cli.main import main


def error_of(capsys, *argv: str) -> str:
    """Run ``zhat argv`` in process; it must fail with exit code 2 and one line on stderr."""
    assert main(list(argv)) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    return err[0]


@pytest.fixture
def inputs(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    return write_inputs(tmp_path)


def test_missing_model_file(capsys, inputs):
    line = error_of(capsys, "fit", "nothere.py", "--data", "y.npy")
    assert (
        line == "zhat fit: error: model file nothere.py not found; give the path of a Python file."
    )


def test_missing_data_file(capsys, inputs):
    line = error_of(capsys, "fit", "lg.py", "--data", "nothere.npz")
    assert "data file nothere.npz not found" in line


def test_model_file_that_fails_to_import(capsys, inputs, tmp_path):
    (tmp_path / "broken.py").write_text("def model(y):\n    return (\n")
    line = error_of(capsys, "fit", "broken.py", "--data", "y.npy")
    assert "model file broken.py failed to import (SyntaxError" in line
    assert "`python broken.py` shows the full traceback" in line

    (tmp_path / "raises.py").write_text("import numpy\nnumpy.frobnicate()\n")
    line = error_of(capsys, "fit", "raises.py", "--data", "y.npy")
    assert "failed to import (AttributeError" in line and "frobnicate" in line


def test_model_file_without_model_or_estimators(capsys, inputs, tmp_path):
    (tmp_path / "no_model.py").write_text("estimators = None\n")
    line = error_of(capsys, "fit", "no_model.py", "--data", "y.npy")
    assert "defines no function `model`; add `def model(...)`" in line

    (tmp_path / "no_estimators.py").write_text("def model(y):\n    pass\n")
    line = error_of(capsys, "fit", "no_estimators.py", "--data", "y.npy")
    assert "defines no `estimators`; add e.g. `estimators = " in line


def test_data_names_that_do_not_match_the_model(capsys, inputs, tmp_path):
    np.save(tmp_path / "counts.npy", np.zeros(3))
    line = error_of(capsys, "fit", "lg.py", "--data", "counts.npy")
    assert "the data name(s) ['counts'] are not arguments of model(y) in lg.py" in line
    assert "rename them to one of ['y']" in line

    np.savez(tmp_path / "empty.npz")
    line = error_of(capsys, "fit", "lg.py", "--data", "empty.npz")
    assert "model(y) in lg.py needs ['y'], which the data do not provide (found [])" in line
    # the same array under the right name is accepted
    data, _ = load_data(["y=counts.npy"])
    match(load_model_file("lg.py").model, data, "lg.py")


def test_unknown_data_format(capsys, inputs, tmp_path):
    (tmp_path / "y.xlsx").write_bytes(b"\x00")
    line = error_of(capsys, "fit", "lg.py", "--data", "y.xlsx")
    assert "unknown format '.xlsx'; use one of .npy, .npz, .csv, .graphml, .gml, .edgelist" in line


def test_graph_file_without_networkx(capsys, inputs, tmp_path, monkeypatch):
    (tmp_path / "plots.gml").write_text("graph [\n]\n")
    monkeypatch.setitem(sys.modules, "networkx", None)  # makes `import networkx` fail
    line = error_of(capsys, "fit", "lg.py", "--data", "plots.gml")
    assert "needs networkx: `pip install networkx`" in line


def test_resume_and_report_without_a_run(capsys, inputs):
    assert "no stopped run to continue: x.checkpoint.npz not found" in error_of(
        capsys, "resume", "x.nc"
    )
    assert "run file x.nc not found" in error_of(capsys, "report", "x.nc")


def test_data_formats(tmp_path):
    np.savez(tmp_path / "two.npz", a=np.arange(3), b=np.ones((2, 2)))
    (tmp_path / "table.csv").write_text("height,mass\n1.5,60\n1.7,72.5\n")
    np.save(tmp_path / "cells.npy", np.eye(2))
    data, files = load_data(
        [str(tmp_path / "two.npz"), str(tmp_path / "table.csv"), f"x={tmp_path / 'table.csv'}"]
        + [str(tmp_path / "cells.npy")]
    )
    assert sorted(data) == ["a", "b", "cells", "height", "mass", "x"]
    np.testing.assert_array_equal(data["a"], np.arange(3))
    np.testing.assert_array_equal(data["mass"], [60.0, 72.5])
    np.testing.assert_array_equal(data["x"], [[1.5, 60.0], [1.7, 72.5]])
    np.testing.assert_array_equal(data["cells"], np.eye(2))
    assert len(files) == 4

    with pytest.raises(CommandError, match="data name 'a' comes twice"):
        load_data([str(tmp_path / "two.npz"), f"a={tmp_path / 'cells.npy'}"])
    (tmp_path / "bare.csv").write_text("1,2\n3,4\n")
    with pytest.raises(CommandError, match="not valid argument names"):
        load_data([str(tmp_path / "bare.csv")])


def test_graph_formats(tmp_path):
    nx = pytest.importorskip("networkx")
    graph = nx.path_graph(4)  # 0 - 1 - 2 - 3
    nx.set_node_attributes(graph, {n: float(n) / 2 for n in graph}, "moisture")
    nx.write_graphml(graph, tmp_path / "plots.graphml")
    nx.write_edgelist(graph, tmp_path / "plots.edgelist", data=False)
    path = np.diag(np.ones(3), 1) + np.diag(np.ones(3), -1)

    data, _ = load_data([str(tmp_path / "plots.graphml")])
    np.testing.assert_array_equal(data["adjacency"], path)
    np.testing.assert_array_equal(data["moisture"], [0.0, 0.5, 1.0, 1.5])
    data, _ = load_data([f"neighbours={tmp_path / 'plots.edgelist'}"])
    assert list(data) == ["neighbours"]
    np.testing.assert_array_equal(data["neighbours"], path)


def test_model_that_fails_on_the_data(capsys, inputs, tmp_path):
    wrong = (tmp_path / "lg.py").read_text().replace("y.shape", "(3,)")  # 3 latent values, 10 y
    (tmp_path / "wrong.py").write_text(wrong)
    line = error_of(capsys, "fit", "wrong.py", "--data", "y.npy", "--no-progress")
    assert line.startswith("zhat fit: error: the model failed on the data (")
    assert "check the model and that each data array has the shape and type it expects" in line
