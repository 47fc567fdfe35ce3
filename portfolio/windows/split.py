"""A bound by pieces: the horizon's LP cut at seams, each piece alone, the seams priced.

For horizons whose whole LP would not fit in memory (docs/windows.md, "Horizons too
long for memory").  The horizon is cut into pieces ``(start, stop)``; what ties one
piece to the next is dualised (Lagrangian relaxation; Geoffrion 1974, "Lagrangean
relaxation for integer programming", Math. Programming Study 2; for time-coupled
schedules, Conejo, Castillo, Minguez and Garcia-Bertrand 2006, "Decomposition
Techniques in Mathematical Programming", Springer, ch. 4), the rest is dropped:

* the state of charge at a seam: piece j starts from a free column ``s`` in
  [soc_min, soc_max] priced ``-lam[j-1]`` per MWh and values what it leaves at its
  end at ``+lam[j]`` (``Storage.stored_value``).  Any ``lam`` gives a valid bound:
  for a schedule of the whole horizon the terms cancel in pairs;
* water on a delayed route across a seam: the piece that releases it earns
  ``mu = max(lam of the target at its end, 0)`` per MWh still on the way at its end
  (``Route.transit_value``); a later piece receives it as free columns in
  [0, the most the route can carry] priced ``-mu`` (what was in transit at the
  start arrives as declared);
* rules that look across a seam (minimum run and rest, the ramp, cycles of a day
  cut by a seam, the horizon's cycle limit) see nothing before a piece: each piece
  keeps only its own part, a relaxation.

The bound is the sum over pieces of :func:`~portfolio.solve.certify.dual_bound` of
each piece's LP (binaries continuous), valid for any multipliers HiGHS returns, so
a number here is proven, whatever the prices; good prices only make it tighter.
:func:`seam_values` finds them by a backward pass: the last two pieces solved as
one LP from a given level at their start, the dual of the balance row at the seam
between them is its price; then the two pieces before, the end valued at that
price, and so on (the pieces overlap by one, so each seam is inside an LP, where
its price is not one-sided).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace
from typing import Callable, Dict, List, Optional, Sequence, Tuple

import numpy as np
import scipy.sparse as sp

from ..compile import build
from ..compile import expressions as E
from ..model import END_FREE, Portfolio
from ..solve import SolveOptions
from ..solve.certify import dual_bound
from .bound import balance_rows, relax, solve_relaxation
from .cut import sliced

Piece = Tuple[int, int]      # (first step, step after the last)


@dataclass
class SeamValues:
    """Per storage the price of one more MWh in store at each seam (``len(pieces) - 1``
    values, money per MWh; NaN where the piece after the seam gave none)."""

    values: Dict[str, np.ndarray]
    seconds: float
    statuses: List[str] = field(default_factory=list)     # per piece, last first


@dataclass
class SplitBound:
    bound: Optional[float]          # None: no bound (``reason`` says why)
    reason: str
    seconds: float
    per_piece: List[Optional[float]] = field(default_factory=list)


def check_pieces_plan(pieces: Sequence[Piece], T: int) -> None:
    """Pieces must cover ``0 .. T-1`` in order, each non-empty (a fault of the caller)."""
    at = 0
    for a, b in pieces:
        if a != at or b <= a:
            raise ValueError(f"pieces must cover the horizon in order: {list(pieces)!r}")
        at = b
    if at != T:
        raise ValueError(f"pieces end at step {at}, the horizon at {T}")


def piece_model(p: Portfolio, start: int, stop: int, end_value: Optional[Dict[str, float]] = None,
                soc_start: Optional[Dict[str, float]] = None,
                transit: Optional[Dict[str, float]] = None) -> Portfolio:
    """Steps ``start .. stop-1`` of ``p`` as a portfolio of their own, with nothing carried
    in from before (see the module docstring): ``soc_start`` per storage (default its
    declared start on the first piece, ``soc_min`` after), ``end_value`` the price of what
    is left at its end (not the last piece), ``transit`` per route the price of water still
    on its way there."""
    T = p.horizon.steps
    horizon, series = sliced(p, start, stop - start)
    days = (E.calendar_days(p.horizon) if any(s.cycles_per_day is not None
                                               for s in p.storages.values()) else [])
    storages = {}
    for k, s in p.storages.items():
        kw: dict = {}
        if start > 0:
            kw.update(soc_start=s.soc_min, prior_mode=None, prior_h=None, prior_net_mw=0.0,
                      arriving=(), cycles_drawn_mwh=0.0)
        if soc_start is not None and k in soc_start:
            kw["soc_start"] = min(max(float(soc_start[k]), s.soc_min), s.soc_max)
        if s.cycles_per_day is not None:       # the whole horizon's share of each day, nothing before
            kw["cycles_days"] = tuple((day, share, 0.0) for day, steps, share in days
                                      if steps[0] < stop and steps[-1] >= start)
        if stop < T:
            kw.update(end_rule=END_FREE, end_value=0.0,
                      stored_value=float((end_value or {}).get(k, 0.0)))
        storages[k] = replace(s, **kw)
    routes = tuple(replace(r, in_transit=r.in_transit if start == 0 else 0.0,
                           transit_value=float((transit or {}).get(r.name, 0.0)) if stop < T else 0.0)
                   for r in p.routes)
    return replace(p, horizon=horizon, series=series, storages=storages, routes=routes)


def without_rules(p: Portfolio) -> Portfolio:
    """``p`` without its binary rules (exclusive modes, minimum run and rest, minimum
    output): a plain LP, many times faster to solve than the relaxation with them, for
    prices only (any prices give a valid bound)."""
    return replace(p, storages={k: replace(s, exclusive=False, min_run_h=0.0, min_rest_h=0.0,
                                           charge_min=0.0, discharge_min=0.0)
                                for k, s in p.storages.items()})


def _finite(v: float) -> float:
    return float(v) if math.isfinite(v) else 0.0


def seam_values(p: Portfolio, pieces: Sequence[Piece], states: Optional[Dict[str, np.ndarray]] = None,
                options: Optional[SolveOptions] = None,
                seconds: Optional[float] = None, model_of=None, rules: bool = False,
                tick: Optional[Callable[[], None]] = None) -> SeamValues:
    """The price of stored energy at each seam by a backward pass (module docstring).

    The price at the seam between pieces j and j+1 is the dual of the balance row there in
    the LP of the two pieces together (so the level at the seam is free to move both
    ways), from the level at the seam before piece j, its end valued at the price of the
    seam after.  ``states``: per storage its level at each seam (``len(pieces) - 1``
    values; default its declared start level everywhere); ``seconds``: a time limit per
    LP; ``model_of(start, stop, prices)``: the portfolio of those steps with its end
    valued at ``prices`` (None: the horizon's own end), for a caller that knows more of
    what comes in at ``start`` than a level (a schedule before it: ``run._split_bound``);
    ``states`` is then not read.  ``rules``: keep the binary rules in these LPs (their
    relaxation); by default they are left out (:func:`without_rules`: the prices are
    guidance, and with minimum runs of many steps the LPs with them take ten times as
    long).  No whole-horizon model is built.  ``tick()`` is called after each LP (progress).
    """
    t0 = time.perf_counter()
    T = p.horizon.steps
    check_pieces_plan(pieces, T)
    n = len(pieces)
    values = {k: np.full(max(n - 1, 0), np.nan) for k in p.storages}
    statuses: List[str] = []
    after: Optional[Dict[str, float]] = None
    variant = (options or SolveOptions()).variant
    for j in range(n - 2, -1, -1):
        start, seam = pieces[j]
        stop = pieces[j + 1][1]
        if model_of is not None:
            model = model_of(start, stop, after)
        else:
            at = None
            if j > 0:
                at = {k: (float(states[k][j - 1]) if states is not None and k in states
                          else s.soc_start) for k, s in p.storages.items()}
            model = piece_model(p, start, stop, end_value=after, soc_start=at,
                                transit=_transit(p, after) if after is not None else None)
        if not rules:
            model = without_rules(model)
        rel = relax(build(model, variant=variant), options, seconds)
        statuses.append(rel.status)
        if tick is not None:
            tick()
        if rel.solved:
            for k in p.storages:
                values[k][j] = rel.value[k][seam - start - 1]
        # an LP without prices leaves the seam unpriced (zero: still a valid bound)
        after = {k: _finite(values[k][j]) for k in p.storages}
    return SeamValues(values, time.perf_counter() - t0, statuses)


def guide_values(p: Portfolio, pieces: Sequence[Piece], options: Optional[SolveOptions] = None,
                 seconds: Optional[float] = None, rounds: int = 1,
                 tick: Optional[Callable[[], None]] = None) -> SeamValues:
    """Seam prices without a schedule: a backward pass from the declared start levels, then
    ``rounds`` times a forward pass (each piece's LP from where the one before it ended,
    its end valued at the prices so far) giving the levels at the seams, and a backward
    pass at those levels (``(1 + 2 * rounds) * (len(pieces) - 1)`` LPs, ``tick()`` after each)."""
    t0 = time.perf_counter()
    sv = seam_values(p, pieces, options=options, seconds=seconds, tick=tick)
    statuses = list(sv.statuses)
    for _ in range(rounds):
        states = _forward(p, pieces, sv.values, options, seconds, statuses, tick)
        sv = seam_values(p, pieces, states=states, options=options, seconds=seconds, tick=tick)
        statuses += sv.statuses
    return SeamValues(sv.values, time.perf_counter() - t0, statuses)


def _forward(p: Portfolio, pieces: Sequence[Piece], values: Dict[str, np.ndarray], options,
             seconds, statuses: List[str], tick=None) -> Dict[str, np.ndarray]:
    """Per storage its level at each seam along piece LPs (without the binary rules) solved
    in order (where a piece gives no schedule, the level it started from)."""
    n = len(pieces)
    states = {k: np.zeros(max(n - 1, 0)) for k in p.storages}
    at = {k: s.soc_start for k, s in p.storages.items()}
    for j, (start, stop) in enumerate(pieces[:-1]):
        prices = {k: _finite(values[k][j]) for k in p.storages}
        model = without_rules(piece_model(p, start, stop, end_value=prices, soc_start=at,
                                          transit=_transit(p, prices)))
        rel = relax(build(model, variant=(options or SolveOptions()).variant), options, seconds)
        statuses.append(rel.status)
        if tick is not None:
            tick()
        for k in p.storages:
            if rel.solved:
                at[k] = float(rel.soc[k][-1])
            states[k][j] = at[k]
    return states


def _transit(p: Portfolio, prices: Dict[str, float]) -> Dict[str, float]:
    """Per delayed route the price of its water on the way: its target's, never below zero."""
    return {r.name: max(prices.get(r.target, 0.0), 0.0) for r in p.routes if int(r.delay_steps) > 0}


def split_bound(p: Portfolio, pieces: Sequence[Piece], values: Dict[str, np.ndarray],
                options: Optional[SolveOptions] = None,
                seconds: Optional[float] = None,
                tick: Optional[Callable[[], None]] = None) -> SplitBound:
    """The bound by pieces with seam prices ``values`` (as :attr:`SeamValues.values`; NaN
    counts as zero): an upper bound on every schedule of ``p``, proven (module docstring);
    ``tick()`` after each piece."""
    t0 = time.perf_counter()
    options = options or SolveOptions()
    T = p.horizon.steps
    check_pieces_plan(pieces, T)
    lam = [{k: _finite(values[k][j]) if k in values else 0.0 for k in p.storages}
           for j in range(len(pieces) - 1)]
    total = 0.0
    per: List[Optional[float]] = []
    for j, (start, stop) in enumerate(pieces):
        end = lam[j] if j < len(pieces) - 1 else None
        model = piece_model(p, start, stop, end_value=end,
                            transit=_transit(p, end) if end is not None else None)
        built = build(model, variant="tight")     # the form with start columns (_mode_before)
        mx = _with_seams(p, built, start, pieces, lam)
        status, _, y = solve_relaxation(mx, options, seconds)
        b = dual_bound(mx, y) if y is not None else None
        per.append(b)
        if tick is not None:
            tick()
        if b is None or not math.isfinite(b):
            when = p.horizon.index[start].isoformat()
            return SplitBound(None, f"the piece from {when} gave no bound ({status})",
                              time.perf_counter() - t0, per)
        total += b
    return SplitBound(total, "", time.perf_counter() - t0, per)


def _with_seams(p: Portfolio, built, start: int, pieces: Sequence[Piece], lam) -> object:
    """The piece's matrix with its seam columns: a free start level per storage (after the
    first piece) and the water arriving on delayed routes from before it."""
    mx = built.matrix
    if start == 0:
        return mx
    j = next(i for i, (a, _) in enumerate(pieces) if a == start)
    price_in = lam[j - 1]
    dt = built.step_hours
    rows = balance_rows(mx, p.storages, built.steps)
    cols: List[Tuple[list, float, float, float]] = []   # ([(row, coef)], lo, hi, cost)
    offset = 0.0
    for k, s in p.storages.items():
        a = (1.0 - s.loss_per_h) ** dt
        # the balance row at step 0 has a * soc_min on its right-hand side (piece_model):
        # the start is soc_min + extra, extra a column priced -lam
        cols.append(([(int(rows[k][0]), -a)], 0.0, s.soc_max - s.soc_min, -price_in[k]))
        offset -= price_in[k] * s.soc_min
    ends = [b for _, b in pieces]
    for r in built.topology.routes:
        D = int(r.delay_steps)
        if D <= 0 or r not in E.balance_routes(built.topology, r.target)[0]:
            continue
        most = _most_arriving(built, r)
        for t in range(min(D, built.steps)):
            src = start + t - D              # the step it left, on the whole horizon
            if src < 0:                       # in transit at the start: arrives as declared
                fixed = r.in_transit / D
                cols.append(([(int(rows[r.target][t]), -1.0)], fixed, fixed, 0.0))
                continue
            seam = next(i for i, b in enumerate(ends) if b > src)   # the piece it left in
            mu = max(lam[seam].get(r.target, 0.0), 0.0)
            cols.append(([(int(rows[r.target][t]), -1.0)], 0.0, most, -mu))
    cols += _mode_before(mx)
    if not cols:
        return mx
    m = len(cols)
    rows = [r for c in cols for r, _ in c[0]]
    coefs = [v for c in cols for _, v in c[0]]
    which = [j for j, c in enumerate(cols) for _ in c[0]]
    extra = sp.csc_matrix((np.array(coefs, dtype=float), (np.array(rows, dtype=np.int64),
                                                          np.array(which, dtype=np.int64))),
                          shape=(mx.num_row, m))
    sense = 1.0 if mx.maximize else -1.0
    return replace(mx, A=sp.hstack([mx.A, extra], format="csc"),
                   col_lower=np.concatenate([mx.col_lower, [c[1] for c in cols]]),
                   col_upper=np.concatenate([mx.col_upper, [c[2] for c in cols]]),
                   integer=np.concatenate([mx.integer, np.zeros(m, dtype=bool)]),
                   cost=np.concatenate([mx.cost, sense * np.array([c[3] for c in cols])]),
                   offset=mx.offset + sense * offset)


def _mode_before(mx) -> list:
    """Per store and mode with start and stop columns (the "tight" form of minimum run and
    rest, :mod:`portfolio.compile.families.run_rest`), its mode in the step before the
    piece as a free column u[-1] in [0, 1]: a run going on at the seam is then no start
    (no minimum run binds it) and a stop there still starts a rest, as in the whole model."""
    rows: Dict[tuple, list] = {}
    for b in mx.blocks:
        if b.name == "mode_switch":
            for i, key in enumerate(b.keys):
                if key[-1] == 0:
                    rows.setdefault(key[:2], []).append((b.start + i, -1.0))
        elif b.name == "mode_switch_limit":
            for i, key in enumerate(b.keys):
                if key[-1] == 0:
                    rows.setdefault(key[:2], []).append((b.start + i, 1.0 if key[2] == "start" else -1.0))
    return [(terms, 0.0, 1.0, 0.0) for terms in rows.values()]


def _most_arriving(built, r) -> float:
    """The most MWh route ``r`` can deliver in one step: its flow column's upper bound in
    the piece (infinite when nothing bounds it)."""
    f = E.route_flow(built.portfolio, r)
    mx = built.matrix
    if f.variable not in mx.var_ranges or f.asset not in built.var_blocks.get(f.variable, {}):
        return 0.0
    first = mx.var_ranges[f.variable][0] + built.var_blocks[f.variable][f.asset]
    hi = float(np.max(mx.col_upper[first:first + built.steps]))
    return E.route_gain(r) * hi * built.step_hours / f.divisor
