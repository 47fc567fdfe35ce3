"""Running a study's cases on Dask (docs/studies.md).

:func:`run_study` runs every case of a study on a Dask cluster: a
``distributed.LocalCluster`` (processes, one worker a core, no dashboard,
127.0.0.1 only, the workers forked from a fork server that imported the
pipeline once) that it starts and stops, an existing scheduler's address,
or a ``distributed.Client`` the caller holds.  The checked model goes to the
workers once (``client.scatter(..., broadcast=True)``); a task carries a
chunk of cases (:func:`chunk_sizes`: large first, single cases last), each a
few numbers and names, and sends each case's row back as soon as the case is
done (an event the client subscribed to) as well as all of them at its end.
Each finished case is written as it arrives, atomically
(``DIR/cases/<case id>/case.json``, and with schedules its output folder
beside it), so a killed study loses no finished case; a re-run skips every
case whose key (:func:`portfolio.study.cases.case_key`) is unchanged.  A case
that fails (infeasible, an error) is recorded with its status and message
and the others go on, those of its chunk too.  While its own local cluster
starts, this process solves small cases itself (:func:`small`).

:func:`solve_case` is a case; :func:`solve_chunk` the task; a serial loop over
the cases (:func:`run_serial`) gives the same rows without Dask.  Nothing
here prints: progress goes to a callback.
"""

from __future__ import annotations

import json
import math
import os
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable, Dict, List, Optional

from .. import model as M
from ..files import replace_atomically
from .cases import Case, apply, case_key, cases, shared_parts

MARKER = ".portfolio-study"  # names the study folder ours (its portfolio file and study inside)
STUDY_LINE = "study"         # the marker's line naming the study: "study NAME of portfolio NAME"
LOCK = ".portfolio-study.lock"  # held (flock) by the run writing into the folder; kept, empty
CASES_DIR = "cases"
CASE_FILE = "case.json"
SCHEDULE_DIR = "schedule"
ID_LENGTH = 16             # hex digits of the case key naming its folder
SMALL_CASE = 2000          # steps x storages of a case this process solves while its cluster starts
MAX_CHUNK = 16             # cases a task at most when the runner chooses (chunk_sizes)
GUIDED = 2                 # a task takes 1/(GUIDED x workers) of the cases left
START_METHOD = "forkserver"  # how our local cluster's workers start (local_cluster)
FORKSERVER_PRELOAD = ("distributed", "portfolio.study.worker", "portfolio.dispatch", "portfolio.windows")
# Dask's background work in our local cluster's processes, slowed where nothing reads it (no
# dashboard): the statistical profiler that samples each task every 10 ms, the event loop's
# 20 ms tick and the 500 ms system monitor (docs/performance.md, "Studies on Dask")
QUIET = {"distributed.worker.profile.enabled": False, "distributed.admin.tick.interval": "1s",
         "distributed.admin.system-monitor.interval": "2s"}
CONNECT_TIMEOUT = 30       # s: reaching a scheduler (--scheduler)
WORKER_TIMEOUT = 30        # s: a scheduler's first worker, for the model to reach it
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
    memo = shared_parts(p)     # the parts the cases share are hashed once (case_key)
    return [Planned(c, case_key(apply(p, study, c), options, memo)) for c in cases(study)]


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
    w = _current_worker()
    return w.address if w is not None else "in-process"


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


def check_folder(out_dir: Path, p: M.Portfolio, study: Optional[M.Study] = None) -> Optional[str]:
    """Why ``out_dir`` cannot hold a study (None when it can): it must be new, empty, or one
    this tool made for a study (its marker) — for ``study`` of ``p`` when given (another
    study's table and plots would be replaced); a file the portfolio reads is never inside."""
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        return f"'{out_dir}' exists and is not a folder"
    if out.is_dir() and any(out.iterdir()) and not (out / MARKER).is_file():
        return (f"'{out_dir}' is not empty and was not made by 'portfolio study'; choose a new folder "
                "(nothing in it is replaced)")
    if study is not None and (out / MARKER).is_file():
        theirs = marked_study(out)
        if theirs is not None and theirs != (study.name, p.name):
            return (f"'{out_dir}' holds the cases of study '{theirs[0]}' of portfolio '{theirs[1]}'; "
                    f"choose a new folder for study '{study.name}' of portfolio '{p.name}' (each study "
                    "keeps its own folder: its cases table and plots would replace the other's)")
    real = out.resolve()
    for f in p.inputs:
        if real in Path(f).resolve().parents:
            return f"the study folder '{out_dir}' holds an input of the portfolio ({f}); choose a new folder"
    return None


