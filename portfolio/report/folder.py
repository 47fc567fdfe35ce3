"""Read a dispatch output folder back, through the results contract.

:func:`read` returns a :class:`Folder`: the summary, and each asset's table
(named by the summary's sections, checked against the contract's columns),
indexed by step start in the horizon's zone.  Anything that is not a
complete output folder of this version is a :class:`ReportError` with a
plain reason; nothing is written here.
"""

from __future__ import annotations

import io
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Dict, List, Optional

from ..contract import (ASSET_GROUPS, COLUMNS, MARKER, NETWORK_KEYS, PERIODS_TABLE, PROVENANCE_KEYS,
                        SUMMARY_FILE, WINDOWS_TABLE, table_file)
from ..files import read_bytes
from ..study.run import MARKER as STUDY_MARKER

SCHEDULE_STATUSES = ("optimal", "feasible")


class ReportError(Exception):
    """The folder cannot be reported on (not an output folder, too old, damaged)."""


@dataclass
class Folder:
    path: Path
    summary: dict
    listed: List[str]                                  # the marker's files
    tables: Dict[str, "object"] = field(default_factory=dict)   # name -> DataFrame
    kinds: Dict[str, str] = field(default_factory=dict)         # name -> table kind
    windows: Optional["object"] = None
    periods: Optional["object"] = None                 # periods.csv: daily and monthly totals

    @property
    def money_unit(self) -> str:
        """The currency the summary declares, or 'money' when the portfolio declares none."""
        return self.summary.get("currency") or "money"

    @property
    def has_schedule(self) -> bool:
        return self.summary.get("status") in SCHEDULE_STATUSES

    def names(self, kind: str) -> List[str]:
        return [n for n, k in self.kinds.items() if k == kind]


def _json(path: Path, what: str):
    try:
        return json.loads(read_bytes(path).decode("utf-8"))
    except FileNotFoundError:
        raise ReportError(f"{path.parent} has no {path.name}: it is not a complete output folder") from None
    except (OSError, UnicodeDecodeError, ValueError) as e:
        raise ReportError(f"cannot read {what} {path}: {getattr(e, 'strerror', None) or e}") from None


def check_folder(path: Path) -> List[str]:
    """The marker's list of files, or :class:`ReportError` if ``path`` is not an output folder."""
    if not path.exists():
        raise ReportError(f"{path} does not exist")
    if not path.is_dir() or path.is_symlink():
        raise ReportError(f"{path} is not a folder; give the output folder of a dispatch")
    if not (path / MARKER).is_file():
        raise ReportError(f"{path} is not a dispatch output folder or a study folder (it has neither "
                          f"{MARKER} nor {STUDY_MARKER}); give the folder that 'portfolio dispatch --out' "
                          f"or 'portfolio study --out' wrote")
    marker = _json(path / MARKER, "the marker")
    files = marker.get("files") if isinstance(marker, dict) else None
    if not isinstance(files, list) or not all(isinstance(f, str) for f in files):
        raise ReportError(f"{path / MARKER} is damaged (no list of files)")
    return files


def _check_summary(path: Path, summary) -> None:
    if not isinstance(summary, dict) or "status" not in summary:
        raise ReportError(f"{path / SUMMARY_FILE} is not a dispatch summary (no status)")
    prov = summary.get("provenance")
    if not isinstance(prov, dict) or not prov.get("tool_version") or set(prov) != set(PROVENANCE_KEYS):
        raise ReportError(
            f"{path / SUMMARY_FILE} was written by an older version of portfolio (it has no "
            f"provenance with the tool version); dispatch again with this version to report it")
    if "currency" not in summary:
        raise ReportError(f"{path / SUMMARY_FILE} was written by an older version of portfolio (it has "
                          f"no currency key); dispatch again with this version to report it")
    net = summary.get("network")
    if not isinstance(net, dict) or set(net) != set(NETWORK_KEYS):
        raise ReportError(f"{path / SUMMARY_FILE} has no network section; dispatch again with "
                          f"this version to report it")


def _table(path: Path, name: str, kind: str, zone: str):
    import pandas as pd

    f = path / table_file(name, "csv")
    try:
        df = pd.read_csv(io.BytesIO(read_bytes(f)), index_col="time")
    except FileNotFoundError:
        raise ReportError(f"{f.name} is missing from {path}: the output folder is incomplete") from None
    except (OSError, ValueError) as e:
        raise ReportError(f"cannot read {f}: {getattr(e, 'strerror', None) or e}") from None
    if list(df.columns) != COLUMNS[kind]:
        raise ReportError(f"{f.name} does not have the columns of a {kind} table "
                          f"({', '.join(COLUMNS[kind])}); was it written by another version?")
    try:
        idx = pd.to_datetime(df.index, utc=True, format="ISO8601").tz_convert(zone)
    except (ValueError, TypeError, KeyError) as e:
        raise ReportError(f"{f.name}: unreadable times ({e})") from None
    df.index = pd.DatetimeIndex(idx, name="time")
    return df


def read(path) -> Folder:
    """Read the output folder at ``path`` (see the module docstring)."""
    path = Path(path)
    listed = check_folder(path)
    summary = _json(path / SUMMARY_FILE, "the summary")
    _check_summary(path, summary)
    folder = Folder(path=path, summary=summary, listed=listed)
    zone = summary.get("zone") or "UTC"
    if summary["status"] not in SCHEDULE_STATUSES:
        return folder
    for group, kind in ASSET_GROUPS.items():
        section = summary.get(group)
        if not isinstance(section, dict):
            raise ReportError(f"{path / SUMMARY_FILE} has no {group} section")
        for name in section:
            folder.tables[name] = _table(path, name, kind, zone)
            folder.kinds[name] = kind
    if "windows" in summary and table_file(WINDOWS_TABLE, "csv") in listed:
        folder.windows = _table(path, WINDOWS_TABLE, "windows", zone)
    if table_file(PERIODS_TABLE, "csv") in listed:
        folder.periods = _table(path, PERIODS_TABLE, "periods", zone)
    return folder
