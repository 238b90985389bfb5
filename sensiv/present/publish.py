"""Publishing a bundle of files as a whole: the destination holds the complete old bundle or the
complete new one, never a mixture, even when the process is killed at any moment.

How a bundle for the destination ``DEST`` (in the folder ``PARENT``) is published:

1. every file is written into the temporary sibling ``PARENT/.DEST.sensiv-tmp-<pid>``, and the
   marker file :data:`MARKER` last;
2. an existing ``DEST`` is renamed aside to ``PARENT/.DEST.sensiv-old-<pid>``;
3. the temporary folder is renamed to ``DEST``;
4. the moved-aside old bundle is removed.

Each rename is atomic, so a kill leaves one of these states, which :func:`recover` (run by the
next write into the same destination, and by the CLI's check of ``--out`` before any work)
repairs: a temporary folder is removed (a kill in step 1, or between 2 and 3); when ``DEST`` is
missing but a moved-aside bundle exists (a kill between steps 2 and 3) that old bundle is
renamed back; a moved-aside bundle beside a present ``DEST`` (a kill in step 4) is removed.
Leftovers of a process that is still running are left alone.

What may be replaced: a destination that does not exist, an empty folder, or a folder carrying
the marker (a previous sensiv bundle).  Any other existing folder is refused with
:class:`~sensiv.core.errors.InputError` so that no unrelated file of the user is deleted, and so
is the current folder or one that contains it.  Replacing a bundle replaces it whole: files of
the old bundle that the new one does not have are gone.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Callable, Mapping
from pathlib import Path

from sensiv.core.errors import InputError

MARKER = ".sensiv-bundle"
MARKER_TEXT = ("This folder is a bundle written by sensiv as a whole. The next sensiv run into "
               "it replaces it whole; files added here by hand are removed then.\n")
TMP_TAG = ".sensiv-tmp-"
OLD_TAG = ".sensiv-old-"
PAUSE_VARIABLE = "SENSIV_PUBLISH_PAUSE"


def _pause() -> None:
    """A test hook: with ``SENSIV_PUBLISH_PAUSE=<seconds>`` set, wait that long after every step
    of a publication so that a test can kill the process inside the write window."""
    value = os.environ.get(PAUSE_VARIABLE)
    if value:
        import time

        time.sleep(float(value))


def sibling(target: Path, tag: str, pid: int | None = None) -> Path:
    """The temporary (``TMP_TAG``) or moved-aside (``OLD_TAG``) sibling of ``target``."""
    return target.parent / f".{target.name}{tag}{os.getpid() if pid is None else pid}"


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return False  # our own leftovers can only come from a dead process with a reused pid
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True  # exists, owned by someone else
    return True


def leftovers(target: Path) -> list[tuple[Path, str, int]]:
    """Temporary and moved-aside siblings of ``target`` left by earlier runs:
    ``(path, tag, pid)``, oldest first."""
    found = []
    try:
        entries = list(os.scandir(target.parent))
    except OSError:
        return []
    for item in entries:
        for tag in (TMP_TAG, OLD_TAG):
            prefix = f".{target.name}{tag}"
            rest = item.name[len(prefix):]
            if item.name.startswith(prefix) and rest.isdigit() and item.is_dir(
                    follow_symlinks=False):
                found.append((Path(item.path), tag, int(rest), item.stat().st_mtime))
    found.sort(key=lambda f: (f[3], f[0].name))
    return [(path, tag, pid) for path, tag, pid, _ in found]


def recover(target: str | os.PathLike) -> list[str]:
    """Repair what a killed publication into ``target`` left behind (see the module text);
    returns one sentence per action, for the caller to report."""
    target = destination(target)
    notes = []
    found = [f for f in leftovers(target) if not _alive(f[2])]
    olds = [f for f in found if f[1] == OLD_TAG]
    if olds and not os.path.lexists(target):
        path = olds[-1][0]
        os.rename(path, target)
        found.remove(olds[-1])
        notes.append(f"restored the previous bundle '{target}' from '{path.name}', left by a "
                     "run that was stopped while replacing it")
    for path, tag, _ in found:
        shutil.rmtree(path, ignore_errors=True)
        what = "unfinished new bundle" if tag == TMP_TAG else "replaced old bundle"
        notes.append(f"removed '{path}', an {what} left by a run that was stopped")
    return notes


def destination(target: str | os.PathLike) -> Path:
    """The absolute destination (symbolic links resolved, so the bundle replaces the folder
    a link points to, not the link)."""
    return Path(os.path.realpath(os.path.abspath(target)))


def check_destination(target: str | os.PathLike, option: str = "--out") -> None:
    """Refuse a destination that a bundle may not replace (see the module text)."""
    path = destination(target)
    here = Path(os.path.realpath(os.getcwd()))
    if path == here or path in here.parents:
        raise InputError(f"{option} '{target}' is the current folder or contains it, and a "
                         f"bundle replaces its folder whole; give a new or empty folder with "
                         f"{option}, such as {option} results")
    if os.path.lexists(path) and not path.is_dir():
        raise InputError(f"{option} '{target}' is an existing file, not a folder; give another "
                         f"folder with {option} (or move the file away)")
    if not path.is_dir() or (path / MARKER).is_file():
        return
    with os.scandir(path) as entries:
        if next(entries, None) is None:
            return
    raise InputError(f"{option} '{target}' is a folder that already holds files and is not a "
                     f"previous sensiv bundle (it has no {MARKER} file); sensiv replaces its "
                     f"output folder whole and will not delete files it did not write, so give "
                     f"a new or empty folder with {option} (or move those files away)")


def _write_all(staging: Path, files: Mapping[str, str | bytes]) -> None:
    staging.mkdir()
    for name, content in files.items():
        path = staging / name
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content, encoding="utf-8")
        _pause()
    (staging / MARKER).write_text(MARKER_TEXT, encoding="utf-8")
    _pause()


def publish(target: str | os.PathLike, files: Mapping[str, str | bytes], *,
            report: Callable[[str], None] | None = None, option: str = "--out") -> list[Path]:
    """Publish ``files`` (name → content; ``/`` in a name makes subfolders) as the bundle at
    ``target``, replacing an earlier bundle whole.  Leftovers of a killed earlier run are
    repaired first and each repair is passed to ``report``.  Returns the final paths.

    On a failure of the file system nothing is left behind and an earlier bundle stays in
    place; the :class:`OSError` is raised again.
    """
    path = destination(target)
    path.parent.mkdir(parents=True, exist_ok=True)
    for note in recover(path):
        if report is not None:
            report(note)
    check_destination(target, option)
    staging, aside = sibling(path, TMP_TAG), sibling(path, OLD_TAG)
    shutil.rmtree(staging, ignore_errors=True)  # only from a dead process with our pid
    moved = False
    try:
        _write_all(staging, files)
        if os.path.lexists(path):
            os.rename(path, aside)
            moved = True
            _pause()
        os.rename(staging, path)
        _pause()
    except OSError:
        shutil.rmtree(staging, ignore_errors=True)
        if moved and not os.path.lexists(path):
            os.rename(aside, path)
        raise
    if moved:
        shutil.rmtree(aside, ignore_errors=True)
    return [path / name for name in files]


__all__ = ["MARKER", "check_destination", "destination", "leftovers", "publish", "recover",
           "sibling"]
