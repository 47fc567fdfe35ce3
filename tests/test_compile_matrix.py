"""The compiler's arrays (what HiGHS receives) and the Pyomo model made from them.

The default solver path passes ``Built.matrix`` to HiGHS without making the
Pyomo model; ``Built.model`` is made from the same arrays on request.  Here
Pyomo's own standard-form compiler (an outside reference: pyomo.repn's
``LinearStandardFormCompiler``) reads that Pyomo model back into a matrix,
which must be the one HiGHS gets, entry by entry, on seeded random
portfolios in normal and relax mode.
"""

import numpy as np
import pytest
import scipy.sparse as sp

import factory as F
import random_portfolios as RP
from portfolio.compile import Ctx, build
from portfolio.solve import solve, to_highs_lp
from solve_support import to_standard_form

CASES = [("single", s) for s in (0, 3, 8, 13)] + [("linked", s) for s in (0, 2, 5)]


def _arrays(lp):
    a = lp.a_matrix_
    A = sp.csc_matrix((np.asarray(a.value_), np.asarray(a.index_), np.asarray(a.start_)),
                      shape=(lp.num_row_, lp.num_col_))
    A.eliminate_zeros()
    integer = np.zeros(lp.num_col_, dtype=bool)
    if len(lp.integrality_):
        integer = np.array([int(v) != 0 for v in lp.integrality_])
    return dict(A=A, rl=np.asarray(lp.row_lower_), ru=np.asarray(lp.row_upper_),
                cl=np.asarray(lp.col_lower_), cu=np.asarray(lp.col_upper_),
                c=np.asarray(lp.col_cost_), integer=integer, offset=lp.offset_, sense=lp.sense_)


@pytest.mark.parametrize("relax", [False, True])
@pytest.mark.parametrize("family,seed", CASES)
def test_pyomo_model_compiles_back_to_the_matrix_highs_gets(family, seed, relax):
    b = build(RP.make(family, seed), relax=relax)
    ours = _arrays(to_highs_lp(b)[0])
    std_lp, columns, _ = to_standard_form(b.model)
    std = _arrays(std_lp)
    pos = {id(vd): j for j, vd in enumerate(b.model_columns)}
    perm = np.array([pos[id(vd)] for vd in columns], dtype=np.int64)   # std column -> ours
    n = len(b.model_columns)
    assert len(set(perm.tolist())) == len(perm)

    # Pyomo's compiler leaves out rows without variables; so must they be empty and satisfied here
    nnz = np.diff(ours["A"].tocsr().indptr)
    empty = nnz == 0
    assert np.all(ours["rl"][empty] <= 0) and np.all(ours["ru"][empty] >= 0)
    A = ours["A"].tocsr()[~empty]
    S = std["A"].tocoo()
    S = sp.csr_matrix((S.data, (S.row, perm[S.col])), shape=(S.shape[0], n))
    assert A.shape == S.shape
    assert abs(A - S).max() == 0 if A.nnz else S.nnz == 0
    np.testing.assert_array_equal(ours["rl"][~empty], std["rl"])
    np.testing.assert_array_equal(ours["ru"][~empty], std["ru"])

    # columns: bounds, integrality and costs; a column Pyomo left out is in no row and costs nothing
    np.testing.assert_array_equal(ours["cl"][perm], std["cl"])
    np.testing.assert_array_equal(ours["cu"][perm], std["cu"])
    np.testing.assert_array_equal(ours["integer"][perm], std["integer"])
    np.testing.assert_allclose(ours["c"][perm], std["c"], rtol=0, atol=1e-12)
    unused = np.setdiff1d(np.arange(n), perm)
    assert np.all(ours["c"][unused] == 0)
    assert ours["offset"] == pytest.approx(std["offset"], abs=1e-12)
    assert ours["sense"] == std["sense"]


def test_default_path_needs_no_pyomo_model_and_loads_the_solution_when_it_is_made():
    st = F.storage("s", energy=2.0, power=1.0, eta_charge=0.9, eta_discharge=0.9, exclusive=True)
    b = build(F.market([5, 1, 8, 3, 9, 2], [st]))
    sol = solve(b)
    assert sol.status == "optimal"
    assert b._model is None          # the matrix path never made it
    m = b.model
    for name, vals in sol.values.items():
        got = np.array([vd.value for vd in getattr(m, name).values()], dtype=float)
        np.testing.assert_array_equal(got, vals)


def _one_var_ctx():
    ctx = Ctx(F.market([1.0, 2.0], []))
    ctx.add_var("x", ["a"])
    return ctx


def test_repeated_columns_in_a_row_are_summed_and_cancelled_entries_dropped():
    ctx = _one_var_ctx()
    c0, c1 = ctx.v("x", "a", 0), ctx.v("x", "a", 1)
    ctx.row("r", (0,), [(1.0, c0), (2.0, c0), (1.0, c1), (-1.0, c1), (5.0, None), (0.0, c1)],
            const=1.0, hi=4.0)
    mx = ctx.finish()
    # analytic: 3 x0 + 0 x1 + 1 <= 4  ->  3 x0 <= 3
    assert mx.A.toarray().tolist() == [[3.0, 0.0]] and mx.A.nnz == 1
    assert mx.row_upper.tolist() == [3.0] and mx.row_lower.tolist() == [-np.inf]


def test_a_row_key_used_twice_is_a_programming_error():
    ctx = _one_var_ctx()
    ctx.row("r", ("k",), [(1.0, ctx.v("x", "a", 0))], hi=1.0)
    ctx.row("r", ("k",), [(1.0, ctx.v("x", "a", 1))], hi=1.0)
    with pytest.raises(RuntimeError, match="added twice"):
        ctx.finish()
