"""The pieces of chunked running that need no sampling: the chunk plan, the stop signal, and
refusing files that are not checkpoints."""

from __future__ import annotations

import os
import signal

import numpy as np
import pytest

from zhat.cli.chunked import _chunks, _StopOnSignal, checkpoint_path, read_checkpoint
from zhat.cli.inputs import CommandError


def test_chunks_cover_the_run_and_never_straddle_the_end_of_warmup():
    assert _chunks(0, 25, 65, 10) == [10, 10, 5, 10, 10, 10, 10]
    assert _chunks(25, 25, 65, 10) == [10, 10, 10, 10]
    assert _chunks(30, 25, 65, 10) == [10, 10, 10, 5]
    assert _chunks(65, 25, 65, 10) == []
    assert _chunks(0, 0, 3, 10) == [3]


def test_first_ctrl_c_asks_to_stop_and_the_second_stops_at_once(capsys):
    previous = signal.getsignal(signal.SIGINT)
    with _StopOnSignal() as stop:
        assert not stop.asked
        os.kill(os.getpid(), signal.SIGINT)
        assert stop.asked
        assert "Stopping after the chunk in progress" in capsys.readouterr().err
        with pytest.raises(KeyboardInterrupt):
            os.kill(os.getpid(), signal.SIGINT)
    assert signal.getsignal(signal.SIGINT) is previous


def test_checkpoint_path_and_foreign_files(tmp_path):
    assert checkpoint_path(tmp_path / "run.nc") == tmp_path / "run.checkpoint.npz"
    assert checkpoint_path(tmp_path / "run") == tmp_path / "run.checkpoint.npz"
    np.savez(tmp_path / "other.npz", meta=np.asarray('{"format": "something else"}'))
    with pytest.raises(CommandError, match="is not a zhat checkpoint"):
        read_checkpoint(tmp_path / "other.npz")
    (tmp_path / "text.npz").write_text("not an archive")
    with pytest.raises(CommandError, match="is not a zhat checkpoint"):
        read_checkpoint(tmp_path / "text.npz")
