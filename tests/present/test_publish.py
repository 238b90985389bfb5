"""Bundles are published whole: after a failure or a kill at any moment the destination holds
the complete old bundle or the complete new one, byte for byte (after the next run's repair).

Common practice, no source: write into a temporary sibling, publish with directory renames.
The checks are of the interface: which folder holds which bytes after each kill moment.
"""

from __future__ import annotations

import os
import random
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from sensiv.core.errors import InputError
from sensiv.present import publish

ROOT = Path(__file__).resolve().parents[2]
OLD = {"a.txt": "old a\n", "sub/b.bin": b"\x00old", "gone.txt": "only in the old bundle\n"}
NEW = {"a.txt": "new a\n", "sub/b.bin": b"\x00new", "sub/deeper/c.txt": "new c\n"}


def tree(folder: Path) -> dict[str, bytes]:
    """Every file below ``folder``, relative name → bytes."""
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}


def expected(files: dict) -> dict[str, bytes]:
    out = {k: v if isinstance(v, bytes) else v.encode() for k, v in files.items()}
    out[publish.MARKER] = publish.MARKER_TEXT.encode()
    return out


def siblings(dest: Path) -> list[str]:
    return sorted(p.name for p in dest.parent.iterdir() if p.name.startswith(f".{dest.name}."))


class Killed(BaseException):
    """Stands for SIGKILL in-process: no ``except OSError`` clean-up runs for it."""


def steps_of(files: dict) -> int:
    """How many pauses a publication has: one per file, the marker, the two renames."""
    return len(files) + 3


@pytest.mark.parametrize("had_old", [True, False])
def test_a_kill_at_every_step_leaves_old_or_new_after_repair(tmp_path, monkeypatch, had_old):
    for step in range(steps_of(NEW) + 1):
        dest = tmp_path / f"d{step}-{had_old}"
        if had_old:
            publish.publish(dest, OLD)
        calls = []

        def pause(step=step, calls=calls):
            calls.append(1)
            if len(calls) == step:
                raise Killed

        monkeypatch.setattr(publish, "_pause", pause)
        try:
            publish.publish(dest, NEW)
        except Killed:
            pass
        monkeypatch.setattr(publish, "_pause", lambda: None)
        monkeypatch.setattr(publish, "_alive", lambda pid: False)  # the "killed" run is gone
        notes = publish.recover(dest)
        state = tree(dest) if dest.exists() else None
        allowed = [expected(NEW), expected(OLD) if had_old else None]
        assert state in allowed, (step, sorted(state or ()))
        assert siblings(dest) == [], step
        if step in (0, steps_of(NEW)):  # not killed, or killed after the last rename
            assert state == expected(NEW)
        if 1 <= step <= len(NEW) + (2 if had_old else 1):  # killed before the rename in
            assert state == allowed[1] and notes
        publish.publish(dest, NEW)      # the next run publishes the new bundle whole
        assert tree(dest) == expected(NEW) and siblings(dest) == []


def test_a_failed_rename_restores_the_old_bundle(tmp_path, monkeypatch):
    dest = tmp_path / "d"
    publish.publish(dest, OLD)
    real = os.rename

    def rename(src, dst):
        if Path(src).name.startswith(".d.sensiv-tmp-"):
            raise OSError(28, "No space left on device")
        return real(src, dst)

    monkeypatch.setattr(publish.os, "rename", rename)
    with pytest.raises(OSError):
        publish.publish(dest, NEW)
    assert tree(dest) == expected(OLD) and siblings(dest) == []


def test_replacing_a_bundle_replaces_it_whole(tmp_path):
    dest = tmp_path / "d"
    publish.publish(dest, OLD)
    (dest / "added-by-hand.txt").write_text("x")
    publish.publish(dest, NEW)
    assert tree(dest) == expected(NEW)


def test_an_empty_folder_is_taken_and_a_foreign_one_refused(tmp_path, monkeypatch):
    empty = tmp_path / "empty"
    empty.mkdir()
    publish.publish(empty, NEW)
    assert tree(empty) == expected(NEW)
    foreign = tmp_path / "mine"
    foreign.mkdir()
    (foreign / "thesis.tex").write_text("keep me")
    with pytest.raises(InputError, match="not a previous sensiv bundle"):
        publish.publish(foreign, NEW)
    assert tree(foreign) == {"thesis.tex": b"keep me"} and siblings(foreign) == []
    afile = tmp_path / "file.txt"
    afile.write_text("keep")
    with pytest.raises(InputError, match="existing file"):
        publish.publish(afile, NEW)
    assert afile.read_text() == "keep" and siblings(afile) == []
    monkeypatch.chdir(empty)
    with pytest.raises(InputError, match="current folder"):
        publish.publish(".", NEW)
    with pytest.raises(InputError, match="current folder"):
        publish.publish(tmp_path, NEW)


def test_a_link_to_a_bundle_replaces_the_folder_it_points_to(tmp_path):
    real = tmp_path / "real"
    publish.publish(real, OLD)
    link = tmp_path / "link"
    link.symlink_to(real, target_is_directory=True)
    publish.publish(link, NEW)
    assert link.is_symlink() and tree(real) == expected(NEW)


def _dead_pid() -> int:
    done = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    return int(done.stdout)


