"""Running a study's cases on Dask (docs/studies.md).

:func:`run_study` runs every case of a study on a Dask cluster: a
``distributed.LocalCluster`` (processes, one worker a core, no dashboard,
127.0.0.1 only) that it starts and stops, an existing scheduler's address,
or a ``distributed.Client`` the caller holds.  The checked model goes to the
workers once (``client.scatter(..., broadcast=True)``); a task carries only
its case (a few numbers and names).  Each finished case is written as it
arrives, atomically (``DIR/cases/<case id>/case.json``, and with schedules
its output folder beside it), so a killed study loses no finished case; a
re-run skips every case whose key (:func:`portfolio.study.cases.case_key`)
is unchanged.  A case that fails (infeasible, an error) is recorded with its
status and message and the others go on.

:func:`solve_case` is the task; a serial loop over it (:func:`run_serial`)
gives the same rows without Dask.  Nothing here prints: progress goes to a
callback.
"""

from __future__ import annotations

import json
import os
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable, Dict, List, Optional

from .. import model as M
from ..files import replace_atomically
from .cases import Case, apply, case_key, cases

MARKER = ".portfolio-study"  # names the study folder ours (its portfolio file inside)
CASES_DIR = "cases"
CASE_FILE = "case.json"
SCHEDULE_DIR = "schedule"
ID_LENGTH = 16             # hex digits of the case key naming its folder
PRELOAD = "portfolio.study.worker"   # our local cluster's workers: quiet on Ctrl-C, pipeline imported

Progress = Callable[[int, int, int, int], None]   # (done, failed, skipped, total)


class StudyError(Exception):
    """A study that cannot run as asked (an unknown study, a folder that is not usable)."""


@dataclass(frozen=True)
class Planned:
    case: Case
    key: str

    @property
    def id(self) -> str:
        return self.key[:ID_LENGTH]


def pick(p: M.Portfolio, name: Optional[str]) -> M.Study:
    """The study ``name`` of ``p`` (the only one when ``name`` is None)."""
    if not p.studies:
        raise StudyError(f"portfolio '{p.name}' declares no study; add one ('study NAME {{ vary ... }}', "
                         "docs/studies.md)")
    if name is None:
        if len(p.studies) > 1:
            raise StudyError(f"portfolio '{p.name}' declares {len(p.studies)} studies "
                             f"({', '.join(p.studies)}); name the one to run")
        return next(iter(p.studies.values()))
    if name not in p.studies:
        raise StudyError(f"portfolio '{p.name}' has no study '{name}' (it has: {', '.join(p.studies)})")
    return p.studies[name]


def plan(p: M.Portfolio, study: M.Study, options) -> List[Planned]:
    return [Planned(c, case_key(apply(p, study, c), options)) for c in cases(study)]


def solve_case(p: M.Portfolio, study: M.Study, case: Case, options, schedule_dir: Optional[str] = None) -> dict:
    """The task: dispatch one case and return its row (plain data).  Never raises for a
    case that fails: its status is ``error`` and its message says why."""
    t0 = time.perf_counter()
    row = {"status": "error", "objective": None, "gap": None, "bound": None, "windows": 0, "message": "",
           "assets": {}, "build_s": None, "solve_s": None, "worker": _worker()}
    try:
        result = _dispatch(apply(p, study, case), options)
        row.update(status=result.status, objective=result.objective, gap=result.mip_gap, bound=result.best_bound,
                   windows=(result.summary.get("windows") or {}).get("count") or 0,
                   message=result.message or "", build_s=result.build_seconds, solve_s=result.solve_seconds,
                   assets=_assets(result.summary))
        if schedule_dir is not None and result.has_schedule:
            result.write(schedule_dir)
    except Exception as e:        # a case's failure is its row, never the study's end
        row["message"] = f"{type(e).__name__}: {e}"
    row["wall_s"] = time.perf_counter() - t0
    return row


def _dispatch(m: M.Portfolio, options):
    """One case's dispatch, as ``LoadedPortfolio.dispatch`` does it by default: by windows (a day
    seeing a day more, one after another on the case's worker) when
    :func:`portfolio.windows.by_default` says so (a horizon above 31 days with binary rules),
    else one MILP.  Then the row's ``gap`` and ``bound`` are the stitched schedule's against the
    whole horizon's LP relaxation, and ``windows`` counts the windows."""
    from ..windows import by_default
    spec = by_default(m)
    if spec is not None:
        from ..windows import dispatch_windows
        return dispatch_windows(m, spec, options)
    from ..dispatch import dispatch
    return dispatch(m, options)


