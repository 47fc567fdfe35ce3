"""Every example lints clean, and its network graph is exactly the one its text describes.

The expected nodes and edges below are read off each example file by hand:
a site's ``export``/``import`` edges exist unless a limit of 0 closes them,
``charge``/``discharge`` edges exist where a storage's limit is above 0,
``feed`` edges go to each ``into`` target (default: the site), ``serve``
edges to each demand, ``natural`` edges from a storage's own supply, and one
edge per route, keyed by its kind.
"""

from __future__ import annotations

import shutil
from collections import Counter
from pathlib import Path

import pytest

from portfolio.api import lint_file
from portfolio.spans import Span

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = sorted((ROOT / "examples").glob("*/*.folio"))

EXPECTED = {
    "plover_marsh": {
        # park_cells charges only from reed_pv: no charge edge from the site
        "nodes": {
            "marsh_line": "connection", "marsh_park": "site", "park_cells": "storage",
            "warranty_cells": "storage", "reed_pv": "supply",
        },
        "edges": [
            ("marsh_park", "marsh_line", "export"), ("marsh_line", "marsh_park", "import"),
            ("park_cells", "marsh_park", "discharge"),
            ("marsh_park", "warranty_cells", "charge"), ("warranty_cells", "marsh_park", "discharge"),
            ("reed_pv", "park_cells", "feed"), ("reed_pv", "marsh_park", "feed"),
        ],
    },
    "kestrel_bay": {
        "nodes": {
            "bay_feeder": "connection", "dune_works": "site", "cells": "storage",
            "dune_pv": "supply", "plant": "demand",
        },
        "edges": [
            ("dune_works", "bay_feeder", "export"), ("bay_feeder", "dune_works", "import"),
            ("dune_works", "cells", "charge"), ("cells", "dune_works", "discharge"),
            ("dune_pv", "cells", "feed"), ("dune_pv", "dune_works", "feed"),
            ("dune_works", "plant", "serve"),
        ],
    },
    "heron_flats": {
        "nodes": {
            "flats_substation": "connection", "north_yard": "site", "cold_store": "site",
            "north_a": "storage", "north_b": "storage", "south_c": "storage",
            "north_roof": "supply", "chillers": "demand",
        },
        "edges": [
            ("north_yard", "flats_substation", "export"), ("flats_substation", "north_yard", "import"),
            ("cold_store", "flats_substation", "export"), ("flats_substation", "cold_store", "import"),
            ("north_yard", "north_a", "charge"), ("north_a", "north_yard", "discharge"),
            ("north_yard", "north_b", "charge"), ("north_b", "north_yard", "discharge"),
            ("cold_store", "south_c", "charge"), ("south_c", "cold_store", "discharge"),
            ("north_roof", "north_yard", "feed"),
            ("cold_store", "chillers", "serve"),
        ],
    },
    "glen_cascade": {
        # reservoirs: no 'charge max', so no charge edges
        "nodes": {
            "glen_line": "connection", "glen_hydro": "site", "upper_loch": "storage",
            "lower_loch": "storage", "river": "supply",
        },
        "edges": [
            ("glen_hydro", "glen_line", "export"), ("glen_line", "glen_hydro", "import"),
            ("upper_loch", "glen_hydro", "discharge"), ("lower_loch", "glen_hydro", "discharge"),
            ("river", "upper_loch", "natural"),
            ("upper_loch", "lower_loch", "release"), ("upper_loch", "lower_loch", "spill"),
        ],
    },
    "corrie_steps": {
        # crag_pool's charge is its pump: a charge edge from the site, and a pump edge
        # from tarn_basin (which reaches the grid through it as well as its own plant)
        "nodes": {
            "steps_line": "connection", "corrie_works": "site", "high_corrie": "storage",
            "crag_pool": "storage", "tarn_basin": "storage", "burn": "supply",
        },
        "edges": [
            ("corrie_works", "steps_line", "export"), ("steps_line", "corrie_works", "import"),
            ("high_corrie", "corrie_works", "discharge"),
            ("corrie_works", "crag_pool", "charge"), ("crag_pool", "corrie_works", "discharge"),
            ("tarn_basin", "corrie_works", "discharge"),
            ("burn", "high_corrie", "natural"),
            ("high_corrie", "crag_pool", "release"), ("high_corrie", "crag_pool", "spill"),
            ("tarn_basin", "crag_pool", "pump"),
            ("crag_pool", "tarn_basin", "release"), ("crag_pool", "tarn_basin", "spill"),
        ],
    },
    "ridge_and_river": {
        "nodes": {
            "north_grid": "connection", "valley_grid": "connection",
            "sunfield": "site", "forge": "site", "millpond": "site", "kiln_works": "site",
            "sun_cells": "storage", "forge_heat": "storage", "upper_pond": "storage",
            "lower_pond": "storage", "kiln_heat": "storage",
            "sun_pv": "supply", "stream": "supply", "kiln": "demand",
        },
        "edges": [
            ("sunfield", "north_grid", "export"), ("north_grid", "sunfield", "import"),
            ("forge", "north_grid", "export"), ("north_grid", "forge", "import"),
            ("millpond", "valley_grid", "export"), ("valley_grid", "millpond", "import"),
            ("kiln_works", "valley_grid", "export"), ("valley_grid", "kiln_works", "import"),
            ("sunfield", "sun_cells", "charge"), ("sun_cells", "sunfield", "discharge"),
            ("forge", "forge_heat", "charge"), ("forge_heat", "forge", "discharge"),
            ("kiln_works", "kiln_heat", "charge"), ("kiln_heat", "kiln_works", "discharge"),
            ("upper_pond", "millpond", "discharge"), ("lower_pond", "millpond", "discharge"),
            ("sun_pv", "sun_cells", "feed"), ("sun_pv", "sunfield", "feed"),
            ("stream", "upper_pond", "natural"),
            ("kiln_works", "kiln", "serve"),
            ("upper_pond", "lower_pond", "release"), ("upper_pond", "lower_pond", "spill"),
            ("forge_heat", "kiln_heat", "transfer"),
        ],
    },
}


