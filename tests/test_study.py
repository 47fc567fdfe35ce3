"""Studies (portfolio/study/, docs/studies.md): cases applied to the checked model, run on
Dask, kept on disk as each finishes, resumed after a kill.

The reference for every table is a serial loop of :func:`portfolio.dispatch.dispatch` over
the case models, made here independently of the study runner (dataclasses.replace on the
checked model), so a runner that mixed up values, scenarios or rows would fail.
"""

from __future__ import annotations

import math
import os
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import portfolio
from portfolio.dispatch import dispatch
from portfolio.solve import SolveOptions
from portfolio.study import apply, case_key, cases, run
from portfolio.study.run import CASES_DIR, CASE_FILE

OPTIONS = SolveOptions(threads=1)
PRICES = [30, 80, 20, 90, 40, 100, 10, 70]


def _text(prices_b, energy="energy values [2, 4] MWh", extra="", repeat=1):
    low = " ".join(map(str, PRICES * repeat))
    high = " ".join(map(str, list(prices_b) * repeat))
    return f"""
portfolio tiny
horizon start 2027-03-01T00:00 length {8 * repeat} h step 1 h zone "UTC"
price spot values [{low}] per MWh
connection grid {{ export max 3 MW import max 3 MW sell at spot buy at spot plus 1 per MWh }}
site yard at grid {{
  storage cells {{ kind battery energy 4 MWh charge max 2 MW discharge max 2 MW
                  efficiency round trip 81% soc start 50% end at least start modes exclusive }}
}}
study sizes {{
  vary cells {energy}
  vary grid export max from 1 MW to 2 MW step 1 MW
  scenario low for spot values [{low}] per MWh
  scenario high for spot values [{high}] per MWh
  {extra}
}}
"""


def _load(tmp_path, text, name="tiny.folio"):
    path = tmp_path / name
    path.write_text(text)
    return portfolio.load(path)


def _serial_objectives(p):
    """The independent reference: each case built by hand and dispatched in this process."""
    out = []
    for e in (2.0, 4.0):
        for x in (1.0, 2.0):
            for prices in (PRICES, [2 * v for v in PRICES]):
                s = p.storages["cells"]
                k = e / s.energy
                st = replace(s, energy=e, soc_min=s.soc_min * k, soc_max=s.soc_max * k,
                             soc_start=s.soc_start * k, end_value=s.end_value * k)
                series = dict(p.series, spot=replace(p.series["spot"], values=np.array(prices, float)))
                m = replace(p, storages={"cells": st}, series=series,
                            connections={"grid": replace(p.connections["grid"], export_max=x)}, studies={})
                out.append(dispatch(m, OPTIONS).objective)
    return out


def test_cases_are_the_cross_product_applied_to_the_model(tmp_path):
    p = _load(tmp_path, _text([2 * v for v in PRICES])).model
    study = p.studies["sizes"]
    cs = cases(study)
    assert len(cs) == 2 * 2 * 2
    m = apply(p, study, cs[-1])                   # energy 4, export 2, scenario high
    assert m.storages["cells"].energy == 4 and m.connections["grid"].export_max == 2
    assert list(m.series["spot"].values) == [2 * v for v in PRICES]
    small = apply(p, study, cs[0]).storages["cells"]
    assert small.soc_start == pytest.approx(1.0) and small.soc_max == pytest.approx(2.0)   # 50 % of 2 MWh
    assert not m.studies


def test_round_trip_splits_evenly_and_paired_zips(tmp_path):
    text = _text([2 * v for v in PRICES], energy="efficiency round trip values [64, 81] %",
                 extra="cases paired").replace("from 1 MW to 2 MW step 1 MW", "values [1, 2] MW")
    p = _load(tmp_path, text).model
    study = p.studies["sizes"]
    cs = cases(study)
    assert [(c.settings[0][2], c.settings[1][2], c.scenarios[0][1]) for c in cs] == [
        (0.64, 1.0, "low"), (0.81, 2.0, "high")]
    s = apply(p, study, cs[0]).storages["cells"]
    assert s.eta_charge == pytest.approx(0.8) and s.eta_discharge == pytest.approx(0.8)


def test_case_key_follows_inputs_not_layout(tmp_path):
    a = _load(tmp_path, _text([2 * v for v in PRICES]), "a.folio").model
    b = _load(tmp_path, "# a comment moves every line\n" + _text([2 * v for v in PRICES]), "b.folio").model
    c = _load(tmp_path, _text([2 * v + 1 for v in PRICES]), "c.folio").model
    keys = [[case_key(apply(m, m.studies["sizes"], k), OPTIONS) for k in cases(m.studies["sizes"])]
            for m in (a, b, c)]
    assert keys[0] == keys[1]
    assert [k for i, k in enumerate(keys[0]) if i % 2 == 0] == [k for i, k in enumerate(keys[2]) if i % 2 == 0]
    assert all(x != y for i, (x, y) in enumerate(zip(keys[0], keys[2])) if i % 2 == 1)
    assert case_key(apply(a, a.studies["sizes"], cases(a.studies["sizes"])[0]), SolveOptions(threads=2)) != keys[0][0]


