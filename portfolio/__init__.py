"""portfolio: a mixed-integer dispatcher for several linked energy-storage assets.

Pipeline (one module each): :mod:`syntax` (text -> tree with spans) ->
:mod:`check` (typed model) -> :mod:`graph` (network) -> :mod:`compile`
(Pyomo MILP) -> :mod:`solve` (HiGHS) -> :mod:`schedule` (tables) ->
:mod:`writers`.  The library never prints; :mod:`cli` renders.
"""

__version__ = "0.1.0"

from .api import load, lint_file, lint_text  # noqa: E402,F401


def __getattr__(name):
    # SolveOptions lives with the solver; importing it lazily keeps `portfolio lint` free of Pyomo/HiGHS
    if name == "SolveOptions":
        from .solve import SolveOptions
        return SolveOptions
    raise AttributeError(f"module 'portfolio' has no attribute {name!r}")
