"""What :func:`portfolio.load` returns: a checked portfolio and what to do with it.

The model (:mod:`portfolio.model`) is data only and imports no stage after
it; this façade, in the API layer, joins it to the pipeline:

>>> p = portfolio.load("examples/kestrel_bay/kestrel_bay.folio")   # doctest: +SKIP
>>> p.model.storages                  # the checked model              # doctest: +SKIP
>>> result = p.dispatch(time_limit=60)                                # doctest: +SKIP
>>> m = p.compile()                   # the Pyomo model, to extend     # doctest: +SKIP
>>> result = p.solve(m)               # solved, certified, tabulated   # doctest: +SKIP

Every method is written out (no attribute delegation to the model): the
façade's surface is what this file says, and the model's fields are read
through ``p.model``.  The pipeline is imported on first use, so loading and
linting never load Pyomo or HiGHS.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Tuple

from .diagnostics import Diagnostic
from .model import Portfolio


class LoadedPortfolio:
    """A portfolio read from ``path`` and checked without errors.

    ``model``: the checked :class:`~portfolio.model.Portfolio`;
    ``path``: the file it was read from; ``warnings``: the lint warnings
    found while loading (errors would have stopped the load).
    """

    def __init__(self, model: Portfolio, path: str, warnings: Tuple[Diagnostic, ...] = ()):
        self.model = model
        self.path = path
        self.warnings = tuple(warnings)

    def __repr__(self) -> str:
        return (f"<LoadedPortfolio {self.model.name!r} from {self.path!r}, "
                f"{len(self.warnings)} warning(s)>")

    @property
    def name(self) -> str:
        return self.model.name

    def dispatch(self, options=None, progress=None, windows=None, foresight=None,
                 marginal_values=False, **settings):
        """Schedule the portfolio; see :func:`portfolio.dispatch.dispatch`.

        ``settings`` build the options when none are given:
        ``p.dispatch(time_limit=60, mip_gap=1e-3)``.

        ``windows``: dispatch window by window (docs/windows.md): a
        :class:`portfolio.windows.Windows`, its text (``"1d"``, ``"24h/12h"``)
        or True for the defaults (commit a day, see a day more); None (the
        default): windows when :func:`portfolio.windows.by_default` says so
        (a horizon above 31 days with binary rules), else one MILP; False:
        one MILP whatever the horizon;
        ``Windows(end="pin", workers=2)`` solves two windows at once.
        ``foresight``: limited foresight, a :class:`portfolio.windows.Foresight`
        or its duration text (``"48h"``: see 48 h, commit a day, hold what is
        in store).  Then ``progress`` is called as ``progress(done, total,
        seconds, objective)`` after each window, ``time_limit`` applies to
        each window, and a bad setting raises
        :class:`portfolio.windows.WindowsError` (a coded message).

        ``marginal_values=True``: also value one more MW (MWh) of every
        limit (:meth:`marginal_values`, docs/marginal-values.md): the result's
        ``marginal_values`` table and its summary's ``marginal_values`` key,
        both written by ``result.write``.  With ``windows`` or ``foresight`` it
        raises :class:`portfolio.marginal.MarginalValuesError` before anything
        is solved.
        """
        if marginal_values:
            if windows not in (None, False) or foresight not in (None, False):
                from .marginal import MarginalValuesError, windows_refusal
                raise MarginalValuesError(windows_refusal())
            from .dispatch import dispatch
            options = _options(options, settings)
            result = dispatch(self.model, options, progress=progress)
            self.marginal_values(result, options)
            return result
        if foresight is not None and foresight is not False:
            from .windows import Foresight, dispatch_windows
            from .windows import foresight as read
            if windows not in (None, False):
                raise ValueError("windows and foresight are two ways of cutting the horizon: "
                                 "give one")
            spec = foresight if isinstance(foresight, Foresight) else read(str(foresight))
            return dispatch_windows(self.model, spec, _options(options, settings), progress=progress)
        if windows is None:
            from .windows import by_default
            windows = by_default(self.model) or False
        if windows is not False:
            from .windows import Windows, dispatch_windows, parse
            spec = windows if isinstance(windows, Windows) else (
                Windows() if windows is True else parse(str(windows)))
            return dispatch_windows(self.model, spec, _options(options, settings), progress=progress)
        from .dispatch import dispatch
        return dispatch(self.model, _options(options, settings), progress=progress)

    def marginal_values(self, result, options=None):
        """What one more MW of each connection's and site's export and import
        limit and of each storage's charge and discharge limit is worth, per
        step, and one more MWh of its upper state of charge: the duals of the
        LP left when the on/off decisions of ``result`` (a dispatch of this
        portfolio) are held (:mod:`portfolio.marginal`, docs/marginal-values.md).

        Returns a :class:`portfolio.marginal.MarginalValues` (``computed``
        False, with a message, for a dispatch without a schedule) and adds it
        to ``result`` (``result.marginal_values``, the table;
        ``result.summary["marginal_values"]``), so ``result.write`` writes it.
        Raises :class:`portfolio.marginal.MarginalValuesError` for a dispatch
        by windows or a model changed in Pyomo.
        """
        from .marginal import attach
        if result.portfolio is not self.model:
            raise ValueError("marginal_values() takes a dispatch result of this portfolio")
        return attach(result, options)

    def study(self, name=None, client=None, out=None, options=None, schedules=False, chunk=None,
              **settings):
        """Run the study ``name`` (the file's only study when None) and return its cases
        table, a ``pandas.DataFrame`` with one row per case (docs/studies.md).

        ``client``: a ``distributed.Client`` to run the cases on (by default a local
        cluster of processes, one a core, is started and stopped).  ``out``: a folder
        to keep each finished case, the tables and the plots in; a second call with
        the same folder solves only the cases whose inputs changed (without one, a
        temporary folder is used and removed).  ``settings`` build the solve options
        (``time_limit=60``; each case gets one HiGHS thread unless ``threads`` says
        otherwise).  ``chunk``: cases per Dask task (None: the runner's guided sizes; 1: one
        case a task).  Raises :class:`portfolio.study.StudyError` for an unknown study or a
        chunk that is not a whole number from 1 up.
        """
        from .study import run
        if settings:
            settings.setdefault("threads", 1)
        return run(self.model, name, out=out, options=_options(options, settings) if (options or settings)
                   else None, client=client, schedules=schedules, chunk=chunk).frame

    def graph(self):
        """The network graph (:func:`portfolio.graph.build_graph`)."""
        from .graph import build_graph
        return build_graph(self.model)

    def compile(self, variant: str = "tight"):
        """A new Pyomo ``ConcreteModel`` of the portfolio, to inspect or extend.

        One ``Var`` per variable family indexed ``(asset..., t)``, one
        ``Constraint`` per row family and ``objective``
        (:mod:`portfolio.compile.pyomo_model`).  Add variables, constraints
        or objective terms to it, then pass it to :meth:`solve`; see
        docs/extending.md.  Each call compiles afresh; the variant is the
        formulation (:class:`~portfolio.solve.SolveOptions`), and :meth:`solve`
        keeps it whatever its options say.
        """
        from .compile import build
        built = build(self.model, variant=variant)
        model = built.model
        # the model and its compiled portfolio refer to each other, and go together
        setattr(model, _COMPILED, built)
        return model

    def solve(self, model, options=None, progress=None, **settings):
        """Schedule a model made by :meth:`compile`, as it now stands (the
        user's constraints and objective terms included); the same
        :class:`~portfolio.dispatch.DispatchResult` as :meth:`dispatch`, its
        figures certified against the changed model
        (:func:`portfolio.dispatch.dispatch_model`).  Raises ``ValueError``
        for a model this portfolio did not make, or one that is not a linear
        (mixed-integer) program.  The solution is also loaded into the
        model's variables, the user's own included.
        """
        from .dispatch import dispatch_model
        built = getattr(model, _COMPILED, None)
        if built is None or built.portfolio is not self.model:
            raise ValueError("solve() takes a model made by compile() of this portfolio")
        options = replace(_options(options, settings), variant=built.variant)
        return dispatch_model(built.for_model(model), options, progress=progress)


def _options(options, settings: dict):
    from .solve import SolveOptions
    if settings:
        if options is not None:
            raise TypeError("give either options or settings such as time_limit=..., not both")
        return SolveOptions(**settings)
    return options or SolveOptions()


_COMPILED = "_portfolio_compiled"     # the attribute of a compiled Pyomo model that holds its Built