def test_planned_keys_are_the_keys_of_each_case_alone_and_keep_no_case(tmp_path):
    """plan() hashes the parts the cases share once (a memo of the portfolio's parts): the
    keys must be those of each case hashed on its own, and the memo must hold no case's own
    objects (a study of many year-long cases would keep every case's series bytes)."""
    from portfolio.study.cases import shared_parts
    from portfolio.study.run import plan
    p = _load(tmp_path, _text([2 * v for v in PRICES])).model
    study = p.studies["sizes"]
    memo = shared_parts(p)
    parts = set(memo)
    planned = plan(p, study, OPTIONS)
    assert [pl.key for pl in planned] == [case_key(apply(p, study, c), OPTIONS) for c in cases(study)]
    assert len(set(pl.key for pl in planned)) == len(planned) == 8
    keys = [case_key(apply(p, study, c), OPTIONS, memo) for c in cases(study)]
    assert keys == [pl.key for pl in planned]
    assert set(memo) == parts                            # no case's own object kept
    assert memo[id(p.sites["yard"])][1] is not None      # a part every case shares: hashed once, kept
    assert memo[id(p.storages["cells"])][1] is None      # varied in every case: never fed from p


def test_local_cluster_gives_the_serial_table(tmp_path):
    loaded = _load(tmp_path, _text([2 * v for v in PRICES]))
    want = _serial_objectives(loaded.model)
    got = run(loaded.model, "sizes", tmp_path / "out", OPTIONS, workers=2)   # chunks the runner chooses
    df = got.frame
    assert list(df["status"]) == ["optimal"] * 8
    assert np.allclose(df["objective"], want, rtol=0, atol=1e-9)
    assert list(df["cells energy [MWh]"]) == [2, 2, 2, 2, 4, 4, 4, 4]
    assert list(df["spot scenario"]) == ["low", "high"] * 4
    # this process solves cases while its cluster starts (all 8, as small as these): the rest, the workers
    assert (df["worker"].str.startswith("tcp://127.0.0.1:") | (df["worker"] == "in-process")).all()
    # net value per asset adds up to the objective (no wear, no demand): the columns are the case's own
    assert np.allclose(df["net value cells"], df["objective"], atol=1e-6)
    back = pd.read_csv(tmp_path / "out" / "cases.csv")
    assert np.allclose(back["objective"], want, atol=1e-9)
    assert (tmp_path / "out" / "plots" / "objective_vs_cells_energy.svg").is_file()
    assert got.sent_bytes > 0
    again = run(loaded.model, "sizes", tmp_path / "out", OPTIONS, workers=2)
    assert (again.solved, again.skipped) == (0, 8)
    assert np.allclose(again.frame["objective"], want, atol=1e-9)


@pytest.mark.parametrize("chunk, method", [(1, "forkserver"), (3, "spawn"), (8, "forkserver")])
def test_any_chunk_size_and_start_method_gives_the_serial_table(tmp_path, chunk, method):
    # one case a task, tasks of 3 (the last of 2) and one task of all 8: same rows, same order,
    # each case written with its own key; and a cluster whose workers are spawned, not forked
    # from the fork server, gives the same table
    from portfolio.study.run import local_cluster
    from distributed import Client
    loaded = _load(tmp_path, _text([2 * v for v in PRICES]))
    want = _serial_objectives(loaded.model)
    seen = []
    with local_cluster(2, method) as cluster, Client(cluster) as client:
        got = run(loaded.model, "sizes", tmp_path / "out", OPTIONS, client=client, chunk=chunk, plots=False,
                  progress=lambda done, failed, skipped, total: seen.append(done))
    assert np.allclose(got.frame["objective"], want, rtol=0, atol=1e-9)
    assert list(got.frame["spot scenario"]) == ["low", "high"] * 4
    assert got.frame["worker"].str.startswith("tcp://127.0.0.1:").all()     # a client given: all on it
    assert seen == list(range(9))        # told once a case, whatever the chunk
    ids = sorted(f.parent.name for f in (tmp_path / "out" / CASES_DIR).glob(f"*/{CASE_FILE}"))
    assert ids == sorted(got.frame["case"])


def test_chunk_sizes_cover_every_case_large_first(tmp_path):
    from portfolio.study import StudyError, chunk_sizes
    from portfolio.study.run import MAX_CHUNK
    for n, workers in ((1, 2), (8, 2), (200, 2), (1000, 3), (5, 16)):
        sizes = chunk_sizes(n, workers)
        assert sum(sizes) == n and min(sizes) >= 1 and max(sizes) <= MAX_CHUNK
        assert sizes == sorted(sizes, reverse=True)      # single cases last: the workers end together
        assert sizes[-1] == 1
    assert len(chunk_sizes(200, 2)) < 200 / 4            # Dask's per-task cost paid far fewer times
    assert chunk_sizes(10, 2, 3) == [3, 3, 3, 1] and chunk_sizes(3, 2, 1) == [1, 1, 1]
    for bad in (0, -1, 2.5, "4"):
        with pytest.raises(StudyError, match="chunk"):
            chunk_sizes(10, 2, bad)
    p = _load(tmp_path, _text(PRICES)).model
    with pytest.raises(StudyError, match="chunk"):      # refused before any folder or cluster
        run(p, "sizes", tmp_path / "out", OPTIONS, chunk=0)
    assert not (tmp_path / "out").exists()


def test_a_chunk_writes_each_case_as_it_finishes(tmp_path):
    """One task of all 8 cases on one worker whose 8th case waits until the client lets it go
    (or a minute, a safety net): the client must have written the first 7 cases, told
    progress 7 times, before it lets the 8th go, so rows cannot be landing at the chunk's end."""
    from distributed import Client

    from portfolio.study.run import local_cluster
    loaded = _load(tmp_path, _text([2 * v for v in PRICES]))
    out = tmp_path / "out"
    on_disk = {}
    with local_cluster(1) as cluster, Client(cluster) as client:
        client.run(_hold_case, 8)

        def progress(done, failed, skipped, total):
            if done == 7:
                on_disk[done] = len(list((out / CASES_DIR).glob(f"*/{CASE_FILE}")))
                client.run(_let_go)

        df = run(loaded.model, "sizes", out, OPTIONS, client=client, chunk=8, plots=False, progress=progress).frame
    assert on_disk == {7: 7}
    assert list(df["message"]) == [""] * 7 + ["let go"]
    assert np.allclose(df["objective"], _serial_objectives(loaded.model), rtol=0, atol=1e-9)


