"""The language server: ``portfolio lsp``, over standard input and output (pygls).

Only this module imports pygls and lsprotocol; the CLI imports it when the
``lsp`` command runs, so ``portfolio --help`` and ``portfolio lint`` never
pay for them.  What each request answers comes from :mod:`.analysis`; here
it is turned into the protocol's types (0-based lines, UTF-16 columns).

Diagnostics are the lint's: one analysis after each open, change and save,
``DEBOUNCE_S`` after the last change of a burst, in a worker thread so that
hovers and completions are answered meanwhile (docs/lsp.md).
"""

from __future__ import annotations

import asyncio
import logging
import os
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Dict, List, Optional, Tuple

from lsprotocol import types as T
from pygls.lsp.server import LanguageServer
from pygls.uris import from_fs_path, to_fs_path

from .. import __version__
from ..diagnostics import ERROR, WARNING, Diagnostic
from ..fmt import format_source
from ..spans import Span
from . import analysis as A

log = logging.getLogger("portfolio.lsp")

DEBOUNCE_S = 0.15    # a burst of keystrokes is analysed once, this long after its last change
SOURCE = "portfolio"

SYMBOL_KINDS = {"connection": T.SymbolKind.Interface, "site": T.SymbolKind.Namespace,
                "storage": T.SymbolKind.Object, "supply": T.SymbolKind.Event, "demand": T.SymbolKind.Event,
                "price": T.SymbolKind.Variable, "preset": T.SymbolKind.Class, "route": T.SymbolKind.Function}
SEVERITIES = {ERROR: T.DiagnosticSeverity.Error, WARNING: T.DiagnosticSeverity.Warning}


# ---- positions: the project's (1-based, characters) and the protocol's (0-based, UTF-16) ----


def _utf16(text: str, chars: int) -> int:
    head = text[:chars]
    return len(head) + sum(1 for ch in head if ord(ch) > 0xFFFF)


def _chars(text: str, units: int) -> int:
    n = 0
    for i, ch in enumerate(text):
        if n >= units:
            return i
        n += 2 if ord(ch) > 0xFFFF else 1
    return len(text)


def to_range(span: Span, lines: Optional[List[str]] = None) -> T.Range:
    def pos(line: int, col: int) -> T.Position:
        text = lines[line - 1] if lines is not None and 0 < line <= len(lines) else None
        return T.Position(line=max(line - 1, 0), character=_utf16(text, col - 1) if text is not None else max(col - 1, 0))
    return T.Range(start=pos(span.line, span.col), end=pos(span.end_line, span.end_col))


def from_position(a: A.Analysis, p: T.Position) -> Tuple[int, int]:
    lines = a.lines
    text = lines[p.line] if p.line < len(lines) else ""
    return p.line + 1, _chars(text, p.character) + 1


# ---- the server ------------------------------------------------------------------------


