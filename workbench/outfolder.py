"""Results folders: refuse a dangerous destination up front, write all-or-nothing.

:func:`check_out_folder` runs before any computation. It refuses a destination
that is a file, that holds the study file or an input table (results would be
mixed with the user's data and could overwrite it), or that already holds
files other than the results of an earlier run.

:func:`atomic_folder` writes into a temporary sibling folder and renames it into
place at the end. A run that fails or is interrupted leaves no half-written
results folder, and the results of an earlier run stay intact until the new
ones are complete. A run killed outright (power cut, ``kill -9``) can leave its
temporary folder (named ``.<name>.partial-...``) behind; it is never read and
may be deleted.
"""

from __future__ import annotations

import os
import shutil
import tempfile
import uuid
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

from workbench.errors import WorkbenchError


class OutputFolderError(WorkbenchError):
    """The output folder given cannot be used safely."""


def _inside(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


def check_out_folder(out, protected: Iterable[tuple[str, object]], *, markers=("results.json",),
                     option: str = "--out") -> Path:
    """Refuse an output folder that would damage or mix with the user's files.

    Parameters
    ----------
    out : path-like
        The folder results are to be written to (it may not exist yet).
    protected : iterable of (description, path)
        Files that must not end up inside ``out``: the study file, the input tables.
    markers : tuple of str
        File names that identify the results of an earlier run; a folder holding
        one of them may be replaced, any other non-empty folder is refused.
    option : str
        How the user gave the folder, for the messages.

    Returns
    -------
    Path
        ``out`` as given.
    """
    out = Path(out)
    target = out.resolve()
    if target.exists() and not target.is_dir():
        raise OutputFolderError(
            f"{option} {out} is an existing file, not a folder. Give the name of a folder for the results "
            "(it is created if needed)."
        )
    for what, p in protected:
        if p is None:
            continue
        pp = Path(p).resolve()
        if _inside(pp, target):
            raise OutputFolderError(
                f"{option} {out} holds the {what} ({p}); writing results there would mix them with your data "
                f"and could overwrite it. Choose a folder of its own, for example {option} {out / 'results'}."
            )
    if target.is_dir() and any(target.iterdir()) and not any((target / m).exists() for m in markers):
        shown = ", ".join(sorted(x.name for x in target.iterdir())[:5])
        raise OutputFolderError(
            f"{option} {out} already holds files that are not results of an earlier run ({shown}). Choose a new "
            "or empty folder; an earlier results folder is replaced only once the new results are complete."
        )
    return out


@contextmanager
def atomic_folder(out) -> Iterator[Path]:
    """Yield a temporary sibling of ``out`` to write into; rename it to ``out`` on success.

    On any exception (including an interrupt) the temporary folder is removed
    and ``out`` is left as it was. An existing ``out`` is replaced only after
    everything was written.
    """
    final = Path(out).resolve()  # a symbolic link is followed: its target is replaced
    parent = final.parent
    parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{final.name}.partial-", dir=parent))
    try:
        yield tmp
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o777 & ~umask)  # mkdtemp makes a private folder; results are ordinary files
        if final.exists():
            old = parent / f".{final.name}.old-{uuid.uuid4().hex[:8]}"
            os.replace(final, old)
            try:
                os.replace(tmp, final)
            except BaseException:
                os.replace(old, final)
                raise
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(tmp, final)
    finally:
        if tmp.exists():
            shutil.rmtree(tmp, ignore_errors=True)