def test_a_worker_lost_mid_chunk_loses_only_the_case_it_was_solving(tmp_path):
    """One task of all 8 cases; the worker's process dies (os._exit) in the 3rd case.  With
    Dask told not to run a task again after a death (allowed-failures 0), the chunk is lost:
    cases 1-2 have their rows already, case 3 is recorded lost (a re-run solves it), and
    cases 4-8, never started, go out again on the worker the nanny restarts."""
    import dask
    from distributed import Client

    from portfolio.study.run import finished, local_cluster, plan
    loaded = _load(tmp_path, _text([2 * v for v in PRICES]))
    out = tmp_path / "out"
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        with local_cluster(1) as cluster, Client(cluster) as client:
            client.run(_die_in_case, 3)
            df = run(loaded.model, "sizes", out, OPTIONS, client=client, chunk=8, plots=False).frame
    assert list(df["status"]) == ["optimal"] * 2 + ["error"] + ["optimal"] * 5
    assert df["objective"].isna().tolist() == [False] * 2 + [True] + [False] * 5
    want = _serial_objectives(loaded.model)
    ok = df["status"] == "optimal"
    assert np.allclose(df["objective"][ok], np.array(want)[ok.to_numpy()], rtol=0, atol=1e-9)
    assert df["worker"][0] != df["worker"][3]          # the rest ran on the restarted worker
    planned = plan(loaded.model, loaded.model.studies["sizes"], OPTIONS)
    assert finished(out, planned[2], False) is None   # lost: a re-run solves it again
    assert finished(out, planned[3], False)["status"] == "optimal"


def _die_in_case(n):
    """On a worker: its ``n``-th case, once solved, ends the worker's process."""
    runner = sys.modules["portfolio.study.run"]
    original, calls = runner.solve_case, [0]

    def dying(*args, **kw):
        calls[0] += 1
        row = original(*args, **kw)      # solved first: the row before it has left meanwhile
        if calls[0] == n:                # (one left the instant before a death could be lost
            os._exit(1)                  # and that case taken for the running one)
        return row

    runner.solve_case = dying


def _hold_case(n):
    """On a worker: the study's ``n``-th case (counted on this worker) waits for :func:`_let_go`."""
    import threading
    runner = sys.modules["portfolio.study.run"]
    original, gate, calls = runner.solve_case, threading.Event(), [0]

    def held(*args, **kw):
        calls[0] += 1
        if calls[0] != n:
            return original(*args, **kw)
        let_go = gate.wait(60)
        return dict(original(*args, **kw), message="let go" if let_go else "not let go")

    runner.solve_case, runner._gate = held, gate


def _let_go():
    sys.modules["portfolio.study.run"]._gate.set()


@pytest.mark.parametrize("chunk", [None, 8])
def test_api_returns_a_dataframe_and_a_failing_case_does_not_stop_the_others(tmp_path, chunk):
    # without import the store cannot reach its end rule (it must end fuller than it starts)
    text = _text([2 * v for v in PRICES], energy="energy values [4] MWh  vary grid import max values [2, 0] MW")
    loaded = _load(tmp_path, text.replace("end at least start", "end at least 90%"))
    if chunk is None:
        df = loaded.study("sizes", out=tmp_path / "out")
    else:              # one task of all 8 cases: its infeasible cases do not sink the optimal ones
        df = run(loaded.model, "sizes", tmp_path / "out", OPTIONS, workers=1, chunk=chunk, plots=False).frame
    assert isinstance(df, pd.DataFrame) and len(df) == 8
    assert set(df[df["grid import max [MW]"] == 0]["status"]) == {"infeasible"}
    assert set(df[df["grid import max [MW]"] == 2]["status"]) == {"optimal"}
    assert df[df["status"] == "infeasible"]["objective"].isna().all()


def test_a_finished_study_run_again_starts_no_cluster_and_no_fork_server(tmp_path, monkeypatch):
    """Every case done: the re-run reads the rows back and starts nothing; one case
    removed: the cluster starts (once) for it alone."""
    runner = sys.modules["portfolio.study.run"]      # the module (run is also a function)
    loaded = _load(tmp_path, _text([2 * v for v in PRICES]))
    first = run(loaded.model, "sizes", tmp_path / "out", OPTIONS, workers=1, plots=False).frame

    def refused(*a, **k):
        raise AssertionError("started for a study with nothing left to run")
    monkeypatch.setattr(runner, "_Starting", refused)
    monkeypatch.setattr(runner, "warm", refused)
    again = run(loaded.model, "sizes", tmp_path / "out", OPTIONS, workers=1, plots=False).frame
    assert np.allclose(again["objective"], first["objective"], rtol=0, atol=1e-9)
    monkeypatch.undo()
    shutil.rmtree(next((tmp_path / "out" / CASES_DIR).iterdir()))
    starts, warmed = [], []
    real, real_warm = runner._Starting, runner.warm
    monkeypatch.setattr(runner, "_Starting", lambda *a: starts.append(a) or real(*a))
    monkeypatch.setattr(runner, "warm", lambda *a: warmed.append(threading.current_thread()) or real_warm(*a))
    _stop_forkserver()
    resumed = run(loaded.model, "sizes", tmp_path / "out", OPTIONS, workers=1, plots=False).frame
    assert len(starts) == 1
    # the fork server starts from the main thread, the only one that can have it born
    # ignoring Ctrl-C (portfolio/children.py), not from the cluster's starting thread
    assert warmed and warmed[0] is threading.main_thread()
    assert np.allclose(resumed["objective"], first["objective"], rtol=0, atol=1e-9)


