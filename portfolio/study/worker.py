"""The preload of the Dask workers that :func:`portfolio.study.run.run_study` starts itself.

A terminal's Ctrl-C goes to the whole process group, the local cluster's worker processes
too: they ignore it, and the process that started the cluster closes it on its way out
(docs/studies.md, "Ctrl-C"), so no worker prints a traceback.  The import of the dispatch
pipeline happens here, while the cluster starts, rather than in the first case each worker
runs.
"""

from __future__ import annotations

import signal


def dask_setup(worker=None) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    from .. import dispatch  # noqa: F401  (the pipeline's imports, once per worker)
    from .. import windows  # noqa: F401
