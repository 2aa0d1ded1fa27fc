"""Writing files safely: atomic replacement and JSON-ready values (shared by every writer)."""

from __future__ import annotations

import os
import re
import shutil
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["atomic_write", "jsonable", "temp_prefix", "remove_stale_temporaries"]


def temp_prefix(name: str, kind: str = "") -> str:
    """Prefix of a hidden temporary beside ``name``: ``.NAME.[KIND.]pPID.`` (the owner's process id,
    so that a later run can tell a leftover of a killed process from a live one)."""
    return f".{name}.{kind + '.' if kind else ''}p{os.getpid()}."


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, OSError):
        return True
    return True


def stale_temporaries(path: Path, kind: str = "") -> list[Path]:
    """Temporaries made by :func:`temp_prefix` for ``path`` whose process has ended (killed, SIGKILL)."""
    path = Path(path)
    pattern = re.compile(rf"^\.{re.escape(path.name)}\.{re.escape(kind + '.') if kind else ''}p(\d+)\."
                         r"[A-Za-z0-9_]{8}(\.part)?$")
    try:
        entries = list(path.parent.iterdir())
    except OSError:
        return []
    out = []
    for entry in entries:
        m = pattern.match(entry.name)
        if m and int(m.group(1)) != os.getpid() and not _alive(int(m.group(1))):
            out.append(entry)
    return sorted(out)


def remove_stale_temporaries(path: Path, kind: str = "") -> list[Path]:
    """Delete the leftovers of killed processes beside ``path`` (see :func:`stale_temporaries`)."""
    gone = stale_temporaries(path, kind)
    for entry in gone:
        if entry.is_dir() and not entry.is_symlink():
            shutil.rmtree(entry, ignore_errors=True)
        else:
            try:
                entry.unlink()
            except OSError:
                pass
    return gone


def atomic_write(path: Path, write) -> None:
    """Write via a temporary file in the same folder and rename (never half-written); removes the
    temporaries that killed processes left for the same file."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    remove_stale_temporaries(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=temp_prefix(path.name), suffix=".part")
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def jsonable(x: Any):
    if isinstance(x, dict):
        return {str(k): jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [jsonable(v) for v in x]
    if isinstance(x, np.ndarray):
        return x.tolist()
    if isinstance(x, (np.floating, np.integer)):
        return x.item()
    if isinstance(x, (str, int, float, bool)) or x is None:
        return x
    return repr(x)