def test_a_finished_study_run_again_from_the_command_starts_no_fork_server(tmp_path, monkeypatch):
    from portfolio.cli import main
    runner = sys.modules["portfolio.study.run"]
    good = tmp_path / "good.folio"
    good.write_text(_text([2 * v for v in PRICES]))
    argv = ["study", str(good), "--out", str(tmp_path / "out"), "--workers", "1", "-q"]
    assert main(argv, _Sink(), _Sink()) == 0
    first = pd.read_csv(tmp_path / "out" / "cases.csv")

    def refused(*a, **k):
        raise AssertionError("started for a study with nothing left to run")
    monkeypatch.setattr(runner, "_Starting", refused)
    monkeypatch.setattr(runner, "warm", refused)
    out, err = _Sink(), _Sink()
    assert main(argv, out, err) == 0, err.text
    again = pd.read_csv(tmp_path / "out" / "cases.csv")
    assert np.allclose(again["objective"], first["objective"], rtol=0, atol=1e-9)


def test_a_scheduler_is_not_reached_before_the_cases_are_planned(tmp_path, monkeypatch):
    """With --scheduler the connection (which may take its 30 s timeout) comes after
    planning: an error while planning is raised at once, nothing started."""
    from portfolio.study import StudyError
    runner = sys.modules["portfolio.study.run"]
    loaded = _load(tmp_path, _text([2 * v for v in PRICES]))
    started = []
    monkeypatch.setattr(runner, "_Starting", lambda *a: started.append(a))
    monkeypatch.setattr(runner, "warm", lambda *a: started.append(("warm",)))

    def broken(*a, **k):
        raise StudyError("planning failed")
    monkeypatch.setattr(runner, "plan", broken)
    with pytest.raises(StudyError, match="planning failed"):
        run(loaded.model, "sizes", tmp_path / "out", OPTIONS, scheduler="tcp://127.0.0.1:9", plots=False)
    assert started == []


@pytest.mark.parametrize("address", ["garbage", "tcp://", "http://127.0.0.1:8786", "tcp://127.0.0.1:99999", " "])
def test_an_address_that_cannot_be_a_scheduler_is_refused_before_anything_is_written(tmp_path, address):
    from portfolio.cli import main
    good = tmp_path / "good.folio"
    good.write_text(_text([2 * v for v in PRICES]))
    out, err = _Sink(), _Sink()
    code = main(["study", str(good), "--out", str(tmp_path / "out"), "--scheduler", address], out, err)
    assert code == 2, err.text
    assert "scheduler" in err.text and "tcp://HOST:PORT" in err.text and "Traceback" not in err.text
    assert not (tmp_path / "out").exists()


def test_a_study_folder_that_cannot_be_made_is_a_message_not_a_traceback(tmp_path):
    from portfolio.cli import main
    good = tmp_path / "good.folio"
    good.write_text(_text([2 * v for v in PRICES]))
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    out, err = _Sink(), _Sink()
    code = main(["study", str(good), "--out", str(blocker / "sub"), "--workers", "1"], out, err)
    assert code == 2, err.text
    assert "cannot write the study folder" in err.text and "Traceback" not in err.text
    assert blocker.read_text() == "not a folder"


def test_a_cases_folder_that_cannot_be_listed_counts_as_fresh_not_a_traceback(tmp_path, monkeypatch):
    runner = sys.modules["portfolio.study.run"]
    (tmp_path / "out" / CASES_DIR).mkdir(parents=True)
    (tmp_path / "out" / CASES_DIR / "x").mkdir()
    assert runner.fresh(tmp_path / "out") is False
    assert runner.fresh(tmp_path / "missing") is True

    def denied(self):
        raise PermissionError(13, "Permission denied", str(self))
    monkeypatch.setattr(Path, "iterdir", denied)
    assert runner.fresh(tmp_path / "out") is True


def _stop_forkserver() -> None:
    """Stop multiprocessing's fork server of this process, if running (a private API of
    the standard library: tests only), so that the next study has to start it."""
    from multiprocessing import forkserver
    server = getattr(forkserver, "_forkserver", None)
    if server is not None and hasattr(server, "_stop"):
        server._stop()


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _tool(name):
    exe = shutil.which(name, path=str(Path(sys.executable).parent))
    if exe is None:
        pytest.skip(f"the {name} command is not installed beside this Python")
    return exe


@pytest.mark.slow
def test_a_real_scheduler_and_worker_give_the_serial_table(tmp_path):
    loaded = _load(tmp_path, _text([2 * v for v in PRICES]))
    want = _serial_objectives(loaded.model)
    port = _free_port()
    dask = _tool("dask")
    procs = [subprocess.Popen([dask, "scheduler", "--host", "127.0.0.1", "--port", str(port),
                               "--dashboard-address", ":0", "--no-show"], stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL, start_new_session=True)]
    try:
        procs.append(subprocess.Popen([dask, "worker", f"tcp://127.0.0.1:{port}", "--host", "127.0.0.1",
                                       "--nthreads", "1", "--no-dashboard"], stdout=subprocess.DEVNULL,
                                      stderr=subprocess.DEVNULL, start_new_session=True))
        from distributed import Client
        with Client(f"tcp://127.0.0.1:{port}", timeout=60) as client:
            client.wait_for_workers(1, timeout=60)
            df = run(loaded.model, "sizes", tmp_path / "out", OPTIONS, client=client).frame
        assert np.allclose(df["objective"], want, rtol=0, atol=1e-9)
        assert df["worker"].nunique() == 1 and df["worker"].iloc[0].startswith("tcp://127.0.0.1:")
    finally:
        for pr in procs:
            os.killpg(pr.pid, signal.SIGTERM)
            pr.wait(timeout=30)