def _assets(summary: dict) -> dict:
    """Per storage and supply: net value, equivalent full cycles, curtailed MWh (as summary.json)."""
    return {group: {name: {k: figures.get(k) for k in ("net_value", "equivalent_full_cycles", "curtailed_mwh")
                           if figures.get(k) is not None}
                    for name, figures in (summary.get(group) or {}).items()}
            for group in ("storages", "supplies")}


def _worker() -> str:
    try:
        from distributed import get_worker
        return get_worker().address
    except (ImportError, ValueError):
        return "in-process"


# ---- the folder ----------------------------------------------------------------------

def case_dir(out_dir: Path, planned: Planned) -> Path:
    return Path(out_dir) / CASES_DIR / planned.id


def finished(out_dir: Path, planned: Planned, schedules: bool) -> Optional[dict]:
    """The stored row of a case already done with the same key, or None."""
    folder = case_dir(out_dir, planned)
    try:
        stored = json.loads((folder / CASE_FILE).read_text())
    except (OSError, ValueError):
        return None
    if stored.get("key") != planned.key or stored.get("lost"):
        return None            # changed inputs, or a task that never ran to its end (a worker lost)
    if schedules and stored.get("status") in ("optimal", "feasible") and not (folder / SCHEDULE_DIR).is_dir():
        return None
    return stored


def record(out_dir: Path, planned: Planned, row: dict) -> dict:
    """Write a finished case's row, atomically; it marks the case done."""
    stored = dict(row, key=planned.key, case=planned.id, index=planned.case.index)
    folder = case_dir(out_dir, planned)
    folder.mkdir(parents=True, exist_ok=True)
    text = json.dumps(stored, indent=1, default=float)
    replace_atomically(folder / CASE_FILE, lambda tmp: Path(tmp).write_text(text))
    return stored


def check_folder(out_dir: Path, p: M.Portfolio) -> Optional[str]:
    """Why ``out_dir`` cannot hold a study (None when it can): it must be new, empty, or one
    this tool made for a study (its marker); a file the portfolio reads is never inside."""
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        return f"'{out_dir}' exists and is not a folder"
    if out.is_dir() and any(out.iterdir()) and not (out / MARKER).is_file():
        return (f"'{out_dir}' is not empty and was not made by 'portfolio study'; choose a new folder "
                "(nothing in it is replaced)")
    real = out.resolve()
    for f in p.inputs:
        if real in Path(f).resolve().parents:
            return f"the study folder '{out_dir}' holds an input of the portfolio ({f}); choose a new folder"
    return None


def _mark(out_dir: Path, p: M.Portfolio) -> None:
    replace_atomically(out_dir / MARKER, lambda tmp: Path(tmp).write_text(f"portfolio study of {p.path}\n"))


# ---- running -------------------------------------------------------------------------

def run_serial(p: M.Portfolio, study: M.Study, options) -> List[dict]:
    """Every case's row, one after the other in this process (no Dask, no files)."""
    return [dict(solve_case(p, study, pl.case, options), case=pl.id, index=pl.case.index)
            for pl in plan(p, study, options)]