def test_leftovers_of_dead_runs_are_repaired_and_of_live_ones_kept(tmp_path):
    dest = tmp_path / "d"
    dead = _dead_pid()
    publish.publish(dest, OLD)
    os.rename(dest, publish.sibling(dest, publish.OLD_TAG, dead))       # killed mid-swap
    (publish.sibling(dest, publish.TMP_TAG, dead)).mkdir()
    live = publish.sibling(dest, publish.TMP_TAG, os.getppid())         # a running process
    live.mkdir()
    notes = publish.recover(dest)
    assert tree(dest) == expected(OLD)
    assert len(notes) == 2 and "restored" in notes[0] and "removed" in notes[1]
    assert siblings(dest) == [live.name]


def test_the_cli_reports_repairs_and_refuses_foreign_folders(tmp_path):
    from typer.testing import CliRunner

    from sensiv.cli.app import app

    runner = CliRunner()
    pub = ["published", "--estimate", "1", "--se", "0.2", "--first-stage", "1",
           "--first-stage-f", "20", "--direct=0:0.1", "--points", "5"]
    dest = tmp_path / "out"
    (publish.sibling(dest, publish.TMP_TAG, _dead_pid())).mkdir()
    result = runner.invoke(app, [*pub, "--out", str(dest)])
    assert result.exit_code == 0, result.stderr
    assert "note: removed" in result.stderr and "unfinished new bundle" in result.stderr
    assert (dest / publish.MARKER).is_file() and siblings(dest) == []
    again = runner.invoke(app, [*pub, "--out", str(dest), "--json"])  # a bundle: replaced
    assert again.exit_code == 0 and again.stderr == ""
    foreign = tmp_path / "notes"
    foreign.mkdir()
    (foreign / "mine.txt").write_text("keep")
    refused = runner.invoke(app, [*pub, "--out", str(foreign), "--json"])
    assert refused.exit_code == 2 and refused.stdout == ""
    assert "not a previous sensiv bundle" in refused.stderr
    assert tree(foreign) == {"mine.txt": b"keep"}


# ------------------------------------------------------------------ SIGKILL of a real process
RECIPE = """\
title = "{title} (INVENTED data)"

[data]
path = "tiny.csv"
outcome = "y"
treatments = ["x"]
instruments = ["z"]

[[analysis]]
kind = "fit"
"""
PAUSE = 0.02


def _tiny(folder: Path) -> tuple[Path, Path]:
    import numpy as np

    rng = np.random.default_rng(1)
    z = rng.normal(size=60)
    x = z + rng.normal(size=60)
    y = 0.5 * x + rng.normal(size=60)
    rows = "\n".join(f"{a:.6f},{b:.6f},{c:.6f}" for a, b, c in zip(y, x, z))
    (folder / "tiny.csv").write_text("y,x,z\n" + rows + "\n")
    old, new = folder / "old.toml", folder / "new.toml"
    old.write_text(RECIPE.format(title="Old"))
    new.write_text(RECIPE.format(title="New"))
    return old, new


def _command(recipe: Path, dest: Path) -> list[str]:
    return [sys.executable, "-m", "sensiv", "run", str(recipe), "--out", str(dest)]


def _env(pause: float | None) -> dict:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        [str(ROOT), *filter(None, [os.environ.get("PYTHONPATH")])])}
    env.pop(publish.PAUSE_VARIABLE, None)
    if pause:
        env[publish.PAUSE_VARIABLE] = str(pause)
    return env


def _kill_trials(tmp_path: Path, trials: int, seed: int) -> list[str]:
    old, new = _tiny(tmp_path)
    references = {}
    for recipe in (old, new):
        ref = tmp_path / f"ref-{recipe.stem}"
        subprocess.run(_command(recipe, ref), env=_env(None), check=True, capture_output=True)
        references[recipe.stem] = tree(ref)
    window = PAUSE * (len(references["new"]) + 2)   # every file and the two renames
    rng = random.Random(seed)
    outcomes = []
    for trial in range(trials):
        dest = tmp_path / f"dest{trial}"
        shutil.copytree(tmp_path / "ref-old", dest, symlinks=True)  # the old bundle, as run
        child = subprocess.Popen(_command(new, dest), env=_env(PAUSE),
                                 stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        staging = publish.sibling(dest, publish.TMP_TAG, child.pid)
        while not staging.exists() and child.poll() is None:
            time.sleep(0.001)
        assert child.poll() is None, "the run ended before it began to write"
        time.sleep(rng.uniform(0.0, 1.5 * window))    # random moment in the write window
        child.send_signal(signal.SIGKILL)
        assert child.wait() in (-signal.SIGKILL, 0), trial
        # before any repair: the old bundle, the new one, or nothing with the old set aside
        raw = tree(dest) if dest.exists() else None
        assert raw in (references["old"], references["new"], None), trial
        if raw is None:
            aside = publish.sibling(dest, publish.OLD_TAG, child.pid)
            assert tree(aside) == references["old"], trial
        publish.recover(dest)  # what the next run into dest does first
        state = tree(dest)
        assert state in (references["old"], references["new"]), trial
        assert siblings(dest) == [], trial
        outcomes.append("missing" if raw is None else
                        "old" if state == references["old"] else "new")
    return outcomes


def test_sigkill_during_the_write_leaves_old_or_new(tmp_path):
    _kill_trials(tmp_path, trials=3, seed=20261202)


@pytest.mark.slow
def test_sigkill_at_random_moments_many_trials(tmp_path):
    outcomes = _kill_trials(tmp_path, trials=24, seed=7)
    assert {"old", "new"} <= set(outcomes), outcomes  # both sides of the swap were hit