def test_a_scheduler_without_workers_or_not_dask_is_a_message(tmp_path, monkeypatch):
    """A real scheduler that no worker joined: the scatter's timeout was a traceback; an
    address where something answers that is not Dask (an HTTP server): the command hung."""
    import http.server

    from portfolio.study import StudyError
    runner = sys.modules["portfolio.study.run"]
    monkeypatch.setattr(runner, "WORKER_TIMEOUT", 2)      # the connection keeps its 30 s
    monkeypatch.setattr(runner, "small", lambda p: False)
    loaded = _load(tmp_path, _text([2 * v for v in PRICES]))
    port = _free_port()
    sched = subprocess.Popen([_tool("dask"), "scheduler", "--host", "127.0.0.1", "--port", str(port),
                              "--dashboard-address", ":0", "--no-show"], stdout=subprocess.DEVNULL,
                             stderr=subprocess.DEVNULL, start_new_session=True)
    try:
        deadline = time.monotonic() + 60
        while True:                  # until it listens
            try:
                socket.create_connection(("127.0.0.1", port), timeout=1).close()
                break
            except OSError:
                assert time.monotonic() < deadline, "the scheduler did not start"
                time.sleep(0.2)
        with pytest.raises(StudyError, match="has no worker to run the cases"):
            run(loaded.model, "sizes", tmp_path / "a", OPTIONS, scheduler=f"tcp://127.0.0.1:{port}", plots=False)
    finally:
        os.killpg(sched.pid, signal.SIGTERM)
        sched.wait(timeout=30)
    class Quiet(http.server.SimpleHTTPRequestHandler):
        def log_message(self, *a):
            pass
    monkeypatch.setattr(runner, "CONNECT_TIMEOUT", 2)     # given up after twice that
    web = http.server.ThreadingHTTPServer(("127.0.0.1", 0), Quiet)
    threading.Thread(target=web.serve_forever, daemon=True).start()
    try:
        t0 = time.monotonic()
        with pytest.raises(StudyError, match="no Dask scheduler answered at"):
            run(loaded.model, "sizes", tmp_path / "b", OPTIONS,
                scheduler=f"tcp://127.0.0.1:{web.server_address[1]}", plots=False)
        assert time.monotonic() - t0 < 30
    finally:
        web.shutdown()


@pytest.mark.slow
def test_a_killed_study_loses_no_case_and_resumes(tmp_path):
    """SIGKILL the `portfolio study` command (and its workers) once some cases are written;
    a re-run solves only the rest, leaves the finished ones' files alone, and its table
    equals an uninterrupted run's."""
    exe = _tool("portfolio")
    text = _text([2 * v for v in PRICES], energy="energy from 1 MWh to 30 MWh step 1 MWh", repeat=24)
    path = tmp_path / "tiny.folio"
    path.write_text(text)
    out = tmp_path / "out"
    cmd = [exe, "study", str(path), "--out", str(out), "--workers", "1", "-q"]
    before = _kill_once_written(cmd, out, 3)
    assert len(before) >= 3
    total = 30 * 2 * 2
    assert len(before) < total
    again = subprocess.run(cmd, capture_output=True, text=True, timeout=600)
    assert again.returncode == 0, again.stderr
    assert f"{total - len(before)} solved now, {len(before)} done before" in again.stdout
    for case_id, mtime in before.items():
        assert (out / CASES_DIR / case_id / CASE_FILE).stat().st_mtime_ns == mtime
    resumed = pd.read_csv(out / "cases.csv")
    whole = run(portfolio.load(path).model, "sizes", tmp_path / "whole", OPTIONS, workers=2).frame
    assert list(resumed["case"]) == list(whole["case"])
    assert np.allclose(resumed["objective"], whole["objective"], rtol=0, atol=1e-9)


def _kill_once_written(cmd, out, n):
    """Start ``cmd`` (a study into ``out``) in its own process group, SIGKILL the group once
    ``n`` cases are on disk; the cases on disk then ({id: mtime})."""
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, start_new_session=True)
    deadline = time.monotonic() + 120      # not a performance target: a hung start fails the test
    while time.monotonic() < deadline and proc.poll() is None:
        if (out / CASES_DIR).is_dir() and len(list((out / CASES_DIR).glob(f"*/{CASE_FILE}"))) >= n:
            break
        time.sleep(0.05)
    if proc.poll() is not None:
        _, err = proc.communicate()
        assert proc.returncode == 0, err.decode()
        pytest.skip("the study finished before it could be killed")
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    return {f.parent.name: f.stat().st_mtime_ns for f in (out / CASES_DIR).glob(f"*/{CASE_FILE}")}


_KILLED_STUDY = """
import sys
import portfolio
from portfolio.solve import SolveOptions
from portfolio.study import run
run(portfolio.load(sys.argv[1]).model, "sizes", sys.argv[2], SolveOptions(threads=1), workers=1,
    chunk=int(sys.argv[3]), plots=False)
"""


