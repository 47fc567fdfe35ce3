"""The wide oracle: about 300 generated portfolios, three zero-gap solves each.

The slow group (``python -m pytest -q -m slow``; the default run leaves it
out).  Every portfolio of ``random_portfolios.WIDE_SEEDS`` (single site,
minimum output, run and rest, ramps, cascades with delays and water in
transit, transfers, site limits inside connection limits, a portfolio-wide
cap, the direction rule, supplies with and without curtailment, demands,
negative prices) is solved at ``mip_gap=0``

* by the engine with its warm start (the default),
* by the engine without it,
* by the independent formulation in tests/oracle_pulp.py (CBC, gap 0).

The three proven optima must agree within 1e-6 relative (plus 1e-6
absolute near zero), and so must the statuses; all three saying infeasible
is agreement.  A warm start may only change how soon the optimum is found,
never the optimum, so the two engine solves are compared as strictly as the
engine and CBC.  An engine optimum at zero gap must also be its own bound
(best_bound within the same tolerance of the objective): a "gap 0" beside a
bound elsewhere is a proof of some other schedule.  Each engine schedule is
then re-checked by the auditor (tests/audit.py).

On a disagreement the message names the family and seed and lists the
three statuses and objectives; it adds the oracle's formulation solved by
HiGHS without a start, a fourth opinion that tells a fault of the engine's
formulation from one of a solver.

The cheap checks of the generator (every portfolio is one the front end
accepts; the seeds cover the rules) are not slow and run by default.
"""

import tempfile
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest

import random_portfolios as RP
from audit import audit
from oracle_pulp import INFEASIBLE, OPTIMAL, build_oracle, solve_oracle
from portfolio.dispatch import dispatch
from portfolio.solve import SolveOptions

REL, ABS = 1e-6, 1e-6
CASES = [(fam, s) for fam, seeds in RP.WIDE_SEEDS.items() for s in seeds]


def _engine(p, warm):
    return dispatch(p, SolveOptions(mip_gap=0.0, warm_start=warm, explain_infeasible=False))


def _close(a, b):
    return abs(a - b) <= REL * max(abs(a), abs(b)) + ABS


def _oracle_by_highs(p):
    """The oracle's own formulation solved by HiGHS (no start): (status, objective)."""
    import highspy
    prob, _var, _n = build_oracle(p)
    with tempfile.TemporaryDirectory() as d:
        path = str(Path(d) / "oracle.mps")
        prob.writeMPS(path, with_objsense=True)
        h = highspy.Highs()
        h.setOptionValue("output_flag", False)
        h.setOptionValue("mip_rel_gap", 0.0)
        h.readModel(path)
        h.run()
    status = h.modelStatusToString(h.getModelStatus())
    return status, h.getInfo().objective_function_value


def _report(p, fam, seed, warm, cold, o, why):
    def row(label, status, obj, extra=""):
        shown = "-" if obj is None else f"{obj:.10g}"
        return f"  {label:<34} {status:<11} {shown}{extra}"

    def gap(r):
        return f"  (gap {r.mip_gap!r}, bound {r.best_bound!r}, start objective {r.summary.get('start_objective')!r})"

    lines = [f"{p.name} (family {fam!r}, seed {seed}): {why}",
             row("engine, warm start", warm.status, warm.objective, gap(warm)),
             row("engine, no warm start", cold.status, cold.objective,
                 f"  (gap {cold.mip_gap!r}, bound {cold.best_bound!r})"),
             row("CBC (tests/oracle_pulp.py)", o.status, o.objective)]
    for label, r in (("with start", warm), ("without start", cold)):
        if r.objective is not None and o.objective is not None:
            d = r.objective - o.objective
            lines.append(f"  {label} - CBC = {d:.6g} ({d / max(abs(o.objective), 1e-9):.3g} relative)")
    try:
        lines.append(row("oracle's formulation by HiGHS", *_oracle_by_highs(p)))
    except Exception as exc:        # the extra opinion must not hide the report
        lines.append(f"  oracle's formulation by HiGHS: could not be solved ({exc!r})")
    return "\n".join(lines)


