"""The language server (`portfolio lsp`, docs/lsp.md), as a real process over pipes.

One server for the module (tests/lsp_client.py speaks JSON-RPC to it);
positions are found in the text, not written as numbers.  Its last test
shuts it down and checks it leaves cleanly, garbage and all.
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from lsp_client import LspClient
from portfolio.api import lint_text
from portfolio.fmt import format_source

HERE = Path(__file__).parent
CASES = HERE / "lint_cases"

TEXT = """portfolio demo
horizon start 2027-03-01T00:00 length 4 h step 1 h zone "UTC"
price spot values [40, 42, 39, 45] per MWh
connection feeder {
  export max 10 MW
  import max 500 kW
  sell at spot
  buy at spot plus 9.5 per MWh
}
site yard at feeder {
  storage cells {
    energy 20 MWh
    charge max 5 MW
    discharge max 5 MW
    efficiency round trip 88%
  }
  supply sun values [0, 1, 2, 1] MW { into cells }
}
"""


def at(text: str, needle: str, inside: int = 0, nth: int = 0) -> dict:
    """The protocol position of the character ``inside`` characters into the nth ``needle``."""
    i = -1
    for _ in range(nth + 1):
        i = text.index(needle, i + 1)
    i += inside
    line = text.count("\n", 0, i)
    return {"line": line, "character": i - (text.rfind("\n", 0, i) + 1)}


def span_range(span) -> dict:
    return {"start": {"line": span.line - 1, "character": span.col - 1},
            "end": {"line": span.end_line - 1, "character": span.end_col - 1}}


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    root = tmp_path_factory.mktemp("lsp")
    client = LspClient(cwd=HERE.parent)
    client.capabilities = client.initialize(root)["capabilities"]
    client.root = root
    yield client
    if client.proc.poll() is None:
        client.close()


_version = [0]


def open_doc(server, path: Path, text: str) -> str:
    uri = path.as_uri()
    _version[0] += 1
    server.notify("textDocument/didOpen", {"textDocument": {"uri": uri, "languageId": "folio",
                                                            "version": _version[0], "text": text}})
    return uri


def diagnostics_for(server, uri: str) -> list:
    return server.wait_for("textDocument/publishDiagnostics", lambda p: p["uri"] == uri)["diagnostics"]


def ask(server, method: str, uri: str, position: dict, **more):
    got = server.request(method, {"textDocument": {"uri": uri}, "position": position, **more})
    assert "error" not in got, got
    return got["result"]


@pytest.fixture(scope="module")
def demo(server):
    path = server.root / "demo.folio"
    uri = open_doc(server, path, TEXT)
    assert diagnostics_for(server, uri) == []
    return uri


def test_capabilities(server):
    caps = server.capabilities
    for key in ("hoverProvider", "definitionProvider", "referencesProvider", "completionProvider",
                "documentSymbolProvider", "documentFormattingProvider", "textDocumentSync"):
        assert caps.get(key), key


def test_diagnostics_are_the_lints(server):
    path = server.root / "bad.folio"
    bad = TEXT.replace("energy 20 MWh", "energy 20 MWx")
    uri = open_doc(server, path, bad)
    got = diagnostics_for(server, uri)
    want = lint_text(bad, str(path)).diagnostics
    assert want, "the text has a known error"
    assert [(d["code"], d["range"], d["severity"], d["source"]) for d in got] == \
           [(d.code, span_range(d.span), 1 if d.severity == "error" else 2, "portfolio") for d in want]
    assert got[0]["range"]["start"] == at(bad, "MWx")
    assert got[0]["message"].startswith(want[0].message)

    # a change that mends it publishes an empty list
    server.notify("textDocument/didChange", {
        "textDocument": {"uri": uri, "version": _version[0] + 100},
        "contentChanges": [{"range": {"start": at(bad, "MWx"), "end": at(bad, "MWx", 3)}, "text": "MWh"}]})
    assert diagnostics_for(server, uri) == []


def test_series_file_problems_point_at_the_declaration(server):
    path = CASES / "P403_bad_cells.folio"
    text = path.read_text()
    uri = open_doc(server, path, text)
    got = diagnostics_for(server, uri)
    want = [d for d in lint_text(text, str(path)).diagnostics if d.code == "P403"]
    assert len(want) == 2 and [d["code"] for d in got] == ["P403", "P403"]
    for d, w in zip(got, want):
        assert d["range"]["start"]["line"] == at(text, 'from "profiles/bad_cell.csv"')["line"]
        assert d["message"].startswith(f"{w.span.path}:{w.span.line}:{w.span.col}: ")
        (rel,) = d["relatedInformation"]
        assert rel["location"]["uri"] == (CASES / w.span.path).resolve().as_uri()
        assert rel["location"]["range"]["start"] == {"line": w.span.line - 1, "character": w.span.col - 1}


def test_hover_round_trip_as_the_model_uses_it(server, demo):
    got = ask(server, "textDocument/hover", demo, at(TEXT, "88%"))
    text = got["contents"]["value"]
    per_way = f"{math.sqrt(0.88) * 100:.6g} %"   # the checker splits a round trip evenly
    assert "eta charge = " + per_way in text and "eta discharge = " + per_way in text
    assert "0.88" in text
    assert got["range"]["start"] == at(TEXT, "88%")


def test_hover_converts_units(server, demo):
    text = ask(server, "textDocument/hover", demo, at(TEXT, "500 kW", 1))["contents"]["value"]
    assert "**0.5 MW**" in text and "import max = 0.5 MW" in text


def test_hover_on_a_name_gives_its_declaration(server, demo):
    text = ask(server, "textDocument/hover", demo, at(TEXT, "cells", 2, nth=1))["contents"]["value"]
    assert "storage" in text and f"line {at(TEXT, 'cells')['line'] + 1}" in text
    assert "energy: 20 MWh" in text and "site: `yard`" in text


def test_definition_and_references(server, demo):
    got = ask(server, "textDocument/definition", demo, at(TEXT, "feeder", 3, nth=1))
    assert got["uri"] == demo and got["range"]["start"] == at(TEXT, "feeder")
    refs = ask(server, "textDocument/references", demo, at(TEXT, "spot"), context={"includeDeclaration": True})
    assert sorted(r["range"]["start"]["line"] for r in refs) == [at(TEXT, "spot", nth=n)["line"] for n in range(3)]
    refs = ask(server, "textDocument/references", demo, at(TEXT, "spot"), context={"includeDeclaration": False})
    assert len(refs) == 2
    assert ask(server, "textDocument/definition", demo, at(TEXT, "round")) is None


def labels(result) -> set:
    return {i["label"] for i in result["items"]}


def test_completion_of_keywords_and_names(server):
    path = server.root / "typing.folio"
    text = TEXT.replace("    energy 20 MWh\n", "    energy 20 MWh\n    \n").replace(
        "site yard at feeder", "site yard at fe")
    uri = open_doc(server, path, text)
    diagnostics_for(server, uri)
    in_storage = labels(ask(server, "textDocument/completion", uri, at(text, "    \n", 4)))
    assert {"soc", "charge", "efficiency", "loss"} <= in_storage
    assert not {"horizon", "site", "connection", "feeder"} & in_storage
    after_at = ask(server, "textDocument/completion", uri, at(text, "at fe", 5))
    assert "feeder" in labels(after_at)
    assert not any(i["label"] == "storage" for i in after_at["items"])
    top = labels(ask(server, "textDocument/completion", uri, at(text, "site yard")))
    assert {"site", "connection", "price", "horizon"} <= top and "soc" not in top
    # where a new name is declared, no declared name is offered
    new_name = labels(ask(server, "textDocument/completion", uri, at(text, "cells {", 0)))
    assert "feeder" not in new_name


def test_document_symbols(server, demo):
    got = server.request("textDocument/documentSymbol", {"textDocument": {"uri": demo}})["result"]
    top = {s["name"]: s for s in got}
    assert set(top) == {"spot", "feeder", "yard"}
    assert [c["name"] for c in top["yard"]["children"]] == ["cells", "sun"]
    assert top["yard"]["range"]["start"] == at(TEXT, "site yard")
    assert top["yard"]["selectionRange"]["start"] == at(TEXT, "yard")


def test_formatting(server):
    messy = TEXT.replace("  export max 10 MW\n", "export   max 10 MW   # the fuse\n").replace("88%", "88 %")
    uri = open_doc(server, server.root / "messy.folio", messy)
    diagnostics_for(server, uri)
    got = server.request("textDocument/formatting", {"textDocument": {"uri": uri},
                                                     "options": {"tabSize": 2, "insertSpaces": True}})["result"]
    (edit,) = got
    assert edit["newText"] == format_source(messy, "messy.folio").text != messy
    assert edit["range"]["start"] == {"line": 0, "character": 0}
    assert edit["range"]["end"]["line"] == messy.count("\n")

    broken = TEXT.replace("connection feeder {", "connection feeder")
    uri = open_doc(server, server.root / "broken.folio", broken)
    assert diagnostics_for(server, uri)
    assert server.request("textDocument/formatting", {"textDocument": {"uri": uri},
                                                      "options": {"tabSize": 2, "insertSpaces": True}})["result"] == []


def test_garbage_does_not_kill_the_server(server, demo):
    server.send_raw(b"{this is not json")
    server.send_raw(b'{"jsonrpc": "2.0", "id": 9999, "method": "textDocument/hover", "params": {"no": 1}}')
    server.send_raw(b'[1, 2, 3]')
    server.send({"id": 9998, "method": "no/suchMethod", "params": {}})
    # an exception inside a handler (a document that is neither open nor on disk) is an error answer
    got = server.request("textDocument/hover", {"textDocument": {"uri": (server.root / "nowhere.folio").as_uri()},
                                                "position": {"line": 0, "character": 0}})
    assert "error" in got
    assert server.proc.poll() is None
    assert ask(server, "textDocument/hover", demo, at(TEXT, "88%"))["contents"]["value"]


def test_shutdown_and_exit_are_clean(server):
    assert server.close() == 0
    assert b"Traceback" not in server.stderr, server.stderr.decode()


def test_a_fresh_server_exits_cleanly(tmp_path):
    client = LspClient(cwd=HERE.parent)
    client.initialize(tmp_path)
    assert client.close() == 0
    assert client.stderr == b""
