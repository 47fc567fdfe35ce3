"""The Pyomo model of a compiled portfolio, made from its :class:`~.arrays.Matrix`.

One ``Var`` per variable family (indexed by ``(*asset, t)``, ``slack`` by
number in relax mode), one indexed ``Constraint`` per row family (indexed by
the row keys the family gave, a bound family in relax mode by number) and
``objective``.  Row constants are already in the bounds, so a row reads
``lo <= sum(coef * var) <= hi``.  Built on first use of
:attr:`portfolio.compile.Built.model`; the matrix path to HiGHS never needs it.

:func:`from_pyomo` goes the other way, for a model the user changed
(docs/extending.md): the model as it stands, back into a :class:`Matrix`.
"""

from __future__ import annotations

import math
from typing import Optional, Sequence, Tuple

import numpy as np

from .arrays import Matrix, RowBlock


def to_pyomo(mx: Matrix, name: str, values: Optional[np.ndarray] = None):
    """``(model, columns)``: a ``pyomo.environ.ConcreteModel`` equal to ``mx``
    and its VarData in column order; ``values`` (one per column, e.g. a
    solution) are loaded into the variables when given."""
    import pyomo.environ as pe
    from pyomo.core.expr.numeric_expr import LinearExpression, MonomialTermExpression

    m = pe.ConcreteModel(name=name)
    datas = []
    for vname, (start, stop) in mx.var_ranges.items():
        var = pe.Var(list(mx.var_index[vname]), dense=True,
                     domain=pe.Binary if mx.binary[vname] else pe.NonNegativeReals)
        setattr(m, vname, var)
        vds = list(var.values())
        lo, hi = mx.col_lower[start:stop], mx.col_upper[start:stop]
        for i in np.nonzero(lo > 0)[0]:
            vds[i].setlb(float(lo[i]))
        for i in np.nonzero(hi < (1.0 if mx.binary[vname] else np.inf))[0]:
            vds[i].setub(float(hi[i]))
        datas.extend(vds)

    A = mx.A.tocsr()
    ptr, idx, val = A.indptr.tolist(), A.indices.tolist(), A.data.tolist()
    lower, upper = mx.row_lower.tolist(), mx.row_upper.tolist()
    for block in mx.blocks:
        rows = {}
        for key, r in zip(block.keys, range(block.start, block.stop)):
            body = LinearExpression([MonomialTermExpression((val[j], datas[idx[j]]))
                                     for j in range(ptr[r], ptr[r + 1])])
            rows[key] = _relation(body, lower[r], upper[r])
        setattr(m, block.name,
                pe.Constraint(list(rows), rule=lambda _m, *k, r=rows: r[k[0] if len(k) == 1 else k]))

    nz = np.nonzero(mx.cost)[0]
    m.objective = pe.Objective(expr=lin([(mx.cost[j], datas[j]) for j in nz], mx.offset),
                               sense=pe.maximize if mx.maximize else pe.minimize)
    if values is not None:
        load_values(datas, values)
    return m, datas


def lin(terms: Sequence[Tuple[float, object]], const: float = 0.0):
    """A Pyomo LinearExpression from ``(coef, VarData)`` pairs and a constant.

    Terms with a zero coefficient or a ``None`` variable are dropped.  This
    is several times faster than building the same sum with operators.
    """
    from pyomo.core.expr.numeric_expr import LinearExpression, MonomialTermExpression

    args = [MonomialTermExpression((float(c), v)) for c, v in terms
            if c != 0 and v is not None and not isinstance(v, (int, float))]
    if const:
        args.append(float(const))
    return LinearExpression(args)


def load_values(datas, values: np.ndarray) -> None:
    """Set each column's VarData to its value (no domain checks)."""
    for vd, x in zip(datas, values.tolist()):
        vd.set_value(x, skip_validation=True)


def _relation(body, lo: float, hi: float):
    has_lo, has_hi = lo > -math.inf, hi < math.inf
    if has_lo and has_hi:
        if lo == hi:
            return body == lo
        return (lo, body, hi)
    if has_lo:
        return body >= lo
    return body <= hi