@pytest.mark.slow
@pytest.mark.parametrize("fam, seed", CASES, ids=[f"{f}-{s}" for f, s in CASES])
def test_engine_with_and_without_start_matches_oracle(fam, seed, tmp_path):
    p = RP.make(fam, seed)
    # CBC runs in its own process: let it work while HiGHS solves in this one.
    with ThreadPoolExecutor(1) as pool:
        fut = pool.submit(solve_oracle, p)
        warm = _engine(p, True)
        cold = _engine(p, False)
        o = fut.result()
    statuses = (warm.status, cold.status, o.status)
    if statuses != ("optimal", "optimal", OPTIMAL):
        if statuses != ("infeasible", "infeasible", INFEASIBLE):
            pytest.fail(_report(p, fam, seed, warm, cold, o, "the statuses disagree"), pytrace=False)
        return
    why = [f"{label}: the objectives disagree" for label, r in (("with start", warm), ("without start", cold))
           if not _close(r.objective, o.objective)]
    for label, r in (("with start", warm), ("without start", cold)):
        # "zero gap" within the comparison's tolerance: HiGHS also stops at its
        # absolute gap (1e-6 by default), which on an optimum of 1000 is 1e-9 relative
        if r.mip_gap is not None and r.mip_gap > REL + ABS / max(abs(r.objective), 1e-9):
            why.append(f"{label}: not solved to zero gap")
        # an optimum at zero gap is its own bound: a bound elsewhere means the
        # objective and the proof are of different schedules
        if r.best_bound is None or not _close(r.objective, r.best_bound):
            why.append(f"{label}: optimal at gap {r.mip_gap!r} but its bound is {r.best_bound!r}")
    if why:
        pytest.fail(_report(p, fam, seed, warm, cold, o, "; ".join(why)), pytrace=False)
    for label, r in (("warm", warm), ("cold", cold)):
        problems = audit(p, r.write(tmp_path / label))
        if problems:
            pytest.fail(f"{p.name}, engine {label}: the auditor finds\n  " + "\n  ".join(problems),
                        pytrace=False)


# -- the generator (cheap: part of the default run) ---------------------------------------

def test_there_are_about_three_hundred_wide_portfolios():
    assert len(CASES) >= 300, len(CASES)
    assert len(set(CASES)) == len(CASES)


@pytest.mark.parametrize("fam", sorted(RP.WIDE_SEEDS))
def test_wide_portfolios_are_ones_the_front_end_accepts(fam):
    bad = {}
    for s in RP.WIDE_SEEDS[fam]:
        errors = RP.front_end_errors(RP.make(fam, s))
        if errors:
            bad[s] = errors
    assert not bad, bad


def test_the_wide_families_cover_the_rules():
    seen = set().union(*(RP.features(RP.make(fam, s)) for fam, s in CASES))
    assert RP.WIDE_RULES <= seen, sorted(RP.WIDE_RULES - seen)


def test_front_end_errors_finds_what_the_front_end_refuses():
    # the check itself can fail: a spill route from a store that may not spill;
    # a run rule without exclusive modes is refused by the model itself
    import dataclasses
    p = next(q for q in (RP.make("cascade", s) for s in RP.WIDE_SEEDS["cascade"])
             if any(r.kind == "spill" for r in q.routes))
    assert RP.front_end_errors(p) == []
    k = p.storages[next(r.source for r in p.routes if r.kind == "spill")]
    with pytest.raises(ValueError, match="exclusive"):
        dataclasses.replace(k, min_run_h=2 * p.horizon.step_hours, discharge_min=0.1, exclusive=False)
    odd = dataclasses.replace(k, spill_allowed=False, spill_max=None)
    errors = RP.front_end_errors(dataclasses.replace(p, storages={**p.storages, k.name: odd}))
    assert any("a spill route from a storage that may not spill" in e for e in errors), errors