def test_examples_exist():
    assert len(EXAMPLES) >= 3


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_example_lints_clean(path):
    result = lint_file(path)
    assert [f"{d.span}: {d.code} {d.message}" for d in result.diagnostics] == []
    assert result.ok and result.portfolio is not None


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_example_graph(path):
    assert path.stem in EXPECTED, f"write the expected graph of the new example {path.stem} here"
    want = EXPECTED[path.stem]
    g = lint_file(path).graph
    assert {n: a["kind"] for n, a in g.nodes(data=True)} == want["nodes"]
    assert Counter(list(g.edges(keys=True))) == Counter(want["edges"])


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_example_graph_points_into_the_file(path):
    """Every node and edge keeps the span of the text it came from."""
    g = lint_file(path).graph
    lines = path.read_text("utf-8").split("\n")
    spans = [a["span"] for _, a in g.nodes(data=True)] + [a["span"] for *_, a in g.edges(keys=True, data=True)]
    for sp in spans:
        assert isinstance(sp, Span)
        assert Path(sp.path).resolve() == path.resolve()
        assert 1 <= sp.line <= len(lines) and 1 <= sp.col <= len(lines[sp.line - 1])
        assert lines[sp.line - 1][sp.col - 1:].strip(), f"{sp} points at nothing"


def test_storage_edge_spans_name_their_setting():
    """The charge edge of kestrel_bay's cells points at its 'charge max' line."""
    path = ROOT / "examples" / "kestrel_bay" / "kestrel_bay.folio"
    g = lint_file(path).graph
    lines = path.read_text("utf-8").split("\n")
    sp = g.edges["dune_works", "cells", "charge"]["span"]
    assert lines[sp.line - 1][sp.col - 1:].startswith("charge max 20 MW")
    sp = g.edges["dune_works", "bay_feeder", "export"]["span"]
    assert lines[sp.line - 1][sp.col - 1:].startswith("export max 20 MW")


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_example_with_windows_line_ends_and_bom(tmp_path, path):
    """The same text saved by a Windows editor (BOM, CRLF) lints the same, graph and all."""
    folder = shutil.copytree(path.parent, tmp_path / path.parent.name)
    copy = folder / path.name
    copy.write_bytes(b"\xef\xbb\xbf" + path.read_bytes().replace(b"\n", b"\r\n"))
    result = lint_file(copy)
    assert result.diagnostics == [] and result.ok
    assert sorted(result.graph.edges(keys=True)) == sorted(lint_file(path).graph.edges(keys=True))
