"""The Pyomo model of a compiled portfolio, made from its :class:`~.context.Matrix`.

One ``Var`` per variable family (indexed by ``(*asset, t)``, ``slack`` by
number in relax mode), one indexed ``Constraint`` per row family (indexed by
the row keys the family gave, a bound family in relax mode by number) and
``objective``.  Row constants are already in the bounds, so a row reads
``lo <= sum(coef * var) <= hi``.  Built on first use of
:attr:`portfolio.compile.Built.model`; the matrix path to HiGHS never needs it.
"""

from __future__ import annotations

import math
from typing import Optional, Sequence, Tuple

import numpy as np

from .context import Matrix


def to_pyomo(mx: Matrix, name: str, values: Optional[np.ndarray] = None):
    """``(model, columns)``: a ``pyomo.environ.ConcreteModel`` equal to ``mx``
    and its VarData in column order; ``values`` (one per column, e.g. a
    solution) are loaded into the variables when given."""
    import pyomo.environ as pe
    from pyomo.core.expr.numeric_expr import LinearExpression, MonomialTermExpression

    m = pe.ConcreteModel(name=name)
    datas = []
    for vname, (start, stop) in mx.var_ranges.items():
        var = pe.Var(mx.var_index[vname], dense=True,
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
