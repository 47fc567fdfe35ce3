"""Child processes the library starts (the windows' process pool, the study's fork
server): born ignoring Ctrl-C, so that a terminal's Ctrl-C, which reaches the whole
process group, is handled by the process that started them alone (it stops them)."""

from __future__ import annotations

from contextlib import contextmanager


@contextmanager
def ignoring_ctrl_c(own: bool = True):
    """While children start inside this block, Ctrl-C is ignored here, so that they are
    born ignoring it (an ignored signal survives exec, and Python installs no handler of
    its own over it): a Ctrl-C then reaches only this process, and no half-started child
    prints a traceback.  Nothing unless ``own`` and in the main thread (the only thread
    that may set a signal's handler): a caller starting children from another thread
    must start them here first."""
    import signal
    import threading
    if not own or threading.current_thread() is not threading.main_thread():
        yield
        return
    before = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, before)
