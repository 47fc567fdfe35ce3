"""Where a result came from: the ``provenance`` and ``network`` sections of summary.json.

:func:`collect` is called when a dispatch starts (the start time and the
input files' SHA-256 are taken then, before the solve); the command line is
the CLI's to add (:func:`with_command`), and stays null for a dispatch made
from Python.  :func:`network` states who is where and the limits a report
draws against, so an output folder describes itself (docs/outputs.md).
Plain data only: this module imports no later stage.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import os
from typing import Optional, Sequence

from . import __version__
from .contract import NETWORK_KEYS, PROVENANCE_KEYS
from .files import read_bytes


def _highs_version() -> Optional[str]:
    try:
        import highspy
        return str(highspy.Highs().version())
    except Exception:                      # no HiGHS, or one too old to say: unknown, not fatal
        return None


def _sha256(path: str) -> Optional[str]:
    try:
        return hashlib.sha256(read_bytes(path)).hexdigest()
    except OSError:                        # gone or changed kind since it was read: say so as null
        return None


def utc_now() -> str:
    """The current time in UTC, ISO 8601 to the second (``2027-03-01T09:30:00+00:00``)."""
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()


def collect(p, started: Optional[str] = None, command: Optional[Sequence[str]] = None) -> dict:
    """The provenance of a dispatch of portfolio ``p`` starting now (or at ``started``)."""
    out = {
        "tool_version": __version__,
        "highs_version": _highs_version(),
        "inputs": [{"path": os.path.abspath(f), "sha256": _sha256(f)} for f in getattr(p, "inputs", ())],
        "command": list(command) if command is not None else None,
        "started_utc": started or utc_now(),
    }
    assert tuple(out) == PROVENANCE_KEYS
    return out


def with_command(summary: dict, command: Sequence[str]) -> None:
    """Record the command line that made this summary (the CLI calls it before writing)."""
    prov = summary.get("provenance")
    if isinstance(prov, dict):
        prov["command"] = [str(c) for c in command]


def network(p, topo) -> dict:
    """Who is where and the limits a report draws against (MW, MWh; null: no limit)."""
    sites = {s: {"connection": site.connection,
                 "storages": list(topo.storages_at(s)), "supplies": list(topo.supplies_at(s)),
                 "demands": list(topo.demands_at(s)),
                 "import_max_mw": site.import_max, "export_max_mw": site.export_max}
             for s, site in p.sites.items()}
    connections = {c: {"import_max_mw": conn.import_max, "export_max_mw": conn.export_max}
                   for c, conn in p.connections.items()}
    storages = {k: {"energy_mwh": s.energy, "soc_min_mwh": s.soc_min, "soc_max_mwh": s.soc_max}
                for k, s in p.storages.items()}
    out = {"sites": sites, "connections": connections, "storages": storages}
    assert tuple(out) == NETWORK_KEYS
    return out
