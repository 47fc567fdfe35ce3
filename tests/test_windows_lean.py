"""Windows without the whole horizon's matrix (portfolio/windows/run.py, docs/windows.md).

For horizons too long to compile whole, dispatch by windows keeps the whole
portfolio only as a layout (``build(p, layout_only=True)``: variables,
expressions and objective, no rows) and checks the stitched schedule piece
by piece (``check_pieces``).  Both are compared here with the full build and
the whole-matrix check they replace: the same columns and prices, the same
verdict on good schedules and on schedules broken at a seam.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import factory as F  # noqa: E402
import random_portfolios as RP  # noqa: E402

from portfolio.compile import build  # noqa: E402
from portfolio.compile import expressions as E  # noqa: E402
from portfolio.solve import SolveOptions  # noqa: E402
from portfolio.solve.certify import check_vector, objective  # noqa: E402
from portfolio.windows import Windows, WindowsError, dispatch_windows, plan  # noqa: E402
from portfolio.windows.run import check_pieces  # noqa: E402
from portfolio.windows.spec import (BOUND_SPLIT, BOUND_WHOLE, SPLIT_ABOVE,  # noqa: E402
                                    bound_method)

CASES = [("modes", 1), ("modes", 3), ("cascade", 0), ("cascade", 2), ("linked", 1)]


@pytest.mark.parametrize("family, seed", CASES, ids=[f"{f}-{s}" for f, s in CASES])
def test_a_layout_has_the_full_builds_columns_and_prices_and_no_rows(family, seed):
    p = RP.make(family, seed)
    full, lay = build(p), build(p, layout_only=True)
    assert lay.matrix.num_row == 0 and full.matrix.num_row > 0
    assert lay.matrix.var_ranges == full.matrix.var_ranges
    assert lay.var_blocks == full.var_blocks
    assert np.array_equal(lay.matrix.cost, full.matrix.cost)
    assert lay.matrix.offset == full.matrix.offset
    assert np.array_equal(lay.matrix.integer, full.matrix.integer)
    for name, keys in full.var_keys.items():     # the lazy keys read as the tuples they stand for
        T = full.steps
        want = [(a if isinstance(a, tuple) else (a,)) + (t,) for a in full.var_blocks[name]
                for t in range(T)]
        assert list(keys) == want and len(keys) == len(want)
        if want:
            assert keys[len(want) - 1] == want[-1] and keys[-1] == want[-1]
            assert keys[0:2] == want[0:2]


def _stitched(family, seed):
    """A stitched schedule (whole bound: ``result.built`` is the full build, holding it)."""
    p = RP.make(family, seed)
    T, dt = p.horizon.steps, p.horizon.step_hours
    commit = max(1, T // 4)
    r = dispatch_windows(p, Windows(commit * dt, (commit // 2) * dt), SolveOptions(mip_gap=0.0))
    if r.status not in ("optimal", "feasible"):
        pytest.skip(f"windows gave {r.status}")
    index = {t.isoformat(): i for i, t in enumerate(p.horizon.index)}
    pieces = [(index[w["start"]], w["commit_steps"]) for w in r.summary["windows"]["windows"]]
    return p, r.built, r.built.solution.copy(), pieces


@pytest.mark.parametrize("family, seed", CASES, ids=[f"{f}-{s}" for f, s in CASES])
def test_checking_piece_by_piece_agrees_with_the_whole_matrix(family, seed):
    p, full, x, pieces = _stitched(family, seed)
    whole, _ = check_vector(full.matrix, x)
    by_pieces, _ = check_pieces(p, full, x, pieces)
    assert whole <= 1e-6 and by_pieces <= 1e-6
    lay = build(p, layout_only=True)
    assert objective(lay.matrix, x) == pytest.approx(objective(full.matrix, x), rel=1e-12)
    # the same schedule broken at a seam: the state of charge jumps where a piece begins
    k = next(iter(p.storages))
    seam = pieces[1][0]
    broken = x.copy()
    at = full.matrix.var_ranges[E.SOC][0] + full.var_blocks[E.SOC][k] + seam
    s = p.storages[k]
    broken[at] = s.soc_max if x[at] < 0.5 * (s.soc_min + s.soc_max) else s.soc_min
    assert abs(broken[at] - x[at]) > 1e-3
    whole, _ = check_vector(full.matrix, broken)
    by_pieces, where = check_pieces(p, full, broken, pieces)
    assert whole > 1e-4 and by_pieces > 1e-4, (whole, by_pieces)
    assert where.startswith("piece from step")


def test_a_minimum_run_cut_at_a_seam_is_caught_piece_by_piece():
    """A 4 h run that ends after 2 h, the break exactly at a seam: no row of either piece alone
    sees it; the carried-in run does."""
    prices = [0, 0, 0, 0, 100, 100, 1, 1, 1, 1, 1, 1]
    st = F.storage("b", energy=4, power=1, soc_start=4.0, discharge_min=1.0, min_run_h=4,
                   charge_max=0.0)
    p = F.market(prices, [st])
    r = dispatch_windows(p, Windows(6, 0), SolveOptions(mip_gap=0.0))
    full, x = r.built, r.built.solution.copy()
    pieces = [(0, 6), (6, 6)]
    d = x[full.matrix.var_ranges[E.DISCHARGE][0]:][:12]
    assert d[4] > 0.5 and d[6] > 0.5               # the run crosses the seam at step 6
    assert check_pieces(p, full, x, pieces)[0] <= 1e-6
    # stop the run at the seam: no discharge (and its mode binary off) from step 6 on
    broken = x.copy()
    for name in (E.DISCHARGE, full.expr["mode_bins"]["b"].get("discharge")):
        a = full.matrix.var_ranges[name][0] + full.var_blocks[name]["b"]
        broken[a + 6:a + 12] = 0.0
    soc = full.matrix.var_ranges[E.SOC][0] + full.var_blocks[E.SOC]["b"]
    broken[soc + 6:soc + 12] = broken[soc + 5]
    whole, _ = check_vector(full.matrix, broken)
    by_pieces, _ = check_pieces(p, full, broken, pieces)
    assert whole > 1e-4 and by_pieces > 1e-4, (whole, by_pieces)
    # and the same break inside the second piece only (from step 8) is caught there too
    late = x.copy()
    a = full.matrix.var_ranges[E.DISCHARGE][0] + full.var_blocks[E.DISCHARGE]["b"]
    late[a + 8] = 0.5 * late[a + 8] if late[a + 8] > 0 else 0.5
    assert check_pieces(p, full, late, pieces)[0] > 1e-4


# -- choosing the bound ---------------------------------------------------------------

def test_auto_splits_only_above_the_size_and_never_with_ends_that_need_the_lp():
    small = F.market([10.0, 40.0] * 12, [F.storage("b", energy=1, power=1)])
    assert bound_method(Windows(), small) == BOUND_WHOLE
    steps = SPLIT_ABOVE // 2 + 1
    big = F.portfolio(steps, storages=[F.storage(f"b{i}", energy=1, power=1) for i in range(2)],
                      series_list=[F.series("p", np.zeros(steps), "price")])
    assert bound_method(Windows(), big) == BOUND_SPLIT
    assert bound_method(Windows(end="target"), big) == BOUND_WHOLE
    assert bound_method(Windows(bound="whole"), big) == BOUND_WHOLE


@pytest.mark.parametrize("spec", [Windows(end="target", bound="split"),
                                  Windows(end="pin", overlap_h=0, bound="split"),
                                  Windows(bound="halves")])
def test_split_with_ends_that_need_the_lp_or_an_unknown_bound_is_coded(spec):
    with pytest.raises(WindowsError) as e:
        plan(spec, 48, 1.0)
    assert e.value.code == "W008"


DEMO = Path(__file__).resolve().parents[1] / "examples" / "kestrel_bay" / "kestrel_bay.folio"


@pytest.mark.parametrize("flags, words", [
    (["--bound", "split"], "--bound goes with windows"),
    (["--windows", "12h", "--window-end", "target", "--bound", "split"], "W008"),
    (["--windows", "12h", "--workers", "2", "--bound", "split"], "W008")])
def test_the_cli_refuses_a_bound_it_cannot_use_and_writes_nothing(tmp_path, capsys, flags, words):
    from portfolio.cli import main
    out = tmp_path / "out"
    rc = main(["dispatch", str(DEMO), "--out", str(out), *flags])
    err = capsys.readouterr().err
    assert rc == 2 and words in err and "Traceback" not in err, err
    assert not out.exists()


def test_the_cli_dispatches_by_windows_bounded_by_pieces(tmp_path, capsys):
    """The demo by windows with ``--bound split``: a schedule, the bound by pieces in
    summary.json (at least the stitched objective), the checks piece by piece in its notes."""
    import json
    from portfolio.cli import main
    out = tmp_path / "out"
    rc = main(["dispatch", str(DEMO), "--out", str(out), "--windows", "12h", "--bound", "split"])
    err = capsys.readouterr().err
    assert rc in (0, 1) and "Traceback" not in err, err
    summary = json.loads((out / "summary.json").read_text())
    w = summary["windows"]
    assert w["bound_method"] == "split"
    assert w["stitched_objective"] is not None and w["lp_bound"] is not None
    assert w["stitched_objective"] <= w["lp_bound"] + 1e-6 * max(1.0, abs(w["lp_bound"]))
    assert w["max_violation"] <= 1e-6
    assert any("piece by piece" in n for n in summary["notes"]), summary["notes"]


def test_the_lps_around_the_windows_are_told_as_phases():
    # the bound by pieces and its seam prices are most of a split dispatch's time: each LP is
    # told (done counts up to its total, in order), so a progress display is never frozen
    from portfolio.windows import run as R
    p = RP.make("modes", 1)
    T, dt = p.horizon.steps, p.horizon.step_hours
    commit = max(1, T // 4) * dt
    told = []
    r = dispatch_windows(p, Windows(commit, 0, bound="split"), SolveOptions(mip_gap=0.0),
                         phase=lambda what, done, total, s: told.append((what, done, total)))
    assert r.objective is not None
    for what in (R.PHASE_PRICES, R.PHASE_BOUND):
        mine = [(d, t) for w, d, t in told if w == what]
        total = mine[0][1]
        assert total > 0 and [d for d, _ in mine] == list(range(total + 1)), (what, mine)
    told.clear()
    dispatch_windows(p, Windows(commit, 0, bound="whole"), SolveOptions(mip_gap=0.0),
                     phase=lambda what, done, total, s: told.append((what, done, total)))
    assert told == [(R.PHASE_LP, 0, 1), (R.PHASE_LP, 1, 1)]
