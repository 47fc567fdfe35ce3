"""Reading the files a portfolio names: regular files only, of bounded size.

Every input file (the portfolio file itself, every series CSV) is read here
and nowhere else.  A path may name anything: ``/dev/zero`` would be read
forever, a FIFO would block forever, ``/dev/urandom`` would fill the memory.
So a file is opened without blocking, must be a regular file, and may hold
at most :func:`limit_bytes` (256 MiB unless the environment variable
``PORTFOLIO_MAX_INPUT_MB`` says otherwise; docs/series.md).

It also holds the one way to replace a single file atomically
(:func:`replace_atomically`: a picture, a report page, a marker).
"""

from __future__ import annotations

import os
import stat
import tempfile
from pathlib import Path
from typing import Optional, Union

DEFAULT_MB = 256
ENV = "PORTFOLIO_MAX_INPUT_MB"


class InputError(OSError):
    """A file that will not be read, with the reason in plain words."""


def limit_bytes() -> int:
    """The largest input file read, in bytes (``PORTFOLIO_MAX_INPUT_MB``)."""
    raw = os.environ.get(ENV, "").strip()
    try:
        mb = float(raw) if raw else DEFAULT_MB
    except ValueError:
        mb = DEFAULT_MB
    if not mb > 0:
        mb = DEFAULT_MB
    return int(mb * 1024 * 1024)


def read_bytes(path: Union[str, Path]) -> bytes:
    """The whole content of a regular file of at most :func:`limit_bytes`.

    Raises :class:`InputError` (plain reason) for anything else, and the
    usual ``FileNotFoundError``, ``PermissionError``, ``IsADirectoryError``.
    """
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0))
    try:
        st = os.fstat(fd)
        if stat.S_ISDIR(st.st_mode):
            raise IsADirectoryError(21, "Is a directory", str(path))
        if not stat.S_ISREG(st.st_mode):
            raise InputError("it is not a regular file (a device, pipe or socket); "
                             "only files are read")
        limit = limit_bytes()
        if st.st_size > limit:
            raise InputError(_too_big(st.st_size, limit))
        chunks, total = [], 0
        while True:
            chunk = os.read(fd, min(1 << 20, limit + 1 - total))
            if not chunk:
                break
            chunks.append(chunk)
            total += len(chunk)
            if total > limit:                 # it grew while being read
                raise InputError(_too_big(total, limit))
        return b"".join(chunks)
    finally:
        os.close(fd)


def _too_big(size: int, limit: int) -> str:
    return (f"it is larger ({size / 2**20:.3g} MiB) than the {limit / 2**20:.3g} MiB read at "
            f"most (set {ENV} to read larger files)")


def outside(base_dir: Union[str, Path], written: str) -> Union[str, None]:
    """Why a path as written in a portfolio leaves its folder, or None.

    The confined mode (``--confine``; docs/series.md) reads only files inside
    the portfolio file's folder: no absolute path, no ``~``, no ``..``, and no
    symbolic link that leads out of the folder.
    """
    p = Path(written)
    if written.startswith("~"):
        return "it starts with '~' (a home folder)"
    if p.is_absolute():
        return "it is an absolute path"
    if ".." in p.parts:
        return "it climbs out with '..'"
    base = Path(base_dir).resolve()
    try:
        real = (base / p).resolve()
    except (OSError, RuntimeError):
        return "it cannot be resolved"
    if real != base and base not in real.parents:
        return "a symbolic link on the way leads out of the portfolio's folder"
    return None


def fsync_path(path: Union[str, Path]) -> None:
    """Flush a file's or a folder's data to disk (a folder: its entries)."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def replace_atomically(path: Union[str, Path], write, mode: Optional[int] = None) -> None:
    """Make ``path`` by ``write(tmp)`` into a temporary file beside it, flushed to disk
    and renamed over it: a reader sees the old file or the new one, never half of one.
    The temporary file is removed when ``write`` fails.  ``mode``: its permission
    bits (a file rewritten in place keeps its own); by default a new file's."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent or ".")
    os.close(fd)
    try:
        write(tmp)
        fsync_path(tmp)
        if mode is None:
            mask = os.umask(0)
            os.umask(mask)
            mode = 0o666 & ~mask              # as a plain new file would be, not mkstemp's 0600
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