@pytest.mark.slow
def test_a_killed_chunked_study_keeps_each_case_as_it_finished_and_resumes(tmp_path):
    """One Dask task holds every case (a chunk of all 120): SIGKILL the study (its worker too)
    once a few cases are on disk.  A re-run keeps those, solves only the others, and its
    table equals a serial loop's."""
    from portfolio.study import run_serial
    text = _text([2 * v for v in PRICES], energy="energy from 1 MWh to 30 MWh step 1 MWh", repeat=24)
    path = tmp_path / "tiny.folio"
    path.write_text(text)
    out = tmp_path / "out"
    total = 30 * 2 * 2
    before = _kill_once_written([sys.executable, "-c", _KILLED_STUDY, str(path), str(out), str(total)], out, 3)
    assert 3 <= len(before) < total
    p = portfolio.load(path).model
    again = run(p, "sizes", out, OPTIONS, workers=2, plots=False)
    assert (again.solved, again.skipped) == (total - len(before), len(before))
    for case_id, mtime in before.items():
        assert (out / CASES_DIR / case_id / CASE_FILE).stat().st_mtime_ns == mtime
    serial = run_serial(p, p.studies["sizes"], OPTIONS)
    assert list(again.frame["case"]) == [r["case"] for r in serial]
    assert np.allclose(again.frame["objective"], [r["objective"] for r in serial], rtol=0, atol=1e-9)


def test_cli_refuses_bad_input_and_runs_nothing(tmp_path):
    from portfolio.cli import main
    path = tmp_path / "bad.folio"
    path.write_text(_text(PRICES).replace("vary cells energy", "vary cels energy"))
    out, err = _Sink(), _Sink()
    assert main(["study", str(path), "--out", str(tmp_path / "out")], out, err) == 1
    assert "P209" in err.text and not (tmp_path / "out").exists()
    good = tmp_path / "good.folio"
    good.write_text(_text(PRICES))
    assert main(["study", str(good), "other", "--out", str(tmp_path / "out")], out, err) == 2
    assert "no study 'other'" in err.text and not (tmp_path / "out").exists()


def test_a_folder_of_another_study_is_refused_and_keeps_its_table(tmp_path):
    """Two studies into one folder: the second would replace the first's cases.csv and
    plots, so it is refused (the marker names the study), nothing of the first touched;
    the same study again resumes; a folder marked before markers named their study is
    taken as it was."""
    from portfolio.cli import main
    from portfolio.study import StudyError
    from portfolio.study.run import MARKER
    text = _text([2 * v for v in PRICES]) + "study other { vary cells energy values [3] MWh }\n"
    loaded = _load(tmp_path, text)
    out = tmp_path / "out"
    run(loaded.model, "other", out, OPTIONS, workers=1, plots=False)
    table = (out / "cases.csv").read_bytes()
    with pytest.raises(StudyError, match="holds the cases of study 'other' of portfolio 'tiny'.*study 'sizes'"):
        run(loaded.model, "sizes", out, OPTIONS, workers=1, plots=False)
    o, e = _Sink(), _Sink()
    assert main(["study", str(tmp_path / "tiny.folio"), "sizes", "--out", str(out), "--quiet"], o, e) == 2
    assert "holds the cases of study 'other'" in e.text and "Traceback" not in e.text
    assert (out / "cases.csv").read_bytes() == table and len(list((out / "cases").iterdir())) == 1
    again = run(loaded.model, "other", out, OPTIONS, workers=1, plots=False)
    assert again.skipped == 1 and again.solved == 0
    (out / MARKER).write_text(f"portfolio study of {tmp_path / 'tiny.folio'}\n")    # an older marker
    assert len(run(loaded.model, "sizes", out, OPTIONS, workers=1, plots=False).frame) == 8
    assert "study sizes of portfolio tiny" in (out / MARKER).read_text()


def test_a_portfolio_named_by_a_file_with_spaces_keeps_its_folder_to_its_study(tmp_path):
    """A file that names no portfolio is named after the file, spaces and all; the marker
    must still name its study (it was read as an old marker, and another study got in)."""
    from portfolio.study import StudyError
    from portfolio.study.run import marked_study
    text = _text([2 * v for v in PRICES]).replace("portfolio tiny\n", "")
    loaded = _load(tmp_path, text + "study other { vary cells energy values [3] MWh }\n", "my plan.folio")
    assert loaded.model.name == "my plan"
    out = tmp_path / "out"
    run(loaded.model, "other", out, OPTIONS, workers=1, plots=False)
    assert marked_study(out) == ("other", "my plan")
    with pytest.raises(StudyError, match="study 'other' of portfolio 'my plan'"):
        run(loaded.model, "sizes", out, OPTIONS, workers=1, plots=False)


