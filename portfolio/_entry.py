"""The console script's entry point: the first code of ours that runs.

Until the command's own handling starts (``portfolio.cli.run``), a Ctrl-C
ends the process quietly with 130 instead of a traceback from the middle of
an import.  Only the interpreter's own start-up comes before this.
"""

import os
import signal
import sys


def _interrupted_at_start_up(signum, frame):   # pragma: no cover - timing-dependent
    try:
        sys.stderr.write("portfolio: interrupted\n")
        sys.stderr.flush()
    finally:
        os._exit(130)


def _started_by_multiprocessing() -> bool:
    """True in a process that ``multiprocessing`` started by spawning this script again (a
    study's Dask worker, a process of the window pool): only its spawning code imports
    ``multiprocessing.spawn`` before this module; the command itself never does."""
    return "multiprocessing.spawn" in sys.modules


# A terminal's Ctrl-C reaches the whole process group: the command handles it (exit 130,
# one line) and stops its own workers; a worker that is this script again ignores it, or
# each would print the line too.
signal.signal(signal.SIGINT, signal.SIG_IGN if _started_by_multiprocessing() else _interrupted_at_start_up)


def run() -> None:
    from . import cli                         # the imports the handler above covers
    cli.install_interrupt_handling()
    cli.run()