def run_study(p: M.Portfolio, study: M.Study, out_dir, options, client=None, scheduler: Optional[str] = None,
              workers: Optional[int] = None, schedules: bool = False,
              progress: Optional[Progress] = None) -> Dict[str, object]:
    """Run the cases not yet done into ``out_dir``; returns ``{"rows": [...], "solved": n,
    "skipped": n, "failed": n, "sent_bytes": n}`` (rows in case order, done before or now)."""
    out_dir = Path(out_dir)
    problem = check_folder(out_dir, p)
    if problem:
        raise StudyError(problem)
    (out_dir / CASES_DIR).mkdir(parents=True, exist_ok=True)
    _mark(out_dir, p)
    planned = plan(p, study, options)
    rows: Dict[int, dict] = {}
    todo = []
    for pl in planned:
        got = finished(out_dir, pl, schedules)
        if got is None:
            todo.append(pl)
        else:
            rows[pl.case.index] = got
    total, skipped = len(planned), len(rows)
    done = failed = 0
    sent = 0
    tell = progress or (lambda *a: None)
    tell(0, 0, skipped, total)
    if todo:
        own, client = (None, client) if client is not None else _start(scheduler, workers)
        try:
            shared = replace(p, studies={})       # the study goes on its own: scenario series
            sent = _size(shared) + _size(study)
            pf = client.scatter(shared, broadcast=True)
            sf = client.scatter(study, broadcast=True)
            by_key: Dict[str, List[Planned]] = {}
            for pl in todo:                    # cases with the same inputs are solved once
                by_key.setdefault(f"case-{pl.key}", []).append(pl)
            keys = list(by_key)
            sched = [str(case_dir(out_dir, by_key[k][0]) / SCHEDULE_DIR) if schedules else None for k in keys]
            n = len(keys)
            # one message for every task (client.map), and the rows gathered as tasks finish
            # (as_completed with_results): Dask's own cost per task is then a few milliseconds
            # (docs/performance.md, "Studies")
            futures = client.map(solve_case, [pf] * n, [sf] * n, [by_key[k][0].case for k in keys],
                                 [options] * n, sched, key=keys, pure=False, retries=0)
            from distributed import as_completed
            for fut, got in as_completed(futures, with_results=True, raise_errors=False):
                row = got if fut.status == "finished" and isinstance(got, dict) else _lost(fut, got)
                for pl in by_key.pop(fut.key):
                    rows[pl.case.index] = record(out_dir, pl, row)
                    done += 1
                    failed += row["status"] not in ("optimal", "feasible")
                tell(done, failed, skipped, total)
        finally:
            if own is not None:
                _stop(client, own)
    return {"rows": [rows[pl.case.index] for pl in planned], "solved": done, "skipped": skipped,
            "failed": failed, "sent_bytes": sent, "ids": [pl.id for pl in planned]}


def _lost(fut, got) -> dict:
    """The row of a task that did not return one (a worker lost, the task cancelled, ...):
    recorded, but marked ``lost`` so that a re-run solves the case again."""
    if isinstance(got, tuple) and len(got) == 3 and isinstance(got[1], BaseException):
        got = got[1]                   # Dask's (type, error, traceback) of a task that raised
    e = got if isinstance(got, BaseException) else None
    if e is None:
        try:
            e = fut.exception()
        except BaseException as x:     # cancelled: its own error says so
            e = x
    what = f"{type(e).__name__}: {e}" if e is not None else f"the task ended as '{fut.status}'"
    return {"status": "error", "message": what, "assets": {}, "objective": None, "gap": None, "bound": None,
            "windows": 0, "worker": "", "lost": True}


def _size(x) -> int:
    """Bytes of ``x`` as Dask pickles a scattered object."""
    from distributed.protocol.pickle import dumps
    return len(dumps(x))


def _start(scheduler: Optional[str], workers: Optional[int]):
    """(what to stop afterwards, a client): a client of ``scheduler``, or of a local
    cluster of processes on 127.0.0.1 (one a core, one thread each, no dashboard)."""
    from distributed import Client
    if scheduler:
        try:
            client = Client(scheduler, timeout=30)
        except (OSError, TimeoutError) as e:
            raise StudyError(f"cannot reach the Dask scheduler at {scheduler}: {e}") from None
        return (), client
    cluster = local_cluster(workers or os.cpu_count() or 1)
    return (cluster,), Client(cluster)


def local_cluster(workers: int):
    """The local cluster a study starts: ``workers`` processes of one thread on 127.0.0.1, the
    scheduler's HTTP server (no dashboard) on a free port of 127.0.0.1 (a fixed port in use would
    make Dask warn on stderr), the workers preloaded with :mod:`portfolio.study.worker` (they
    ignore Ctrl-C: the process that started them closes them) and their logs silenced."""
    import logging

    from distributed import LocalCluster
    return LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, host="127.0.0.1",
                        dashboard_address="127.0.0.1:0", scheduler_kwargs={"dashboard": False},
                        silence_logs=logging.CRITICAL, preload=[PRELOAD])


def _stop(client, own) -> None:
    for thing in (client, *own):
        try:
            thing.close()
        except Exception:        # already gone (a Ctrl-C on its way): nothing to stop
            pass
