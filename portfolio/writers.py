"""Write a dispatch result to an output folder, atomically.

Everything is written into a temporary sibling folder first, then renamed
into place, so a reader never sees a half-written output folder: either the
previous folder (untouched) or the complete new one.

An existing ``out_dir`` is replaced only when it is empty or a previous
output folder: it holds the marker file :data:`MARKER` and nothing that the
marker does not list.  Anything else is refused with
:class:`OutputFolderError` (so an input folder is never written into), and
so is the working folder or one of its parents (renaming it away would pull
the floor from under the shell).

The new folder keeps the old one's permission bits (setgid included), group
and POSIX ACLs; a new folder gets the usual ``0777 & ~umask``.  Files are
fsynced, then the folder, before the rename.  Writers of one folder take
turns: an advisory lock (``.<name>.lock`` beside it, ``fcntl.flock``, removed
on release) is held from the temporary folder's creation to the rename, and
whoever holds it removes temporary folders that a killed run left behind.

Files (docs/outputs.md): ``<name>.csv`` per asset, ``schedule.csv`` (wide),
``windows.csv`` and ``marginal_values.csv`` when there are such tables, ``summary.json``, and with ``formats=("csv", "parquet")`` the same tables as
``.parquet`` too.  File names, the marker, the formats and the reserved
names are the results contract's (:mod:`portfolio.contract`).
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import stat
import shutil
import tempfile
import uuid
from pathlib import Path
from typing import Iterable, List

import numpy as np
import pandas as pd

from .contract import (FORMATS, MARGINAL_TABLE, MARKER, PERIODS_TABLE, RESERVED_NAMES, SUMMARY_FILE,
                       WIDE, WINDOWS_TABLE, table_file)
from .files import fsync_path


class OutputFolderError(Exception):
    """The output folder cannot be written (not ours, clashes, bad format)."""


def _iso_index(df: pd.DataFrame) -> pd.DataFrame:
    out = df.copy()
    out.index = pd.Index([ts.isoformat() for ts in df.index], name="time")
    return out


CSV_DECIMALS = 6     # every number in a CSV: MW, MWh, money, money/MWh to 1e-6 (docs/outputs.md)


def rounded(df: pd.DataFrame, decimals: int = CSV_DECIMALS) -> pd.DataFrame:
    """``df`` with its float columns rounded to ``decimals`` (a -0.0 written as 0.0), words untouched."""
    out = df.copy()
    for c in out.columns:
        if pd.api.types.is_float_dtype(out[c]):
            out[c] = out[c].round(decimals) + 0.0
    return out


def _write_csv(df: pd.DataFrame, path: Path) -> None:
    _iso_index(rounded(df)).to_csv(path, lineterminator="\n")


def _write_parquet(df: pd.DataFrame, path: Path) -> None:
    out = df.reset_index()
    out.to_parquet(path, index=False)


def _jsonable(x):
    if isinstance(x, dict):
        return {str(k): _jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_jsonable(v) for v in x]
    if isinstance(x, (np.floating, float)):
        x = float(x)
        return x if math.isfinite(x) else None
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, np.bool_):
        return bool(x)
    if isinstance(x, pd.Timestamp):
        return x.isoformat()
    return x


def planned_files(result, formats: Iterable[str]) -> List[str]:
    names = []
    tables = result.tables or {}
    for fmt in formats:
        if result.schedule is not None:
            names += [table_file(n, fmt) for n in tables] + [table_file(WIDE, fmt)]
            names += [table_file(n, fmt) for n, _ in _extra(result)]
    names.append(SUMMARY_FILE)
    return names


def _extra(result) -> list:
    """Tables beside the assets' (dispatch by windows: the per-window table; when asked
    for: the marginal values)."""
    extra = [(WINDOWS_TABLE, getattr(result, "windows", None)),
             (PERIODS_TABLE, getattr(result, "periods", None)),
             (MARGINAL_TABLE, getattr(result, "marginal_values", None))]
    return [(name, df) for name, df in extra if df is not None]


def _check_names(result) -> None:
    for name in (result.tables or {}):
        if name in dict(_extra(result)):
            what = {WINDOWS_TABLE: "per-window", PERIODS_TABLE: "daily and monthly"}.get(name, "marginal values")
            raise OutputFolderError(f'an asset is named "{name}", which clashes with the {what} '
                                    f"table {name}.csv; rename the asset")
        if name in RESERVED_NAMES:
            raise OutputFolderError(
                f'an asset is named "{name}", which clashes with the output file {name}.csv/.json; '
                f"rename the asset")
        if not name or "/" in name or "\\" in name or name.startswith(".") or "\0" in name:
            raise OutputFolderError(f"asset name {name!r} cannot be used as a file name")


def _check_target(out: Path, result) -> None:
    p = getattr(result, "portfolio", None)
    inputs = p.inputs if p is not None and hasattr(p, "inputs") else ()
    try:
        out_r = out.resolve()
    except OSError:
        out_r = out
    for src in inputs:
        src_dir = Path(src).absolute().resolve().parent
        if src_dir == out_r or out_r in src_dir.parents:
            what = ("the portfolio's own files" if src == getattr(p, "path", None)
                    else f"a file the portfolio reads ({src})")
            raise OutputFolderError(
                f"output folder {out} contains {what}; the folder is replaced as a whole, so "
                f"choose another folder")
    try:
        cwd = Path.cwd().resolve()
        out_r = out.resolve()
        if out_r == cwd or out_r in cwd.parents:
            raise OutputFolderError(
                f"output folder {out} is the working folder or holds it; choose a new folder "
                f"(it is replaced as a whole)")
    except OSError:
        pass
    if not out.exists() and not out.is_symlink():
        return
    if not out.is_dir() or out.is_symlink():
        raise OutputFolderError(f"output path {out} exists and is not a folder")
    entries = set(os.listdir(out))
    if not entries:
        return
    if MARKER not in entries:
        raise OutputFolderError(
            f"output folder {out} exists and is not a previous output folder "
            f"(no {MARKER} file); refusing to replace it")
    try:
        listed = set(json.loads((out / MARKER).read_text(encoding="utf-8")).get("files", []))
    except (OSError, ValueError, AttributeError):
        raise OutputFolderError(f"output folder {out} has an unreadable {MARKER} file; "
                                f"refusing to replace it") from None
    foreign = sorted(e for e in entries - {MARKER}
                     if e not in listed or not (out / e).is_file() or (out / e).is_symlink())
    if foreign:
        shown = ", ".join(foreign[:5]) + (" ..." if len(foreign) > 5 else "")
        raise OutputFolderError(
            f"output folder {out} contains files that were not written by this tool ({shown}); "
            f"refusing to replace it")


def _write_all(result, folder: Path, formats) -> List[str]:
    written = []
    if result.schedule is not None:
        for fmt in formats:
            writer = _write_csv if fmt == "csv" else _write_parquet
            for name, df in [*result.tables.items(), (WIDE, result.schedule), *_extra(result)]:
                writer(df, folder / table_file(name, fmt))
                written.append(table_file(name, fmt))
    text = json.dumps(_jsonable(result.summary), indent=2, allow_nan=False)
    (folder / SUMMARY_FILE).write_text(text + "\n", encoding="utf-8")
    written.append(SUMMARY_FILE)
    (folder / MARKER).write_text(json.dumps({"written_by": "portfolio", "files": written}) + "\n",
                                 encoding="utf-8")
    for name in written + [MARKER]:
        fsync_path(folder / name)
    fsync_path(folder)
    return written


_ACL_KEYS = ("system.posix_acl_access", "system.posix_acl_default")


def _copy_access(old: Path, new: Path) -> None:
    """Give ``new`` (and its files) the permission bits, group and ACLs of ``old``."""
    st = os.stat(old)
    with contextlib.suppress(OSError):          # only the owner or root may change the group
        os.chown(new, -1, st.st_gid)
    os.chmod(new, stat.S_IMODE(st.st_mode))
    file_mode = stat.S_IMODE(st.st_mode) & 0o666
    for f in new.iterdir():
        with contextlib.suppress(OSError):
            os.chown(f, -1, st.st_gid)
        os.chmod(f, file_mode & ~_umask())
    for key in _ACL_KEYS:                       # Linux: POSIX ACLs live in extended attributes
        with contextlib.suppress(OSError, AttributeError):
            os.setxattr(new, key, os.getxattr(old, key))


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def _turn(parent: Path, name: str):
    """Hold the advisory lock of output folder ``name`` in ``parent``; while it
    is held, remove temporary folders left by writers that were killed.

    The lock file is removed on release; a writer that waited on a file since
    removed (another inode now at the path, or none) tries again, so two
    writers never both hold it.
    """
    import fcntl

    lock_path = parent / f".{name}.lock"
    while True:
        fd = os.open(lock_path, os.O_RDWR | os.O_CREAT, 0o666)
        fcntl.flock(fd, fcntl.LOCK_EX)
        try:
            if os.stat(lock_path).st_ino == os.fstat(fd).st_ino:
                break
        except FileNotFoundError:
            pass
        os.close(fd)
    try:
        for stale in list(parent.glob(f".{name}.tmp-*")) + list(parent.glob(f".{name}.old-*")):
            if stale.is_dir() and not stale.is_symlink():
                shutil.rmtree(stale, ignore_errors=True)
        yield
    finally:
        with contextlib.suppress(OSError):
            os.unlink(lock_path)
        os.close(fd)          # releases the lock


folder_turn = _turn     # for portfolio.report: a report and a dispatch of one folder take turns


def check_output_folder(out_dir, portfolio) -> None:
    """Before a (possibly long) solve: would :func:`write` accept ``out_dir``?

    Runs the same refusal rules as :func:`write` and checks that a temporary
    folder can be made beside it; raises :class:`OutputFolderError` if not.
    Writes nothing that stays.
    """
    out = Path(out_dir).absolute()
    _check_target(out, type("_Pending", (), {"portfolio": portfolio})())
    parent = out.parent
    probe_root = parent
    while not probe_root.exists():     # the nearest folder that exists must be writable
        probe_root = probe_root.parent
    try:
        probe = tempfile.mkdtemp(prefix=f".{out.name}.probe-", dir=probe_root)
        os.rmdir(probe)
    except OSError as exc:
        raise OutputFolderError(f"cannot write beside {out}: {exc.strerror or exc}") from None


def write(result, out_dir, formats=("csv",)) -> Path:
    """Write ``result`` into ``out_dir``; returns the folder's path.

    Raises :class:`OutputFolderError` (nothing written) when the folder is
    not ours to replace or a format is unknown.
    """
    formats = tuple(dict.fromkeys(formats))
    bad = [f for f in formats if f not in FORMATS]
    if bad or not formats:
        raise OutputFolderError(f"unknown output format(s) {bad or formats}; use {FORMATS}")
    if "parquet" in formats:
        try:
            import pyarrow  # noqa: F401
        except ImportError:
            raise OutputFolderError("the parquet format needs pyarrow, which is not installed (pip install 'portfolio[parquet]')") from None
    out = Path(out_dir).absolute()
    _check_names(result)
    _check_target(out, result)
    parent = out.parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputFolderError(f"cannot create {parent}: {exc.strerror or exc}") from None
    try:
        with _turn(parent, out.name):
            _check_target(out, result)        # again: another writer may have been first
            _replace(result, out, parent, formats)
    except OSError as exc:
        raise OutputFolderError(f"cannot write in {parent}: {exc.strerror or exc}") from None
    return out


def _replace(result, out: Path, parent: Path, formats) -> None:
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.tmp-", dir=parent))
    try:
        _write_all(result, tmp, formats)
        if out.exists():
            _copy_access(out, tmp)
        else:
            os.chmod(tmp, 0o777 & ~_umask())
        if out.exists():
            old = parent / f".{out.name}.old-{uuid.uuid4().hex[:8]}"
            os.rename(out, old)
            try:
                os.rename(tmp, out)
            except BaseException:
                os.rename(old, out)
                raise
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.rename(tmp, out)
        fsync_path(parent)
    except OSError as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        raise OutputFolderError(f"writing {out} failed: {exc.strerror or exc}") from exc
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
