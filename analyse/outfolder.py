"""Output folders written atomically, never inside the input, replaced only with force.

Everything a command writes goes into a fresh temporary folder beside the destination;
only when all of it is written is the folder renamed into place (and an existing one,
allowed by ``force``, moved aside and removed). A crash leaves at most a temporary
folder whose name says what it is, never a half-written report.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path

from analyse.errors import InputError

__all__ = ["default_output", "check_output", "atomic_folder"]


def default_output(input_path: Path, suffix: str) -> Path:
    """``<folder>-<suffix>`` beside the input folder (FOLDER-FORMAT.md)."""
    p = Path(input_path).resolve()
    return p.parent / f"{p.name}-{suffix}"


def check_output(out: Path, *, input_folder: Path | None, force: bool, option: str = "--out"):
    """Refuse an output inside the input folder, or an existing non-empty one without force."""
    out_r = Path(out).resolve()
    if input_folder is not None:
        inp = Path(input_folder).resolve()
        if out_r == inp or inp in out_r.parents:
            raise InputError(f"{option} {out} lies inside the input folder; the input folder "
                             "is never written to: choose another output folder", out)
    if out_r.exists() and not out_r.is_dir():
        raise InputError(f"{option} exists and is not a folder", out)
    if out_r.is_dir() and any(out_r.iterdir()) and not force:
        raise InputError(f"output folder exists and is not empty; use --force to replace it",
                         out)
    if not out_r.parent.is_dir():
        raise InputError(f"the folder to hold the output does not exist: {out_r.parent}", out)
    return out_r


@contextlib.contextmanager
def atomic_folder(out: Path, *, force: bool) -> Iterator[Path]:
    """Yield a temporary folder beside ``out``; move it to ``out`` when the block succeeds."""
    out = Path(out).resolve()
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    try:
        yield tmp
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    old = None
    if out.exists():
        if any(out.iterdir()) and not force:
            shutil.rmtree(tmp, ignore_errors=True)
            raise InputError("output folder exists and is not empty; use --force to replace it",
                             out)
        old = out.parent / f".{out.name}.old-{os.getpid()}"
        out.rename(old)
    tmp.chmod(0o755)
    tmp.rename(out)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
