"""portfolio: a mixed-integer dispatcher for several linked energy-storage assets.

Pipeline (one module each): :mod:`syntax` (text -> tree with spans) ->
:mod:`check` (typed model) -> :mod:`graph` (network) -> :mod:`compile`
(MILP arrays; Pyomo on request) -> :mod:`solve` (HiGHS) -> :mod:`schedule`
(tables) -> :mod:`writers`.  The library never prints; :mod:`cli` renders.
:func:`load` returns a :class:`~portfolio.facade.LoadedPortfolio` that runs them.
"""

__version__ = "0.1.0"

__all__ = ["load", "lint_file", "lint_text", "LoadedPortfolio", "SolveOptions", "__version__"]


def __getattr__(name):
    # Imported on first use: `import portfolio` (and the command's start-up, where
    # a Ctrl-C must land in the command's own handler) stays cheap, and
    # `portfolio lint` never loads Pyomo or HiGHS.
    if name in ("load", "lint_file", "lint_text", "LoadedPortfolio"):
        from . import api
        return getattr(api, name)
    if name == "SolveOptions":
        from .solve import SolveOptions
        return SolveOptions
    raise AttributeError(f"module 'portfolio' has no attribute {name!r}")
