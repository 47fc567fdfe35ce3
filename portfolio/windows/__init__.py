"""Year-long dispatch by windows, with a proven bound (docs/windows.md).

* :class:`Windows` (:mod:`.spec`): commit and overlap lengths, the end rule,
  workers; :func:`parse` reads ``COMMIT[/OVERLAP]``; :class:`Foresight` and
  :func:`foresight`: limited foresight; mistakes are :class:`WindowsError`
  with a code;
* :func:`~.bound.relax`: the whole horizon's LP relaxation (the bound, and
  the state of charge and value of stored energy windows end on);
* :func:`~.cut.window_model`: one window's portfolio from the committed schedule;
* :func:`~.task.solve_window`: one window as a picklable task;
* :func:`dispatch_windows` (:mod:`.run`): all of it, stitched and checked
  against the whole portfolio's matrix.
"""

from .run import dispatch_windows
from .spec import (AUTO_DAYS, CODES, END_PIN, END_TARGET, END_VALUE, FREE, HOLD, Foresight,
                   Windows, WindowsError, binary_rules, by_default, foresight, parse, plan)
from .task import WindowOutcome, WindowTask, solve_window

__all__ = ["dispatch_windows", "Windows", "Foresight", "WindowsError", "parse", "foresight",
           "AUTO_DAYS", "binary_rules", "by_default",
           "CODES", "END_VALUE", "END_TARGET", "END_PIN", "HOLD", "FREE", "plan", "WindowTask",
           "WindowOutcome", "solve_window"]
