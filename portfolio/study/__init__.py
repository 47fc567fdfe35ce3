"""Studies: many dispatches of one portfolio, with settings or series varied, on Dask.

A ``study`` block in the file (docs/language.md, checked by
:mod:`portfolio.check.study`) names what varies; :mod:`.cases` makes each
case's model from the checked one; :mod:`.run` runs the cases on a Dask
cluster and keeps each finished case on disk; :mod:`.results` makes the
cases table and the plots.  :func:`run` joins them (docs/studies.md).
"""

from __future__ import annotations

import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, List, Optional

from .. import model as M
from .cases import Case, apply, case_key, cases
from .run import StudyError, chunk_sizes, pick, run_serial, run_study, solve_case

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["run", "StudyResult", "StudyError", "Case", "apply", "case_key", "cases", "pick", "run_serial",
           "run_study", "solve_case", "chunk_sizes", "table"]


@dataclass
class StudyResult:
    """What :func:`run` did: the cases table and how many cases it solved now."""

    study: M.Study
    frame: pd.DataFrame
    solved: int              # cases solved by this run
    skipped: int             # cases found done in the folder (same key), not solved again
    failed: int              # cases solved now whose status is not optimal or feasible
    sent_bytes: int          # what was scattered to the workers: the model and the study, once
    files: List[Path] = field(default_factory=list)


def run(p: M.Portfolio, name: Optional[str] = None, out=None, options=None, client=None,
        scheduler: Optional[str] = None, workers: Optional[int] = None, schedules: bool = False,
        plots: bool = True, progress=None, chunk: Optional[int] = None) -> StudyResult:
    """Run study ``name`` of ``p`` (the only one when None) into folder ``out`` (a
    temporary folder, removed afterwards, when None): see :func:`.run.run_study`.
    ``chunk``: cases a Dask task at most (None: the runner chooses, :func:`.run.chunk_sizes`;
    1: one case a task)."""
    from ..solve import SolveOptions
    from .results import table, write_plots, write_table
    study = pick(p, name)
    options = options or SolveOptions(threads=1)
    if out is None:
        with tempfile.TemporaryDirectory(prefix="portfolio-study-") as tmp:
            got = run(p, study.name, tmp, options, client, scheduler, workers, False, False, progress, chunk)
            got.files = []
            return got
    out = Path(out)
    got = run_study(p, study, out, options, client=client, scheduler=scheduler, workers=workers,
                    schedules=schedules, progress=progress, chunk=chunk,
                    idle=_ready_to_write if plots else None)
    df = table(study, cases(study), got["rows"])
    files = write_table(df, out)
    if plots:
        files += write_plots(study, df, out)
    return StudyResult(study, df, got["solved"], got["skipped"], got["failed"], got["sent_bytes"], files)


def _ready_to_write() -> None:
    """Import what the table and the plots need (matplotlib, pyarrow: about half a second)
    while the cases run on the cluster and this process only waits for them."""
    import matplotlib.figure  # noqa: F401
    import matplotlib.lines  # noqa: F401
    try:
        import pyarrow.parquet  # noqa: F401
    except ImportError:      # no parquet then (write_table)
        pass


def __getattr__(name: str):
    """``table`` (:func:`.results.table`) on first use: pandas is imported then, not by
    ``import portfolio.study`` (the study command starts its fork server before it)."""
    if name == "table":
        from .results import table
        return table
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
