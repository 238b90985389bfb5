"""The progress bar: drawn by rich on a terminal's stderr, silent when stderr is not a terminal
or the caller disabled it (common practice for command-line progress, no source)."""

from __future__ import annotations

import io
import sys

import pytest

from sensiv.core import progress


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def run_loop(stream, monkeypatch, enabled=True, after=0.0):
    monkeypatch.setattr(sys, "stderr", stream)
    monkeypatch.setattr(progress, "PROGRESS_AFTER", after)
    with progress.Progress(total=40, label="bootstrap", enabled=enabled) as bar:
        for done in range(1, 41):
            bar.update(done)
    return stream.getvalue()


def test_a_terminal_gets_a_rich_bar(monkeypatch):
    shown = run_loop(Terminal(), monkeypatch)
    assert "bootstrap" in shown and "/40" in shown


@pytest.mark.parametrize("stream, enabled, after", [
    (io.StringIO(), True, 0.0),      # not a terminal (a log file, a pipe)
    (Terminal(), False, 0.0),        # disabled, as under --json
    (Terminal(), True, 3600.0),      # a quick loop
])
def test_quiet_otherwise(monkeypatch, stream, enabled, after):
    assert run_loop(stream, monkeypatch, enabled, after) == ""


def test_the_hand_written_helper_is_gone():
    from sensiv.estimation import inference

    assert not hasattr(inference, "Progress")


def test_silenced_turns_every_bar_off(monkeypatch):
    # the CLI runs a --json command inside progress.silenced(): no bar even on a terminal
    with progress.silenced():
        assert run_loop(Terminal(), monkeypatch) == ""
    assert "bootstrap" in run_loop(Terminal(), monkeypatch)


def test_a_json_command_runs_silenced(monkeypatch):
    from sensiv.cli.app import guarded

    seen = []

    @guarded
    def command(as_json: bool = False):
        seen.append(progress.SILENT.get())

    command(as_json=True)
    command(as_json=False)
    assert seen == [True, False]
