"""``portfolio report DIR``: one self-contained HTML page of a dispatch output folder.

:func:`write_report` reads the folder through the results contract
(:mod:`.folder`), draws its charts with matplotlib as inline SVG
(:mod:`.charts`), lays out the page (:mod:`.page`) and writes
``DIR/report.html`` atomically: the marker first lists the report (so the
folder stays one a later dispatch may replace), then the page is written to
a temporary file beside it, flushed and renamed into place.  Nothing else in
the folder is touched; a folder that is not an output folder of this
version, or that holds files this tool did not write, is refused with
:class:`ReportError` and nothing is written.  Never prints (docs/report.md).
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path

from ..contract import MARKER, REPORT_FILE
from ..files import replace_atomically
from .folder import Folder, ReportError, check_folder, read
from .page import render

__all__ = ["write_report", "ReportError", "Report", "read", "render"]


@dataclass(frozen=True)
class Report:
    path: Path           # the page written
    status: str          # the dispatch's status, as summary.json states it
    charts: int          # charts on the page


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


def write_report(out_dir) -> Report:
    """Write ``out_dir/report.html`` for the output folder ``out_dir`` (see the module docstring)."""
    from ..writers import folder_turn

    folder = Path(out_dir).absolute()
    check_folder(folder)                  # before taking the lock: a plain reason, nothing made
    try:
        with folder_turn(folder.parent, folder.name):   # a dispatch may not replace it meanwhile
            listed = check_folder(folder)
            _refuse_foreign(folder, listed)
            data: Folder = read(folder)
            page, charts = render(data)
            if REPORT_FILE not in listed:
                marker = json.loads((folder / MARKER).read_text(encoding="utf-8"))
                marker["files"] = listed + [REPORT_FILE]
                _atomic_text(folder / MARKER, json.dumps(marker) + "\n")
            _atomic_text(folder / REPORT_FILE, page)
            fd = os.open(folder, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
    except OSError as exc:
        raise ReportError(f"cannot write {folder / REPORT_FILE}: {exc.strerror or exc}") from None
    return Report(folder / REPORT_FILE, str(data.summary["status"]), charts)
