"""``portfolio report DIR``: one self-contained HTML page of a dispatch output folder or a study folder.

:func:`write_report` reads the folder through the results contract
(:mod:`.folder`), draws its charts with matplotlib as inline SVG
(:mod:`.charts`), lays out the page (:mod:`.page`) and writes
``DIR/report.html`` atomically: the marker first lists the report (so the
folder stays one a later dispatch may replace), then the page is written to
a temporary file beside it, flushed and renamed into place.  Nothing else in
the folder is touched; a folder that is not an output folder of this
version, or that holds files this tool did not write, is refused with
:class:`ReportError` and nothing is written.  A study folder (its marker
``.portfolio-study``) gets the study's page (:mod:`.study`): only
``report.html`` is written there, and only over a page this tool wrote.
Never prints (docs/report.md).
"""

from __future__ import annotations

import json
import os
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from ..contract import MARKER, REPORT_FILE
from ..files import fsync_path, replace_atomically
from .folder import Folder, ReportError, check_folder, read
from .page import GENERATOR, render
from .study import is_study, read_study, render_study

__all__ = ["write_report", "ReportError", "Report", "read", "render", "read_study", "render_study"]


@dataclass(frozen=True)
class Report:
    path: Path           # the page written
    status: str          # the dispatch's status, as summary.json states it
    charts: int          # charts on the page
    note: str = ""       # what the page is of, when not a dispatch (a study: its cases)


def _refuse_foreign(folder: Path, listed) -> None:
    """Nothing in the folder but what the marker lists (an input folder is never written into)."""
    foreign = sorted(n for n in os.listdir(folder)
                     if n != MARKER and (n not in listed or not (folder / n).is_file()
                                         or (folder / n).is_symlink()))
    if foreign:
        shown = ", ".join(foreign[:5]) + (" ..." if len(foreign) > 5 else "")
        raise ReportError(f"{folder} holds files this tool did not write ({shown}); "
                          f"refusing to write a report into it")


def _atomic_text(path: Path, text: str) -> None:
    replace_atomically(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8", newline="\n"))


def _ours(page: Path) -> bool:
    """Whether an existing page is one this tool wrote (its generator tag near the top)."""
    if page.is_symlink() or not page.is_file():
        return False
    with open(page, "rb") as fh:
        head = fh.read(4096)
    return f'<meta name="generator" content="{GENERATOR}">'.encode() in head


@contextmanager
def _readable(folder: Path):
    """Reading and drawing a folder's tables: what they hold that this tool never writes (a
    cell no number, a row missing, a value beyond any plant, as after an edit in a
    spreadsheet) is a :class:`ReportError` naming the folder, not a traceback; numeric
    warnings of the drawing libraries are not shown (the page says what it drew)."""
    import warnings
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            warnings.simplefilter("ignore", UserWarning)
            yield
    except (ValueError, TypeError, KeyError, IndexError, ArithmeticError) as exc:
        raise ReportError(f"the tables in {folder} are not as this tool writes them (edited by hand "
                          f"or by another program?): {type(exc).__name__}: {exc}; write the folder "
                          f"again ('portfolio dispatch' or 'portfolio study') to report it") from None


def _write_study_report(folder: Path) -> Report:
    page = folder / REPORT_FILE
    if os.path.lexists(page) and not _ours(page):
        raise ReportError(f"{folder} holds a {REPORT_FILE} this tool did not write; refusing to replace it "
                          f"(move it away to report this study)")
    with _readable(folder):
        data = read_study(folder)
        text, charts = render_study(data)
    try:
        _atomic_text(page, text)
    except OSError as exc:
        raise ReportError(f"cannot write {page}: {exc.strerror or exc}") from None
    failed = int((~data.ok).sum())
    return Report(page, "study", charts, note=f"study of {len(data.cases)} cases, {failed} without a schedule")


def write_report(out_dir) -> Report:
    """Write ``out_dir/report.html`` for the output folder ``out_dir`` (see the module docstring)."""
    from ..writers import folder_turn

    folder = Path(out_dir).absolute()
    if folder.is_dir() and not folder.is_symlink() and not (folder / MARKER).exists() and is_study(folder):
        return _write_study_report(folder)
    check_folder(folder)                  # before taking the lock: a plain reason, nothing made
    try:
        with folder_turn(folder.parent, folder.name):   # a dispatch may not replace it meanwhile
            listed = check_folder(folder)
            _refuse_foreign(folder, listed)
            with _readable(folder):
                data: Folder = read(folder)
                page, charts = render(data)
            if REPORT_FILE not in listed:
                marker = json.loads((folder / MARKER).read_text(encoding="utf-8"))
                marker["files"] = listed + [REPORT_FILE]
                _atomic_text(folder / MARKER, json.dumps(marker) + "\n")
            _atomic_text(folder / REPORT_FILE, page)
            fsync_path(folder)
    except OSError as exc:
        raise ReportError(f"cannot write {folder / REPORT_FILE}: {exc.strerror or exc}") from None
    return Report(folder / REPORT_FILE, str(data.summary["status"]), charts)
