"""`portfolio graph`: pictures of the network, their legend and labels."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import pydot
import pytest

from portfolio import lint_file
from portfolio.cli import main
from portfolio.draw import EDGE_STYLE, NODE_STYLE, edge_label

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "ridge_and_river" / "ridge_and_river.folio"


def test_svg_has_every_node_and_the_legend(tmp_path):
    out = tmp_path / "net.svg"
    assert main(["graph", str(EXAMPLE), "--out", str(out)]) == 0
    text = out.read_text()
    ET.fromstring(text)  # well-formed SVG
    g = lint_file(EXAMPLE).graph
    for node in g.nodes:
        assert node in text
    for _, _, words in list(NODE_STYLE.values()) + list(EDGE_STYLE.values()):
        assert words.split(" (")[0] in text, words
    assert "transfer, 1 step &lt;= 3 MW" in text or "transfer, 1 step <= 3 MW" in text


def test_png_is_a_png(tmp_path):
    out = tmp_path / "net.png"
    assert main(["graph", str(EXAMPLE), "--out", str(out)]) == 0
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_dot_parses_and_keeps_every_edge(tmp_path):
    out = tmp_path / "net.dot"
    assert main(["graph", str(EXAMPLE), "--out", str(out)]) == 0
    (dot,) = pydot.graph_from_dot_data(out.read_text())
    g = lint_file(EXAMPLE).graph
    assert len(dot.get_edges()) == g.number_of_edges()
    labels = {e.get("label").strip('"') for e in dot.get_edges()}
    assert "export <= 16 MW" in labels
    assert "release, 2 steps, x0.7" in labels


def test_edge_label_names_the_limit():
    assert edge_label("charge", {"limit": 12.0}) == "charge <= 12 MW"
    assert edge_label("import", {"limit": None}) == "import"


def test_lint_errors_stop_drawing(tmp_path):
    bad = tmp_path / "bad.folio"
    bad.write_text('horizon start 2027-01-01T00:00 length 2 h step 1 h\nconnection c { export max 5 MWh buy at 4 per MWh }\n')
    out = tmp_path / "net.svg"
    assert main(["graph", str(bad), "--out", str(out)]) == 1
    assert not out.exists()


@pytest.mark.parametrize("name", ["net.pdf", "net"])
def test_unknown_picture_kind_is_a_usage_error(tmp_path, name):
    assert main(["graph", str(EXAMPLE), "--out", str(tmp_path / name)]) == 2
    assert not (tmp_path / name).exists()


def test_missing_folder_is_a_usage_error(tmp_path):
    assert main(["graph", str(EXAMPLE), "--out", str(tmp_path / "nope" / "net.svg")]) == 2


@pytest.mark.parametrize("name", ["電池.folio", "p$\\foo$q.folio", "x$_$y.folio"])
def test_a_file_named_in_any_script_or_with_dollars_draws_quietly(tmp_path, capsys, name):
    """A file that names no portfolio is titled by its name: a glyph the font lacks is a
    box, not a warning on stderr, and '$' is text, not matplotlib's math (which failed as
    'cannot write')."""
    import shutil
    shutil.copytree(EXAMPLE.parent, tmp_path / "ex")        # its series files beside it
    f = tmp_path / "ex" / name
    f.write_text(EXAMPLE.read_text(encoding="utf-8").replace("portfolio ridge_and_river\n", ""),
                 encoding="utf-8")
    assert "portfolio ridge_and_river\n" in EXAMPLE.read_text(encoding="utf-8")
    import warnings
    for ext in ("svg", "png"):
        out = tmp_path / f"net.{ext}"
        with warnings.catch_warnings(record=True) as seen:    # what would reach stderr
            warnings.simplefilter("always")
            assert main(["graph", str(f), "--out", str(out)]) == 0
        assert not seen, [str(w.message) for w in seen]
        assert out.stat().st_size > 1000
    captured = capsys.readouterr()
    assert captured.err == "", captured.err