def from_pyomo(model, columns: Sequence, base: Matrix) -> Tuple[Matrix, list]:
    """``(matrix, columns)`` of a Pyomo model that :func:`to_pyomo` made from
    ``base`` (``columns``: its VarData in ``base``'s column order) and the user
    may since have changed: added variables, constraints or objective terms,
    deactivated or replaced components, changed bounds, fixed variables.

    The arrays are read back with Pyomo's standard-form compiler (every
    active constraint, the one active objective), so they describe the model
    as it is now.  ``base``'s columns keep their positions (the schedule
    tables read them by family); a variable the model added gets a column
    after them, in a family named after its Pyomo component.  A column the
    compiler leaves out (fixed, or in no active row or objective) keeps its
    bounds and an empty column (a fixed one, lower = upper = its value).  A
    ranged constraint becomes two one-sided rows.  Raises ``ValueError`` for
    what the arrays cannot hold (a nonlinear term, no or several active
    objectives) and lets Pyomo's ``InfeasibleConstraintException`` through
    for a row without variables that cannot hold.
    """
    import scipy.sparse as sp
    from pyomo.repn.plugins.standard_form import LinearStandardFormCompiler

    try:
        info = LinearStandardFormCompiler().write(model, mixed_form=True, set_sense=None)
    except (ValueError, TypeError) as exc:
        raise ValueError(f"the model cannot be read as a linear (mixed-integer) program: {exc}") from exc
    if len(info.objectives) != 1:
        raise ValueError(f"the model needs exactly one active objective, it has {len(info.objectives)}")

    cols = list(columns)
    position = {id(vd): j for j, vd in enumerate(cols)}
    added: dict = {}                                   # component name -> its new VarData, in order
    for vd in info.columns:
        if id(vd) not in position:
            added.setdefault(vd.parent_component().name, []).append(vd)
    var_ranges = dict(base.var_ranges)
    var_index = dict(base.var_index)
    binary = dict(base.binary)
    for name, vds in added.items():
        if name in var_ranges:
            raise ValueError(f"the model's variable {name!r} has new entries; add a new component instead")
        var_ranges[name] = (len(cols), len(cols) + len(vds))
        var_index[name] = [vd.index() for vd in vds]
        binary[name] = all(vd.is_binary() for vd in vds)
        for vd in vds:
            position[id(vd)] = len(cols)
            cols.append(vd)
    n = len(cols)

    k = len(info.columns)
    perm = sp.csc_matrix((np.ones(k), ([j for j in range(k)], [position[id(vd)] for vd in info.columns])),
                         shape=(k, n))
    A = sp.csc_matrix(info.A @ perm) if k else sp.csc_matrix((len(info.rows), n))
    A.sum_duplicates()
    A.eliminate_zeros()
    rhs = np.asarray(info.rhs, dtype=float)
    ops = np.fromiter((r.bound_type for r in info.rows), dtype=np.int8, count=len(info.rows))
    row_lower = np.where(ops == 1, -np.inf, rhs)
    row_upper = np.where(ops == -1, np.inf, rhs)
    blocks = []
    for i, r in enumerate(info.rows):
        name = r.constraint.parent_component().name
        if blocks and blocks[-1].name == name:
            blocks[-1].stop = i + 1
            blocks[-1].keys.append(r.constraint.index())
        else:
            blocks.append(RowBlock(name, i, i + 1, [r.constraint.index()]))

    col_lower, col_upper = np.empty(n), np.empty(n)
    for j, vd in enumerate(cols):
        if vd.fixed:
            col_lower[j] = col_upper[j] = float(vd.value)
        else:
            col_lower[j] = -np.inf if vd.lb is None else float(vd.lb)
            col_upper[j] = np.inf if vd.ub is None else float(vd.ub)
    integer = np.fromiter((vd.is_integer() for vd in cols), dtype=bool, count=n)
    cost = np.zeros(n)
    if k and info.c.shape[0]:
        cost[[position[id(vd)] for vd in info.columns]] = np.asarray(info.c[[0], :].toarray()).ravel()
    offset = float(info.c_offset[0]) if len(info.c_offset) else 0.0
    mx = Matrix(A=A, row_lower=row_lower, row_upper=row_upper, col_lower=col_lower,
                col_upper=col_upper, integer=integer, cost=cost, offset=offset,
                maximize=int(info.objectives[0].sense) == -1, var_ranges=var_ranges,
                var_index=var_index, binary=binary, blocks=blocks)
    return mx, cols