def check_address(address: str) -> None:
    """Refuse (:class:`StudyError`) what cannot be a Dask scheduler's address, before
    anything starts or is written: empty, an unknown scheme, a TCP address without a port
    (Dask's own parsing; whether a scheduler answers there is found when it is reached)."""
    from distributed.comm.addressing import parse_address, parse_host_port
    from distributed.comm.registry import get_backend
    hint = "write tcp://HOST:PORT, the address 'dask scheduler' prints"
    if not isinstance(address, str) or not address.strip():
        raise StudyError(f"the scheduler's address is empty; {hint}")
    try:
        scheme, where = parse_address(address)
        get_backend(scheme)
        if scheme in ("tcp", "tls"):
            _, port = parse_host_port(where)
            if not 0 < int(port) < 65536:
                raise ValueError(f"port {port} is out of range")
    except ValueError as e:
        raise StudyError(f"'{address}' is not a Dask scheduler's address ({e}); {hint}") from None


def fresh(out_dir) -> bool:
    """Whether ``out_dir`` holds no case yet (missing, empty, or a study folder without
    cases): every case of a study run into it is still to run."""
    cases = Path(out_dir) / CASES_DIR
    try:
        return not cases.is_dir() or not any(cases.iterdir())
    except OSError:            # unreadable: what writes there says so (check_folder, mkdir)
        return True


def _lock(out_dir: Path):
    """The folder's lock (an open file holding ``flock``), or None where the file system
    has no locks; :class:`StudyError` when another run holds it.  The kernel lets go of
    it when its process ends, however it ends (a killed study leaves no stale lock)."""
    try:
        import fcntl
    except ImportError:        # no flock on this system: one run at a time is the user's
        return None
    f = open(Path(out_dir) / LOCK, "a")
    try:
        fcntl.flock(f.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        f.close()
        raise StudyError(f"another 'portfolio study' is writing into '{out_dir}' now; let it end "
                         "(running it again afterwards resumes where it ended) or choose another "
                         "folder") from None
    except OSError:            # a file system without locks (some network ones): run unlocked
        pass
    return f


def _mark(out_dir: Path, p: M.Portfolio, study: M.Study) -> None:
    text = f"portfolio study of {p.path}\n{STUDY_LINE} {study.name} of portfolio {p.name}\n"
    replace_atomically(out_dir / MARKER, lambda tmp: Path(tmp).write_text(text))


def marked_study(out_dir: Path) -> Optional[tuple]:
    """(study, portfolio) named by the marker of study folder ``out_dir``; None for a marker
    that names none (written before markers did) or cannot be read."""
    try:
        lines = (Path(out_dir) / MARKER).read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError):
        return None
    for line in lines:
        if line.startswith(f"{STUDY_LINE} "):
            # a study's name is a word; the portfolio's may hold spaces (a file's name stands
            # for it when the file names none): all after " of portfolio " is the portfolio's
            study, sep, portfolio = line[len(STUDY_LINE) + 1:].partition(" of portfolio ")
            return (study, portfolio) if sep else (line, "?")    # unreadable: never this study
    return None


# ---- running -------------------------------------------------------------------------

def run_serial(p: M.Portfolio, study: M.Study, options) -> List[dict]:
    """Every case's row, one after the other in this process (no Dask, no files)."""
    return [dict(solve_case(p, study, pl.case, options), case=pl.id, index=pl.case.index)
            for pl in plan(p, study, options)]


def run_study(p: M.Portfolio, study: M.Study, out_dir, options, client=None, scheduler: Optional[str] = None,
              workers: Optional[int] = None, schedules: bool = False,
              progress: Optional[Progress] = None, chunk: Optional[int] = None,
              idle: Optional[Callable[[], None]] = None) -> Dict[str, object]:
    """Run the cases not yet done into ``out_dir``; returns ``{"rows": [...], "solved": n,
    "skipped": n, "failed": n, "sent_bytes": n}`` (rows in case order, done before or now).
    ``idle``: called in a thread of its own while the cases run on the cluster (this
    process waits for them then), joined before the return: work for afterwards done
    meanwhile (the plots' imports, :func:`portfolio.study.run`)."""
    out_dir = Path(out_dir)
    chunk_sizes(1, 1, chunk)          # a bad chunk is refused before anything starts
    if scheduler is not None:
        check_address(scheduler)      # so is an address that cannot be one
    problem = check_folder(out_dir, p, study)
    if problem:
        raise StudyError(problem)
    try:
        (out_dir / CASES_DIR).mkdir(parents=True, exist_ok=True)
        lock = _lock(out_dir)
    except OSError as e:
        raise StudyError(f"cannot write the study folder '{out_dir}': "
                         f"{e.strerror or e}") from None
    try:
        return _run_locked(p, study, out_dir, options, client, scheduler, workers, schedules, progress,
                           chunk, idle)
    finally:
        if lock is not None:
            lock.close()             # and the lock with it


