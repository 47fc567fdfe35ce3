"""``python -m portfolio``: the ``portfolio`` command (as the console script runs it)."""

from ._entry import run

run()