@pytest.mark.parametrize("scenarios", [2, 15])
def test_plots_colour_each_scenario_and_name_at_most_twelve(tmp_path, monkeypatch, scenarios):
    """A plot per varied setting: a colour per scenario, one line per value of the other
    setting in it (the legend's title says so), at most 12 colours named beside the axes
    (40 lines, each in the legend over the lines, were unreadable)."""
    from matplotlib.figure import Figure

    from portfolio.study.results import LEGEND_MAX, write_plots
    p = _load(tmp_path, _text([2 * v for v in PRICES])).model
    rows = [{"cells energy [MWh]": e, "grid export max [MW]": x, "spot scenario": f"s{k}",
             "status": "optimal", "objective": 100 * k + 10 * e + x}
            for e in (2.0, 4.0) for x in (1.0, 2.0) for k in range(scenarios)]
    legends = []
    real = Figure.legend

    def seen(fig, *a, **k):
        legends.append(([h.get_label() for h in k["handles"]], k.get("title") or ""))
        return real(fig, *a, **k)
    monkeypatch.setattr(Figure, "legend", seen)
    written = write_plots(p.studies["sizes"], pd.DataFrame(rows), tmp_path / "out")
    assert sorted(f.name for f in written) == sorted(f"objective_vs_{n}.{ext}" for n in
                                                     ("cells_energy", "grid_export_max") for ext in ("png", "svg"))
    assert all(f.stat().st_size > 1000 for f in written)
    assert len(legends) == 2
    for (labels, title), other in zip(legends, ("grid export max [MW]", "cells energy [MWh]")):
        assert f"one line per {other}; fainter: smaller" in title
        if scenarios <= LEGEND_MAX:
            assert labels == [f"spot: s{k}" for k in range(scenarios)] and "named" not in title
        else:
            assert len(labels) == LEGEND_MAX and labels[0] == "spot: s0" and labels[-1] == "spot: s9"
            assert f"{scenarios} colours, {LEGEND_MAX} named" in title


def test_work_for_afterwards_runs_while_the_cases_do_and_is_done_on_return(tmp_path, monkeypatch):
    """run_study's ``idle`` (the plots' imports, from portfolio.study.run) runs in a thread
    of its own while the cluster solves the cases, and is finished when run_study returns
    (never left running into the interpreter's exit); a study with nothing left to run
    does not start it."""
    from portfolio.study import run_study
    monkeypatch.setattr(sys.modules["portfolio.study.run"], "small", lambda p: False)   # all on the cluster
    p = _load(tmp_path, _text([2 * v for v in PRICES])).model
    seen = []

    def work():
        seen.append(threading.current_thread().name)
        time.sleep(0.5)
        seen.append("done")
    got = run_study(p, p.studies["sizes"], tmp_path / "out", OPTIONS, workers=1, idle=work)
    assert got["solved"] == 8 and seen == ["portfolio-study-meanwhile", "done"]
    seen.clear()
    again = run_study(p, p.studies["sizes"], tmp_path / "out", OPTIONS, workers=1, idle=work)
    assert again["skipped"] == 8 and seen == []


def test_a_second_run_into_a_folder_in_use_is_refused_and_a_killed_one_leaves_no_lock(tmp_path):
    """Two runs into one folder at once would solve every case twice: the second is
    refused while the first holds the folder's lock (flock), before it writes anything;
    the lock goes with its holder (a process that ends, however it ends)."""
    import fcntl

    from portfolio.cli import main
    from portfolio.study import StudyError
    from portfolio.study.run import LOCK, MARKER
    loaded = _load(tmp_path, _text([2 * v for v in PRICES]))
    out = tmp_path / "out"
    (out / "cases").mkdir(parents=True)
    (out / MARKER).write_text("portfolio study of x\n")
    holder = open(out / LOCK, "a")
    fcntl.flock(holder.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)          # a run going on
    try:
        with pytest.raises(StudyError, match="another 'portfolio study' is writing into"):
            run(loaded.model, "sizes", out, OPTIONS, workers=1, plots=False)
        o, e = _Sink(), _Sink()
        assert main(["study", str(tmp_path / "tiny.folio"), "--out", str(out), "--quiet"], o, e) == 2
        assert "another 'portfolio study' is writing into" in e.text and "Traceback" not in e.text
        assert (out / MARKER).read_text() == "portfolio study of x\n" and not any((out / "cases").iterdir())
    finally:
        holder.close()
    held = subprocess.Popen([sys.executable, "-c", "import fcntl, sys, time; f = open(sys.argv[1], 'a'); "
                             "fcntl.flock(f.fileno(), fcntl.LOCK_EX); print('held', flush=True); time.sleep(60)",
                             str(out / LOCK)], stdout=subprocess.PIPE, text=True)
    try:
        assert held.stdout.readline().strip() == "held"
        with pytest.raises(StudyError, match="another"):
            run(loaded.model, "sizes", out, OPTIONS, workers=1, plots=False)
    finally:
        held.kill()
        held.wait()
    assert len(run(loaded.model, "sizes", out, OPTIONS, workers=1, plots=False).frame) == 8


def test_plots_with_long_names_warn_nothing(tmp_path):
    """Scenario names of 200 characters: the legend cannot fit beside the axes, and
    matplotlib's layout warning reached the command's stderr."""
    import warnings

    from portfolio.study.results import write_plots
    p = _load(tmp_path, _text([2 * v for v in PRICES])).model
    rows = [{"cells energy [MWh]": e, "grid export max [MW]": x, "spot scenario": f"s{k}_" + "x" * 198,
             "status": "optimal", "objective": 10 * k + e + x}
            for e in (2.0, 4.0) for x in (1.0, 2.0) for k in range(3)]
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        written = write_plots(p.studies["sizes"], pd.DataFrame(rows), tmp_path / "out")
    assert len(written) == 4 and not seen, [str(w.message) for w in seen]