def _run_locked(p, study, out_dir: Path, options, client, scheduler, workers, schedules, progress, chunk,
                idle) -> Dict[str, object]:
    """:func:`run_study` holding the folder's lock."""
    try:
        _mark(out_dir, p, study)
    except OSError as e:
        raise StudyError(f"cannot write the study folder '{out_dir}': "
                         f"{e.strerror or e}") from None
    # a fresh folder: every case is to run, so our local cluster (and its fork server) starts
    # now, while the cases are planned; in a folder with rows, only once a case is found
    # still to run.  A scheduler's address is reached after planning, as before: a Ctrl-C
    # or an error while planning does not wait on a connection that may take 30 s
    local = client is None and scheduler is None and fresh(out_dir)
    starting = _start_local(workers) if local else None
    try:
        return _run_planned(p, study, out_dir, options, client, scheduler, workers, schedules,
                            progress, chunk, starting, idle)
    finally:
        if starting is not None:
            starting.stop()


def _run_planned(p, study, out_dir: Path, options, client, scheduler, workers, schedules, progress,
                 chunk, starting: Optional["_Starting"], idle=None) -> Dict[str, object]:
    """:func:`run_study` once its folder is checked (``starting``: the cluster's start, if
    already begun; stopped by the caller)."""
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
        by_key: Dict[str, List[Planned]] = {}
        for pl in todo:                        # cases with the same inputs are solved once
            by_key.setdefault(pl.key, []).append(pl)

        def arrived(key: str, row: dict) -> None:
            nonlocal done, failed
            same = by_key.pop(key, ())         # none: seen before (its event, then its chunk's end)
            for pl in same:
                rows[pl.case.index] = record(out_dir, pl, row)
                done += 1
                failed += row["status"] not in ("optimal", "feasible")
            if same:
                tell(done, failed, skipped, total)

        own = None
        if client is None:
            own = (starting if starting is not None else
                   _Starting(scheduler, workers) if scheduler is not None else _start_local(workers))
        try:
            if own is not None:
                if scheduler is None and small(p):
                    _meanwhile(own, p, study, by_key, options, out_dir if schedules else None, arrived)
                client = own.client()
            shared = replace(p, studies={})       # the study goes on its own: scenario series
            sent = _size(shared) + _size(study)
            if by_key:
                meanwhile = _in_thread(idle) if idle is not None else None
                try:
                    _run_chunks(client, shared, study, by_key, options, out_dir if schedules else None,
                                chunk_sizes(len(by_key), _threads(client, workers), chunk), arrived)
                finally:
                    if meanwhile is not None:
                        meanwhile.join()     # never left running into the interpreter's exit
        finally:
            if own is not None and own is not starting:
                own.stop()
    return {"rows": [rows[pl.case.index] for pl in planned], "solved": done, "skipped": skipped,
            "failed": failed, "sent_bytes": sent, "ids": [pl.id for pl in planned]}


def _in_thread(work: Callable[[], None]):
    """``work()`` started in a daemon thread; its errors are its own (nothing needs it)."""
    import threading

    def quietly():
        try:
            work()
        except Exception:        # what it prepares is done again, or fails, where it is used
            pass
    thread = threading.Thread(target=quietly, daemon=True, name="portfolio-study-meanwhile")
    thread.start()
    return thread


def small(p: M.Portfolio) -> bool:
    """Whether ``p``'s cases are small enough for this process to solve some while its local
    cluster starts: one MILP each (no windows), at most :data:`SMALL_CASE` steps x storages."""
    from ..windows import by_default
    return by_default(p) is None and p.horizon.steps * max(1, len(p.storages)) <= SMALL_CASE