class PortfolioServer(LanguageServer):
    def __init__(self) -> None:
        super().__init__("portfolio", __version__, text_document_sync_kind=T.TextDocumentSyncKind.Incremental)
        self.analyses: Dict[str, Tuple[Optional[int], A.Analysis]] = {}
        self.parsed: Dict[str, A.Analysis] = {}    # each document's last analysis that parsed (its names)
        self.pending: Dict[str, asyncio.Task] = {}
        self.worker = ThreadPoolExecutor(max_workers=1, thread_name_prefix="portfolio-lint")

    def report_server_error(self, error, source):
        # a garbage message or a handler's exception: logged, never fatal
        log.error("%s: %s", getattr(source, "__name__", source), error)

    def analysis(self, uri: str) -> A.Analysis:
        """The analysis of the document as it is now (made here when the last one is stale)."""
        doc = self.workspace.get_text_document(uri)
        got = self.analyses.get(uri)
        if got is not None and got[0] == doc.version:
            return got[1]
        a = analyse_document(doc.source, uri)
        self.keep(uri, doc.version, a)
        return a

    def keep(self, uri: str, version: Optional[int], a: A.Analysis) -> None:
        self.analyses[uri] = (version, a)
        if a.tree is not None:
            self.parsed[uri] = a

    async def relint(self, uri: str, delay: float) -> None:
        old = self.pending.pop(uri, None)
        if old is not None:
            old.cancel()
        task = asyncio.ensure_future(self._relint(uri, delay))
        self.pending[uri] = task

    async def _relint(self, uri: str, delay: float) -> None:
        try:
            if delay:
                await asyncio.sleep(delay)
            doc = self.workspace.get_text_document(uri)
            version, text = doc.version, doc.source
            got = self.analyses.get(uri)
            if got is not None and got[0] == version:
                a = got[1]
            else:
                a = await asyncio.get_running_loop().run_in_executor(self.worker, analyse_document, text, uri)
            if self.workspace.get_text_document(uri).version != version:
                return          # changed meanwhile: the next run publishes
            self.keep(uri, version, a)
            self.text_document_publish_diagnostics(
                T.PublishDiagnosticsParams(uri=uri, version=version, diagnostics=to_diagnostics(a)))
        except asyncio.CancelledError:
            raise
        except Exception:
            log.exception("analysing %s failed", uri)
        finally:
            if self.pending.get(uri) is asyncio.current_task():
                self.pending.pop(uri, None)


def analyse_document(text: str, uri: str) -> A.Analysis:
    path = to_fs_path(uri) or uri
    return A.analyse(text, path, Path(path).parent)


def to_diagnostics(a: A.Analysis) -> List[T.Diagnostic]:
    """The lint's diagnostics for the document.  A series file's own problems (their spans
    point into the CSV) are shown at the series declaration that reads the file, with the
    CSV's position in the message and as related information (docs/lsp.md)."""
    here = Path(a.path).resolve() if a.path else None
    lines = a.lines
    out = []
    for d in a.diagnostics:
        message = "\n".join([d.message, *d.notes])
        related = None
        span = d.span
        if span.path != a.path and here is not None:
            csv = (here.parent / span.path).resolve()
            at = next((s for f, s in a.csv_sources if f == csv), None) or Span.whole_file(a.path)
            message = f"{span.path}:{span.line}:{span.col}: {message}"
            related = [T.DiagnosticRelatedInformation(
                location=T.Location(uri=from_fs_path(str(csv)) or str(csv), range=to_range(span)),
                message=d.message)]
            span = at
        out.append(T.Diagnostic(range=to_range(span, lines), message=message, code=d.code, source=SOURCE,
                                severity=SEVERITIES.get(d.severity, T.DiagnosticSeverity.Information),
                                related_information=related))
    return out


def _location(uri: str, a: A.Analysis, span: Span) -> T.Location:
    return T.Location(uri=uri, range=to_range(span, a.lines))


