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


signal.signal(signal.SIGINT, _interrupted_at_start_up)


def run() -> None:
    from . import cli                         # the imports the handler above covers
    signal.signal(signal.SIGINT, cli.on_interrupt)
    cli.run()