class _Starting:
    """A cluster starting (:func:`_start`) in a thread of its own, so that this process
    can solve cases meanwhile."""

    def __init__(self, scheduler: Optional[str], workers: Optional[int]):
        import threading
        self._got: tuple = ()
        self._error: Optional[BaseException] = None
        self._scheduler = scheduler
        # a scheduler's connection is waited for at most this long; our own cluster's start
        # as long as it takes (it ends, or fails with its own error)
        self._limit = 2 * CONNECT_TIMEOUT if scheduler else None
        self._abandoned = False
        self._thread = threading.Thread(target=self._run, args=(scheduler, workers), daemon=True,
                                        name="portfolio-study-start")
        self._thread.start()

    def _run(self, scheduler, workers) -> None:
        try:
            self._got = _start(scheduler, workers)
        except BaseException as e:     # handed to the thread that waits for the client
            self._error = e

    def ready(self) -> bool:
        return not self._thread.is_alive()

    def client(self):
        self._thread.join(self._limit)
        if self._thread.is_alive():    # an address where something answers, but not Dask
            self._abandoned = True
            raise StudyError(f"no Dask scheduler answered at {self._scheduler} within "
                             f"{self._limit:g} s (is it the address 'dask scheduler' printed?); "
                             "no case was sent")
        if self._error is not None:
            raise self._error
        return self._got[1]

    def stop(self) -> None:
        """Close what was started (once it has started: a start is not cut short, but a
        connection that never answered is left to its daemon thread)."""
        if self._abandoned:
            return
        self._thread.join(self._limit)
        if self._got:
            _stop(self._got[1], self._got[0])


def _start_local(workers: Optional[int]) -> "_Starting":
    """Our local cluster starting in its thread, its fork server started first from this
    (the calling, main) thread, the only one where it is born ignoring Ctrl-C (:func:`warm`)."""
    warm()
    return _Starting(None, workers)


def _meanwhile(starting: _Starting, p: M.Portfolio, study: M.Study, by_key: Dict[str, List[Planned]], options,
               out_dir: Optional[Path], arrived: Callable[[str, dict], None]) -> None:
    """Solve cases in this process, the last ones first (those the chunks would give out
    last, alone), one at a time until the cluster is up: the start's second or so is then
    not lost to the study (docs/studies.md).  A row is recorded as :func:`solve_chunk`'s."""
    for key in reversed(list(by_key)):
        if starting.ready():
            return
        pl = by_key[key][0]
        arrived(key, _plain(solve_case(p, study, pl.case, options, _schedule(out_dir, pl))))


