"""Writing files safely: atomic replacement and JSON-ready values (shared by every writer)."""

from __future__ import annotations

import os
import re
import shutil
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["atomic_write", "jsonable", "temp_prefix", "remove_stale_temporaries", "csv_with_metadata",
           "read_regular_file", "live_temporaries", "remove_live_temporaries"]

#: Temporary output folders this process is writing now (removed by :func:`remove_live_temporaries`
#: when the process must end at once, e.g. on a signal while a kernel compiles).
live_temporaries: set = set()


def remove_live_temporaries() -> None:
    """Delete every folder in :data:`live_temporaries` (best effort; never raises)."""
    for path in list(live_temporaries):
        shutil.rmtree(path, ignore_errors=True)
        live_temporaries.discard(path)


def read_regular_file(path, max_bytes: int, what: str = "file") -> bytes:
    """The bytes of ``path``, which must be a regular file of at most ``max_bytes``.

    A FIFO, a device (``/dev/zero``, also behind a symbolic link) or a socket is refused with a
    ``ValueError`` instead of hanging or filling the memory: the file is opened without blocking
    and checked with ``fstat`` before anything is read.  ``OSError`` for files that cannot be opened.
    """
    import stat

    fd = os.open(os.fspath(path), os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0))
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            kind = ("a FIFO (named pipe)" if stat.S_ISFIFO(st.st_mode) else "a device" if
                    stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode) else "a folder" if
                    stat.S_ISDIR(st.st_mode) else "a socket" if stat.S_ISSOCK(st.st_mode) else "not a regular file")
            raise ValueError(f"{path}: cannot read: it is {kind}, not a regular {what}")
        if st.st_size > max_bytes:
            raise ValueError(f"{path}: cannot read: it holds {st.st_size} bytes, more than the {max_bytes} "
                             f"accepted for a {what}")
        chunks, total = [], 0
        while True:
            chunk = os.read(fd, 1 << 20)
            if not chunk:
                break
            total += len(chunk)
            if total > max_bytes:  # grew while being read
                raise ValueError(f"{path}: cannot read: it holds more than the {max_bytes} bytes accepted for a {what}")
            chunks.append(chunk)
        return b"".join(chunks)
    finally:
        os.close(fd)


def csv_with_metadata(header_line: str, meta_lines, body: str) -> str:
    """CSV text: the column names first, then ``#`` metadata lines, then the rows.

    Names first, so ``numpy.genfromtxt(path, delimiter=",", names=True)`` takes its names from the
    header (not from a metadata line) and ``pandas.read_csv(path, comment="#")`` skips the
    metadata; every popdens table uses this layout.
    """
    meta = "".join(f"# {line}\n" for line in meta_lines)
    return f"{header_line}\n{meta}{body}"


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