def test_the_command_with_a_scheduler_keeps_dasks_logs_off_stderr(tmp_path, monkeypatch):
    """With --scheduler the client's own log lines (a scheduler lost mid-study logged its
    reconnection tracebacks) are silenced; what happened, the command says."""
    import logging

    import distributed  # noqa: F401
    from portfolio.cli import main
    monkeypatch.setattr(sys.modules["portfolio.study.run"], "CONNECT_TIMEOUT", 2)
    names = ("distributed", "distributed.client", "distributed.core", "distributed.comm")
    before = {n: logging.getLogger(n).level for n in names}
    _load(tmp_path, _text([2 * v for v in PRICES]))
    o, e = _Sink(), _Sink()
    try:
        code = main(["study", str(tmp_path / "tiny.folio"), "--out", str(tmp_path / "out"), "--quiet",
                     "--scheduler", f"tcp://127.0.0.1:{_free_port()}"], o, e)
        assert code == 2 and "cannot reach the Dask scheduler" in e.text and "Traceback" not in e.text
        for name in names:
            assert logging.getLogger(name).getEffectiveLevel() == logging.CRITICAL, name
    finally:
        for n, level in before.items():
            logging.getLogger(n).setLevel(level)


class _Sink:
    def __init__(self):
        self.text = ""

    def write(self, s):
        self.text += s

    def flush(self):
        pass


def test_a_long_case_with_binary_rules_goes_by_windows_as_dispatch_does(tmp_path):
    # 752 h (above 31 days) with exclusive modes: LoadedPortfolio.dispatch() goes by windows
    # by default (portfolio/windows/spec.py, by_default), and so must the case; its row carries
    # the stitched gap, the LP bound and the number of windows.  The one case is the file's own
    # model (energy 4 MWh, the low prices, the connection as declared).
    text = _text([2 * v for v in PRICES], energy="energy values [4] MWh", repeat=94)
    text = text.replace("vary grid export max from 1 MW to 2 MW step 1 MW", "")
    text = "\n".join(line for line in text.splitlines() if "scenario high" not in line)
    p = _load(tmp_path, text)
    reference = p.dispatch(threads=1)
    assert reference.summary["windows"]["count"] > 1
    from portfolio.study import run_serial, table
    study = p.model.studies["sizes"]
    rows = run_serial(p.model, study, OPTIONS)
    assert len(rows) == 1 and rows[0]["status"] == reference.status
    assert rows[0]["windows"] == reference.summary["windows"]["count"]
    assert math.isclose(rows[0]["objective"], reference.objective, rel_tol=1e-9)
    assert math.isclose(rows[0]["bound"], reference.best_bound, rel_tol=1e-9)
    assert math.isclose(rows[0]["gap"], reference.mip_gap, rel_tol=0, abs_tol=1e-12)
    df = table(study, cases(study), rows)
    assert list(df[["windows"]].iloc[0]) == [reference.summary["windows"]["count"]]
    assert math.isclose(df["bound"].iloc[0], reference.best_bound, rel_tol=1e-9)


def test_a_short_case_is_one_milp_with_its_bound(tmp_path):
    p = _load(tmp_path, _text([2 * v for v in PRICES]))
    from portfolio.study import run_serial
    rows = run_serial(p.model, p.model.studies["sizes"], OPTIONS)
    assert all(r["windows"] == 0 for r in rows)
    assert all(r["bound"] is not None and r["bound"] >= r["objective"] - 1e-6 for r in rows)


def test_a_task_lost_with_its_worker_is_solved_again_on_a_rerun(tmp_path):
    # a case whose task raised on the worker (not the case's own failure, which solve_case
    # records itself) is recorded as an error marked lost; the next run does not take it as done
    from distributed import Client

    from portfolio.study.run import _lost, finished, local_cluster, plan, record
    p = _load(tmp_path, _text([2 * v for v in PRICES])).model
    study = p.studies["sizes"]
    first = plan(p, study, OPTIONS)[0]
    with local_cluster(1) as cluster, Client(cluster) as client:
        fut = client.submit(_raise, 1, pure=False)
        from distributed import wait
        wait([fut])
        row = _lost(fut, None)
    assert row["status"] == "error" and "a worker went away" in row["message"] and row["lost"]
    record(tmp_path / "out", first, row)
    assert finished(tmp_path / "out", first, False) is None
    done = dict(row, status="infeasible", lost=False)
    record(tmp_path / "out", first, done)
    assert finished(tmp_path / "out", first, False)["status"] == "infeasible"


def _raise(x):
    raise RuntimeError("a worker went away")


def test_chunk_reaches_the_runner_from_the_cli_and_the_api(tmp_path, monkeypatch, capsys):
    import portfolio.study as S
    from portfolio.cli import main
    good = tmp_path / "good.folio"
    good.write_text(_text([2 * v for v in PRICES]))
    out, err = _Sink(), _Sink()
    # refused by the command line itself: exit 2, nothing run, no folder
    assert main(["study", str(good), "--out", str(tmp_path / "out"), "--chunk", "0"], out, err) == 2
    said = err.text + capsys.readouterr().err        # argparse's own message
    assert "--chunk" in said and "from 1 up" in said and not (tmp_path / "out").exists()
    with pytest.raises(S.StudyError, match="chunk"):
        portfolio.load(good).study("sizes", chunk=0)
    asked = []
    real = S.run

    def spy(*a, **kw):
        asked.append(kw.get("chunk"))
        return real(*a, **kw)

    monkeypatch.setattr(S, "run", spy)
    assert main(["study", str(good), "--out", str(tmp_path / "cli"), "--workers", "1", "--chunk", "3",
                 "-q"], out, err) == 0
    df = portfolio.load(good).study("sizes", out=tmp_path / "api", chunk=2, threads=1)
    assert asked == [3, 2]
    want = _serial_objectives(portfolio.load(good).model)
    assert np.allclose(pd.read_csv(tmp_path / "cli" / "cases.csv")["objective"], want, rtol=0, atol=1e-9)
    assert np.allclose(df["objective"], want, rtol=0, atol=1e-9)
