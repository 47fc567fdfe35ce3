"""Running the ``portfolio`` command in-process, for the CLI tests."""

from __future__ import annotations

import io
from pathlib import Path

from portfolio.cli import main

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "examples" / "kestrel_bay" / "kestrel_bay.folio"


def run(*argv):
    """``portfolio ARGV...``: (exit code, standard output, standard error)."""
    out, err = io.StringIO(), io.StringIO()
    code = main(list(map(str, argv)), out=out, err=err)
    return code, out.getvalue(), err.getvalue()