def chunk_sizes(n: int, workers: int, chunk: Optional[int] = None) -> List[int]:
    """How many cases each task takes, in the order the tasks are submitted.

    ``chunk`` given: that many a task (the last takes the rest).  None: guided sizes, each
    task a ``GUIDED``-th of the cases left divided by the workers, at most ``MAX_CHUNK``, so
    the tasks come large first and single cases last: Dask's cost per task (a few ms) is paid
    a few times a worker rather than once a case, and the last tasks, short, keep every worker
    busy to the end (Dask starts tasks in the order they were submitted)."""
    if n <= 0:
        return []
    if chunk is not None:
        if not isinstance(chunk, int) or chunk < 1:
            raise StudyError(f"chunk must be a whole number of cases from 1 up, got {chunk!r}")
        return [chunk] * (n // chunk) + ([n % chunk] if n % chunk else [])
    sizes, left = [], n
    while left:
        k = min(MAX_CHUNK, left, max(1, math.ceil(left / (GUIDED * max(1, workers)))))
        sizes.append(k)
        left -= k
    return sizes


def _threads(client, workers: Optional[int]) -> int:
    """The cases that can run at once on ``client``'s cluster (its workers' threads)."""
    try:
        info = client.scheduler_info()
        return max(1, sum(int(w.get("nthreads", 1)) for w in info.get("workers", {}).values()))
    except Exception:          # a scheduler that does not say: the workers asked for, else one
        return workers or 1


def _run_chunks(client, shared: M.Portfolio, study: M.Study, by_key: Dict[str, List[Planned]], options,
                out_dir: Optional[Path], sizes: List[int], arrived: Callable[[str, dict], None]) -> None:
    """Send the cases of ``by_key`` to ``client`` in tasks of ``sizes`` cases and call
    ``arrived(key, row)`` in this thread as each case finishes.

    A chunk's task (:func:`solve_chunk`) sends each case's row as an event on a topic of
    this run as soon as the case is done (``Worker.log_event``; the scheduler forwards it
    to this client, which subscribed before submitting), and returns every row at its
    end: a row whose event was late or lost arrives then.  A task that returns no rows (a
    worker lost) makes a ``lost`` row for the case it was solving, and its cases not yet
    started go out again in a task of their own."""
    import queue
    import uuid

    keys = list(by_key)
    groups, at = [], 0
    for k in sizes:
        groups.append(keys[at:at + k])
        at += k
    try:
        pf = client.scatter(shared, broadcast=True, timeout=WORKER_TIMEOUT)
        sf = client.scatter(study, broadcast=True, timeout=WORKER_TIMEOUT)
    except TimeoutError as e:      # asyncio's is the builtin's since Python 3.11
        raise StudyError(f"the Dask scheduler has no worker to run the cases ({e} within "
                         f"{WORKER_TIMEOUT:g} s): start one ('dask worker ADDRESS') and run the "
                         "study again (the cases written so far stay)") from None
    topic = f"portfolio-study-{uuid.uuid4().hex}"
    inbox: "queue.SimpleQueue" = queue.SimpleQueue()
    client.subscribe_topic(topic, lambda event: inbox.put(("row", event[1])))
    try:
        n = len(groups)
        cases_of = [[(k, by_key[k][0].case) for k in g] for g in groups]
        sched = [[_schedule(out_dir, by_key[k][0]) for k in g] for g in groups]
        names = [f"cases-{g[0][:ID_LENGTH]}-{len(g)}" for g in groups]
        # one message for every task (client.map); rows back as events; docs/performance.md
        futures = client.map(solve_chunk, [pf] * n, [sf] * n, cases_of, [options] * n, sched, [topic] * n,
                             key=names, pure=False, retries=0)
        members = dict(zip(names, groups))
        attempts: Dict[str, int] = {}
        for fut in futures:
            fut.add_done_callback(lambda f: inbox.put(("end", f)))
        while members:
            try:
                what, x = inbox.get(timeout=0.5)   # a timeout so that a Ctrl-C is seen here
            except queue.Empty:
                continue
            if what == "row":
                arrived(*x)
                continue
            got = None
            if x.status == "finished":
                try:
                    got = x.result()
                except Exception as e:    # it went away between its end and this gather
                    got = e
            if isinstance(got, list):
                for key, row in got:
                    arrived(key, row)
            else:
                # its cases run in order and each row comes back as it ends: when its worker
                # died under it (KilledWorker), the first case without a row was running (it
                # is recorded lost, and a re-run solves it again); the others go out once more
                # in a task of their own, with the model scattered again (a lost worker may
                # have held the only copy).  A task that fails twice otherwise: all recorded lost.
                left = [k for k in members[x.key] if k in by_key]
                killed = type(got).__name__ == "KilledWorker" or _killed(x)
                if left and killed:
                    arrived(left[0], _lost(x, got))
                rest = [k for k in (left[1:] if killed else left) if k in by_key]
                tries = attempts.get(x.key, 0) + (not killed)
                if rest and x.status != "cancelled" and tries < 2:
                    pf = client.scatter(shared, broadcast=True)
                    sf = client.scatter(study, broadcast=True)
                    again = client.submit(solve_chunk, pf, sf, [(k, by_key[k][0].case) for k in rest], options,
                                          [_schedule(out_dir, by_key[k][0]) for k in rest], topic,
                                          key=f"cases-{rest[0][:ID_LENGTH]}-{len(rest)}-{uuid.uuid4().hex[:8]}",
                                          pure=False, retries=0)
                    members[again.key], attempts[again.key] = rest, tries
                    again.add_done_callback(lambda f: inbox.put(("end", f)))
                else:
                    for key in rest:
                        arrived(key, _lost(x, got))
            del members[x.key]
    finally:
        try:
            client.unsubscribe_topic(topic)
        except Exception:        # the client already closed (a Ctrl-C on its way)
            pass


def _killed(fut) -> bool:
    """Whether ``fut`` erred because its worker died under it (Dask's KilledWorker)."""
    try:
        return type(fut.exception(timeout=5)).__name__ == "KilledWorker"
    except Exception:        # cancelled, or the client gone
        return False


def _schedule(out_dir: Optional[Path], planned: Planned) -> Optional[str]:
    """Where a case's schedule folder goes (None: no schedules asked for)."""
    return str(case_dir(out_dir, planned) / SCHEDULE_DIR) if out_dir is not None else None


def solve_chunk(p: M.Portfolio, study: M.Study, keyed: List[tuple], options, schedule_dirs: List[Optional[str]],
                topic: Optional[str] = None) -> List[tuple]:
    """A task of several cases: ``[(key, row), ...]`` of :func:`solve_case`, one after the
    other; each row also goes out as an event on ``topic`` as soon as its case is done, so
    that the client records it then rather than at the chunk's end."""
    out = []
    worker = _current_worker() if topic else None
    for (key, case), folder in zip(keyed, schedule_dirs):
        row = _plain(solve_case(p, study, case, options, folder))
        out.append((key, row))
        if worker is not None:
            try:
                worker.log_event(topic, (key, row))
            except Exception:     # the chunk's return carries the row all the same
                pass
    return out


def _plain(row: dict) -> dict:
    """``row`` as JSON data (numbers from numpy become floats): what an event may carry and
    what case.json stores."""
    return json.loads(json.dumps(row, default=float))


def _current_worker():
    try:
        from distributed import get_worker
        return get_worker()
    except (ImportError, ValueError):
        return None


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
            client = Client(scheduler, timeout=CONNECT_TIMEOUT)
        except (OSError, TimeoutError, ValueError) as e:
            raise StudyError(f"cannot reach the Dask scheduler at {scheduler}: {e} (is a "
                             f"scheduler running there?)") from None
        return (), client
    cluster = local_cluster(workers or os.cpu_count() or 1)
    return (cluster,), Client(cluster)


def local_cluster(workers: int, method: Optional[str] = None):
    """The local cluster a study starts: ``workers`` processes of one thread on 127.0.0.1, the
    scheduler's HTTP server (no dashboard) on a free port of 127.0.0.1 (a fixed port in use would
    make Dask warn on stderr), the workers preloaded with :mod:`portfolio.study.worker` (they
    ignore Ctrl-C: the process that started them closes them) and their logs silenced.

    ``method`` (default :data:`START_METHOD`) is how the worker processes start
    (Dask's ``distributed.worker.multiprocessing-method``): ``forkserver`` forks them from a
    fresh single-threaded server process that imported Dask and the dispatch pipeline once
    (:data:`FORKSERVER_PRELOAD`), where ``spawn`` has each worker start an interpreter and
    import all of it again.  ``fork`` (copying this process, its threads' held locks and
    all) is refused: it started workers in 0.2 s but hung a study whose process was solving
    cases while its cluster started (docs/performance.md, "Studies on Dask")."""
    import logging

    import dask
    from distributed import LocalCluster
    method = method or START_METHOD
    if method not in ("forkserver", "spawn"):      # fork: see the docstring
        raise StudyError(f"unknown start method '{method}' (forkserver or spawn)")
    with dask.config.set({"distributed.worker.multiprocessing-method": method, **QUIET}):
        if method == "forkserver":
            warm(method)
            _ours_preloaded()
        return LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, host="127.0.0.1",
                            dashboard_address="127.0.0.1:0", scheduler_kwargs={"dashboard": False},
                            silence_logs=logging.CRITICAL, preload=[PRELOAD])