def build() -> PortfolioServer:
    server = PortfolioServer()

    @server.feature(T.TEXT_DOCUMENT_DID_OPEN)
    async def did_open(ls: PortfolioServer, params: T.DidOpenTextDocumentParams):
        await ls.relint(params.text_document.uri, 0)

    @server.feature(T.TEXT_DOCUMENT_DID_CHANGE)
    async def did_change(ls: PortfolioServer, params: T.DidChangeTextDocumentParams):
        await ls.relint(params.text_document.uri, DEBOUNCE_S)

    @server.feature(T.TEXT_DOCUMENT_DID_SAVE)
    async def did_save(ls: PortfolioServer, params: T.DidSaveTextDocumentParams):
        ls.analyses.pop(params.text_document.uri, None)    # series files may have changed on disk
        await ls.relint(params.text_document.uri, 0)

    @server.feature(T.TEXT_DOCUMENT_DID_CLOSE)
    def did_close(ls: PortfolioServer, params: T.DidCloseTextDocumentParams):
        uri = params.text_document.uri
        ls.analyses.pop(uri, None)
        ls.parsed.pop(uri, None)
        task = ls.pending.pop(uri, None)
        if task is not None:
            task.cancel()
        ls.text_document_publish_diagnostics(T.PublishDiagnosticsParams(uri=uri, diagnostics=[]))

    @server.feature(T.TEXT_DOCUMENT_HOVER)
    def hover(ls: PortfolioServer, params: T.HoverParams):
        a = ls.analysis(params.text_document.uri)
        got = A.hover(a, *from_position(a, params.position))
        if got is None:
            return None
        text, span = got
        return T.Hover(contents=T.MarkupContent(kind=T.MarkupKind.Markdown, value=text),
                       range=to_range(span, a.lines))

    @server.feature(T.TEXT_DOCUMENT_DEFINITION)
    def definition(ls: PortfolioServer, params: T.DefinitionParams):
        a = ls.analysis(params.text_document.uri)
        span = A.definition(a, *from_position(a, params.position))
        return None if span is None else _location(params.text_document.uri, a, span)

    @server.feature(T.TEXT_DOCUMENT_REFERENCES)
    def references(ls: PortfolioServer, params: T.ReferenceParams):
        a = ls.analysis(params.text_document.uri)
        spans = A.references(a, *from_position(a, params.position), params.context.include_declaration)
        return [_location(params.text_document.uri, a, s) for s in spans]

    @server.feature(T.TEXT_DOCUMENT_COMPLETION, T.CompletionOptions(trigger_characters=[" "]))
    def completion(ls: PortfolioServer, params: T.CompletionParams):
        a = ls.analysis(params.text_document.uri)
        items = []
        parsed = ls.parsed.get(params.text_document.uri)
        for word, what in A.completions(a, *from_position(a, params.position), parsed):
            kind = T.CompletionItemKind.Keyword if what == "keyword" else T.CompletionItemKind.Reference
            items.append(T.CompletionItem(label=word, kind=kind, detail=what))
        return T.CompletionList(is_incomplete=False, items=items)

    @server.feature(T.TEXT_DOCUMENT_DOCUMENT_SYMBOL)
    def symbols(ls: PortfolioServer, params: T.DocumentSymbolParams):
        a = ls.analysis(params.text_document.uri)

        def symbol(entry) -> T.DocumentSymbol:
            d, children = entry
            return T.DocumentSymbol(name=d.name, detail=d.kind, kind=SYMBOL_KINDS.get(d.kind, T.SymbolKind.Variable),
                                    range=to_range(d.whole, a.lines), selection_range=to_range(d.span, a.lines),
                                    children=[symbol(c) for c in children])
        return [symbol(e) for e in A.outline(a)]

    @server.feature(T.TEXT_DOCUMENT_FORMATTING)
    def formatting(ls: PortfolioServer, params: T.DocumentFormattingParams):
        doc = ls.workspace.get_text_document(params.text_document.uri)
        done = format_source(doc.source, to_fs_path(doc.uri) or doc.uri)
        if done.text is None or done.text == doc.source:
            return []          # a syntax error (its diagnostic is already shown), or nothing to change
        lines = doc.source.split("\n")
        end = T.Position(line=len(lines) - 1, character=_utf16(lines[-1], len(lines[-1])))
        return [T.TextEdit(range=T.Range(start=T.Position(line=0, character=0), end=end), new_text=done.text)]

    return server


class _OneLine(logging.Formatter):
    """A log record on one line (its message's first): an exception as its kind and message, no traceback
    (standard error is the editor's log; a garbage message is not a crash)."""

    def format(self, record: logging.LogRecord) -> str:
        lines = record.getMessage().strip().splitlines() or [""]
        text = f"portfolio lsp: {record.levelname.lower()}: {lines[0]}"
        if record.exc_info and record.exc_info[1] is not None:
            e = record.exc_info[1]
            text += f" ({type(e).__name__}: {e})"
        return " ".join(text.split())


def main() -> int:
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(_OneLine())
    logging.basicConfig(level=logging.WARNING, handlers=[handler])
    # pygls closes the stream it writes to when the client says 'exit'; give it a
    # duplicate of standard output, so the command's own last flush still finds it open
    out = os.fdopen(os.dup(sys.stdout.fileno()), "wb")
    build().start_io(sys.stdin.buffer, out)
    return 0
