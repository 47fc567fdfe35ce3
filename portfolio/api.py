"""The Python API's front door: read, lint and load portfolio files.

>>> import portfolio
>>> p = portfolio.load("examples/kestrel_bay/kestrel_bay.folio")   # doctest: +SKIP
>>> result = p.dispatch()                                          # doctest: +SKIP
"""

from __future__ import annotations

import gc
from dataclasses import dataclass, field
from pathlib import Path
from typing import List, Optional, Union

from . import files
from .check import check
from .diagnostics import Diagnostic, PortfolioError, Sink, UnreadableFile
from .facade import LoadedPortfolio
from .graph import check_topology, network
from .model import Portfolio
from .spans import Span
from .syntax import lines_of, parse


@dataclass
class LintResult:
    path: str
    diagnostics: List[Diagnostic] = field(default_factory=list)
    portfolio: Optional[Portfolio] = None
    network: object = None        # graph.Network: the network graph as data
    unreadable: bool = False

    @property
    def graph(self):
        """The network graph as a :class:`networkx.MultiDiGraph` (made on request)."""
        return None if self.network is None else self.network.to_networkx()

    @property
    def errors(self) -> List[Diagnostic]:
        return [d for d in self.diagnostics if d.severity == "error"]

    @property
    def ok(self) -> bool:
        return not self.errors and self.portfolio is not None


def tidy_diagnostics(items: List[Diagnostic]) -> List[Diagnostic]:
    """Drop repeats (a preset's fault is found once per storage) and order by position."""
    seen = set()
    out = []
    for d in items:
        key = (d.code, d.span)
        if key not in seen:
            seen.add(key)
            out.append(d)
    return sorted(out, key=lambda d: (d.span.path, d.span.line, d.span.col))


def lint_text(text: str, path: str = "<text>", base_dir: Union[str, Path, None] = None,
              confine: bool = False) -> LintResult:
    """Run every stage up to the network graph on ``text``; never raises for bad input.

    ``confine``: read no series file outside ``base_dir`` (lint P412).
    """
    sink = Sink()
    text = lines_of(text)
    base = Path(base_dir) if base_dir is not None else Path(path).parent
    result = LintResult(path)
    was_enabled = gc.isenabled()
    gc.disable()   # the tree and model hold no reference cycles worth collecting mid-run
    try:
        _stages(text, path, base, sink, result, confine)
    finally:
        if was_enabled:
            gc.enable()
    result.diagnostics = tidy_diagnostics(sink.items)
    return result


def _stages(text: str, path: str, base: Path, sink: Sink, result: LintResult,
            confine: bool = False) -> None:
    tree = parse(text, path, sink)
    if tree is not None:
        p = check(tree, path, base, sink, confine=confine)
        if p is not None:
            g = network(p)
            check_topology(p, g, sink)
            result.network = g
            if not sink.has_errors:
                result.portfolio = p


def read_source(path: Union[str, Path]):
    """Return (text, None) or (None, diagnostic) for an unreadable file."""
    try:
        data = files.read_bytes(path)
    except files.InputError as e:
        why = str(e)
    except IsADirectoryError:
        why = "it is a folder, not a file"
    except FileNotFoundError:
        why = "no such file"
    except PermissionError:
        why = "permission denied"
    except OSError as e:
        why = e.strerror or str(e)
    else:
        try:
            return data.decode("utf-8-sig"), None
        except UnicodeDecodeError as e:
            why = f"it is not UTF-8 text (byte {e.start})"
    return None, UnreadableFile(Span.whole_file(str(path)), f"cannot read '{path}': {why}")


def lint_file(path: Union[str, Path], confine: bool = False) -> LintResult:
    """Lint a portfolio file; ``confine``: read no series file outside its folder."""
    text, problem = read_source(path)
    if problem is not None:
        return LintResult(str(path), [problem], unreadable=True)
    if "\x00" in text:
        return LintResult(str(path), [UnreadableFile(Span.whole_file(str(path)),
                                                     f"cannot read '{path}': it holds binary data")], unreadable=True)
    return lint_text(text, str(path), Path(path).parent, confine=confine)


def load(path: Union[str, Path], confine: bool = False) -> LoadedPortfolio:
    """Read and check a portfolio file; raise :class:`PortfolioError` if it has errors.

    The :class:`~portfolio.facade.LoadedPortfolio` holds the checked model
    (``.model``), the path and the lint warnings, and dispatches, draws or
    compiles it.
    """
    result = lint_file(path, confine=confine)
    if not result.ok:
        raise PortfolioError(result.diagnostics)
    return LoadedPortfolio(result.portfolio, str(path), tuple(result.diagnostics))
