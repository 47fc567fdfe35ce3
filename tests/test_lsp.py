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
from portfolio.lsp.analysis import FIELD_UNITS, analyse, model_decls

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


# The newer constructs: a currency, a pump route, cycle limits, 'charge only from', a series
# whose gaps are held, and a study; the supply is declared before the storage it feeds.
NEWER = """portfolio newer
currency EUR
horizon start 2027-03-01T00:00 length 4 h step 60 min zone "UTC"
price spot values [30, 52, 28, 61] per MWh
connection feeder {
  sell at spot
  buy at spot plus 9.5 per MWh
  export max 12 MW
  import max 6 MW
}
site yard at feeder {
  supply sun values [0, 1, 2, 1] MW { into cells, site }
  demand load from "profiles/load.csv" column "mw" gaps hold
  storage cells {
    energy 20 MWh
    charge max 5 MW
    discharge max 5 MW
    charge only from sun
    cycles max 1.5 per day max 300
    wear 4 per MWh
  }
  storage upper {
    kind reservoir
    energy 50 MWh
    charge max 10 MW
    discharge max 10 MW
  }
  storage lower {
    kind reservoir
    energy 80 MWh
    discharge max 2 MW
  }
  route lower pump -> upper factor 0.9
}
study sizes {
  vary cells energy from 20 MWh to 40 MWh step 10 MWh
  vary feeder export max values [8, 12] MW
}
"""
LOAD_CSV = "time,mw\n2027-03-01T00:00Z,1\n2027-03-01T01:00Z,2\n2027-03-01T03:00Z,1\n"   # 02:00 missing


@pytest.fixture(scope="module")
def newer(server):
    (server.root / "profiles").mkdir(exist_ok=True)
    (server.root / "profiles" / "load.csv").write_text(LOAD_CSV)
    path = server.root / "newer.folio"
    uri = open_doc(server, path, NEWER)
    got = diagnostics_for(server, uri)
    assert [d["code"] for d in got] == [d.code for d in lint_text(NEWER, str(path)).diagnostics] == ["P416"]
    return uri


def hover_text(server, uri, position) -> str:
    got = ask(server, "textDocument/hover", uri, position)
    assert got is not None, position
    return got["contents"]["value"]


def test_study_names_lead_to_their_declarations(server, newer):
    got = ask(server, "textDocument/definition", newer, at(NEWER, "cells energy", 2))
    assert got["range"]["start"] == at(NEWER, "cells {")
    got = ask(server, "textDocument/definition", newer, at(NEWER, "feeder export", 2))
    assert got["range"]["start"] == at(NEWER, "feeder {")
    text = hover_text(server, newer, at(NEWER, "sizes", 1))
    assert "**study** `sizes`" in text
    assert "vary `cells` energy: 20 MWh, 30 MWh, 40 MWh" in text
    assert "vary `feeder` export max: 8 MW, 12 MW" in text


def retype(server, name: str, old: str, new: str) -> tuple:
    """Open NEWER as ``name``, then change its line ``old`` into ``new`` as an editor does
    while typing; the new text and its URI, once the change's diagnostics are published."""
    uri = open_doc(server, server.root / name, NEWER)
    assert diagnostics_for(server, uri)
    line = NEWER.split("\n").index(old)
    _version[0] += 1
    server.notify("textDocument/didChange", {
        "textDocument": {"uri": uri, "version": _version[0]},
        "contentChanges": [{"range": {"start": {"line": line, "character": 0},
                                      "end": {"line": line, "character": len(old)}}, "text": new}]})
    text = NEWER.replace(old + "\n", new + "\n")
    got = server.wait_for("textDocument/publishDiagnostics",
                          lambda p: p["uri"] == uri and p.get("version") == _version[0])["diagnostics"]
    assert [d["code"] for d in got] == [d.code for d in lint_text(text, str(server.root / name)).diagnostics]
    return text, uri


def test_completion_inside_a_study(server, newer):
    """While a line is half typed the file does not parse: the names offered are those of
    its last version that did."""
    text, uri = retype(server, "study_typing.folio", "  vary feeder export max values [8, 12] MW", "  vary fe")
    assert lint_text(text, "t.folio").portfolio is None
    names = ask(server, "textDocument/completion", uri, at(text, "vary fe", 7))
    assert {"feeder", "cells", "upper"} <= labels(names)
    assert {i["detail"] for i in names["items"] if i["label"] == "feeder"} == {"connection"}
    settings = labels(ask(server, "textDocument/completion", uri, at(text, "cells energy", 6)))
    assert {"energy", "charge", "export", "efficiency"} <= settings and "cells" not in settings