def warm(method: Optional[str] = None) -> None:
    """Start multiprocessing's fork server now (once a process), importing what a worker
    needs, so that each worker forked from it later starts with it imported; called before
    the cases are planned, the server's imports run meanwhile.  Nothing for other methods.

    Dask itself is not imported here (0.6-1 s): this process goes on with its own work
    (reading the file, planning, cases) while the server imports it."""
    if (method or START_METHOD) != "forkserver":
        return
    import multiprocessing
    from multiprocessing import forkserver

    multiprocessing.get_context("forkserver").set_forkserver_preload(list(FORKSERVER_PRELOAD))
    if multiprocessing.parent_process() is None:     # not from inside a worker
        # born ignoring SIGINT (it survives exec; Python installs no handler over it): a
        # terminal's Ctrl-C reaches the whole process group, and the server, busy with its
        # imports for a second, would print a traceback; the workers forked from it ignore
        # it from their first instruction too.  This process ignores it only while the
        # server forks and execs (the windows' pool does the same).
        from ..children import ignoring_ctrl_c
        with ignoring_ctrl_c():
            forkserver.ensure_running()


def _ours_preloaded() -> None:
    """Tell Dask the fork server's preload is set (by :func:`warm`): on its first start of a
    worker it would otherwise import every optional package it knows in this process, for a
    preload list the running server no longer reads.  A private flag of
    ``distributed.utils``; where a version has none, Dask does as it did."""
    import distributed.utils as du
    if hasattr(du, "_forkserver_preload_set"):
        du._forkserver_preload_set = True


def _stop(client, own) -> None:
    for thing in (client, *own):
        try:
            thing.close()
        except Exception:        # already gone (a Ctrl-C on its way): nothing to stop
            pass
