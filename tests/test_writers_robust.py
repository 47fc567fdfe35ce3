"""The output folder under hostile conditions (portfolio/writers.py): its
permissions, group and ACLs survive a replacement, a killed run's leftovers
are cleaned, concurrent writers take turns, the working folder is refused."""

from __future__ import annotations

import copy
import dataclasses
import os
import shutil
import stat
import subprocess
import threading

import pytest

import factory as F
from portfolio.dispatch import dispatch
from portfolio.writers import MARKER, OutputFolderError, write


@pytest.fixture(scope="module")
def result():
    r = dispatch(F.market([10.0, 50.0, 20.0], [F.storage("cell", energy=1.0, power=1.0)]))
    assert r.status == "optimal"
    return r


def _mode(path) -> int:
    return stat.S_IMODE(os.stat(path).st_mode)


def test_a_private_folder_stays_private(result, tmp_path):
    out = tmp_path / "out"
    write(result, out)
    os.chmod(out, 0o700)
    write(result, out)
    assert _mode(out) == 0o700
    assert all(_mode(f) & 0o077 == 0 for f in out.iterdir())


def test_group_and_setgid_survive_a_replacement(result, tmp_path):
    out = tmp_path / "out"
    write(result, out)
    gid = 12345 if os.geteuid() == 0 else os.getegid()
    os.chown(out, -1, gid)
    os.chmod(out, 0o2770)
    write(result, out)
    st = os.stat(out)
    assert st.st_gid == gid and stat.S_IMODE(st.st_mode) == 0o2770
    assert all(os.stat(f).st_gid == gid for f in out.iterdir())


def test_a_new_folder_follows_the_umask(result, tmp_path):
    old = os.umask(0o027)
    try:
        write(result, tmp_path / "out")
    finally:
        os.umask(old)
    assert _mode(tmp_path / "out") == 0o750


@pytest.mark.skipif(shutil.which("setfacl") is None or shutil.which("getfacl") is None,
                    reason="setfacl/getfacl (Debian package acl) not installed")
def test_acls_survive_a_replacement(result, tmp_path):
    out = tmp_path / "out"
    write(result, out)
    if subprocess.run(["setfacl", "-m", "u:nobody:rx", str(out)]).returncode != 0:
        pytest.skip("the file system takes no ACLs")
    write(result, out)
    shown = subprocess.run(["getfacl", "-p", str(out)], capture_output=True, text=True).stdout
    assert "user:nobody:r-x" in shown


def test_leftovers_of_a_killed_run_are_removed(result, tmp_path):
    out = tmp_path / "out"
    stale = tmp_path / ".out.tmp-dead1234"          # what kill -9 mid-write leaves
    stale.mkdir()
    (stale / "cell.csv").write_text("time,half\n")
    old = tmp_path / ".out.old-deadbeef"
    old.mkdir()
    write(result, out)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_concurrent_writers_take_turns(result, tmp_path):
    out = tmp_path / "out"
    failures = []

    def writer():
        for _ in range(12):
            try:
                write(result, out)
            except Exception as exc:          # noqa: BLE001 - any failure is the finding
                failures.append(exc)

    threads = [threading.Thread(target=writer) for _ in range(3)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert failures == []
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]
    assert (out / MARKER).is_file() and (out / "summary.json").is_file()


def test_the_working_folder_is_refused(result, tmp_path, monkeypatch):
    here = tmp_path / "empty"
    here.mkdir()
    monkeypatch.chdir(here)
    # the portfolio's own file lies elsewhere: only the working folder is at stake
    result = copy.copy(result)
    result.portfolio = dataclasses.replace(result.portfolio, path="/nonexistent-portfolio-src/p.folio")
    with pytest.raises(OutputFolderError, match="working folder"):
        write(result, ".")
    with pytest.raises(OutputFolderError, match="working folder"):
        write(result, "..")
    assert here.is_dir() and list(here.iterdir()) == []


def test_a_folder_holding_a_file_the_portfolio_reads_is_refused(tmp_path):
    # yesterday's output folder, one of whose tables today's portfolio reads as a
    # profile: replacing that folder would overwrite an input
    import io

    from portfolio.cli import main

    out = tmp_path / "out"
    first = tmp_path / "a.folio"
    first.write_text('portfolio a\nhorizon start 2027-01-01T00:00 length 3 h step 1 h zone "UTC"\n'
                     'price p values [10, 50, 20]\nconnection g { sell at p buy at p }\n'
                     'site s at g { storage cell { energy 1 MWh charge max 1 MW discharge max 1 MW } }\n')
    assert main(["dispatch", str(first), "--out", str(out), "--quiet"], out=io.StringIO(),
                err=io.StringIO()) == 0
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    second = tmp_path / "b.folio"
    second.write_text('portfolio b\nhorizon start 2027-01-01T00:00 length 3 h step 1 h zone "UTC"\n'
                      'price p values [10, 50, 20]\nconnection g { sell at p buy at p }\n'
                      'site s at g { demand load from "out/cell.csv" column "discharge_mw" }\n')
    err = io.StringIO()
    assert main(["dispatch", str(second), "--out", str(out)], out=io.StringIO(), err=err) == 2
    assert "a file the portfolio reads" in err.getvalue()
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