def test_a_pump_route(server, newer):
    got = ask(server, "textDocument/definition", newer, at(NEWER, "lower pump", 1))
    assert got["range"]["start"] == at(NEWER, "lower {")
    got = ask(server, "textDocument/definition", newer, at(NEWER, "-> upper", 4))
    assert got["range"]["start"] == at(NEWER, "upper {")
    text = hover_text(server, newer, at(NEWER, "pump", 1))      # the route has no name of its own
    assert "**route**" in text and "source: `lower`" in text and "target: `upper`" in text
    assert "factor: 0.9 MWh per MWh" in text
    text = hover_text(server, newer, at(NEWER, "0.9", 1))
    assert "factor = 0.9 MWh per MWh" in text
    kinds = labels(ask(server, "textDocument/completion", newer, at(NEWER, "pump", 2)))
    assert {"pump", "release", "spill", "transfer"} <= kinds


def test_money_carries_the_currency(server, newer):
    text = hover_text(server, newer, at(NEWER, "4 per MWh", 0))
    assert "**4 EUR per MWh**" in text and "wear = 4 EUR per MWh" in text
    text = hover_text(server, newer, at(NEWER, "9.5", 1))
    assert "buy = `spot` plus 9.5 EUR per MWh" in text
    assert "**currency** `EUR`" in hover_text(server, newer, at(NEWER, "EUR", 1))
    text = hover_text(server, newer, at(NEWER, "spot values", 1))
    assert "4 values, 28 EUR per MWh to 61 EUR per MWh" in text


def test_cycle_limits_and_charge_sources(server, newer):
    assert "cycles per day = 1.5 cycles per day" in hover_text(server, newer, at(NEWER, "1.5", 1))
    assert "cycles horizon = 300 cycles" in hover_text(server, newer, at(NEWER, "300", 1))
    assert "series `spot`: values = 4 values" in hover_text(server, newer, at(NEWER, "[30", 1))
    got = ask(server, "textDocument/definition", newer, at(NEWER, "from sun", 6))
    assert got["range"]["start"] == at(NEWER, "sun values")
    text = hover_text(server, newer, at(NEWER, "cells", 1, nth=2))
    assert "**storage** `cells`" in text and "charge sources: `sun`" in text
    text, uri = retype(server, "sources_typing.folio", "    charge only from sun", "    charge only from ")
    assert "sun" in labels(ask(server, "textDocument/completion", uri, at(text, "only from \n", 10)))


def test_a_use_before_the_declaration(server, newer):
    """'into cells' comes before 'storage cells': the definition is the storage, not the use."""
    got = ask(server, "textDocument/definition", newer, at(NEWER, "into cells", 6))
    assert got["range"]["start"] == at(NEWER, "cells {")
    refs = ask(server, "textDocument/references", newer, at(NEWER, "cells {"), context={"includeDeclaration": True})
    assert len(refs) == NEWER.count("cells")


def test_gaps_hold(server, newer):
    kinds = labels(ask(server, "textDocument/completion", newer, at(NEWER, "gaps hold", 5)))
    assert kinds >= {"hold", "interpolate"} and "storage" not in kinds
    text = hover_text(server, newer, at(NEWER, "load from", 1))
    assert "**demand** `load`" in text and "site: `yard`" in text


def test_every_number_a_file_sets_has_a_unit_in_a_hover():
    """Each model field a file sets to a number (over the examples and the lint cases that
    check) has its unit in FIELD_UNITS, so a hover never shows a bare model number."""
    files = sorted((HERE.parent / "examples").glob("*/*.folio")) + sorted(CASES.glob("*.folio"))
    missing, seen = {}, 0
    for path in files:
        try:
            text = path.read_text("utf-8")
        except UnicodeDecodeError:
            continue
        a = analyse(text, str(path))
        if a.model is None:
            continue
        for decl in model_decls(a.model):
            for fld in decl.spans:
                value = getattr(decl, fld, None)
                if isinstance(value, (int, float)) and not isinstance(value, bool):
                    seen += 1
                    if fld not in FIELD_UNITS:
                        missing.setdefault(f"{type(decl).__name__}.{fld}", path.name)
    assert seen > 100 and not missing, missing


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
