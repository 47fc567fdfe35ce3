"""Pictures of the network graph: SVG and PNG (matplotlib), DOT text (written here).

Our own visual style, explained in docs/graph.md and in the legend drawn on
every picture.  Layers, top to bottom: connections, sites, then each site's
storages, supplies and demands.  Edges are labelled with their limits.
Writing is atomic (temporary file, then rename).
"""

from __future__ import annotations

from pathlib import Path
from typing import Dict, Tuple

import networkx as nx

from . import model as M
from .files import replace_atomically
from .topology import Topology

# kind -> (matplotlib marker, fill colour, words for the legend)
NODE_STYLE = {
    "connection": ("h", "#3b3b3b", "grid connection"),
    "site": ("s", "#9aa5b1", "site (where its assets pool their power)"),
    M.KIND_BATTERY: ("o", "#2f6fdf", "battery storage"),
    M.KIND_RESERVOIR: ("o", "#1f9e89", "reservoir storage"),
    M.KIND_THERMAL: ("o", "#e0712c", "thermal storage"),
    "other": ("o", "#8c6bb1", "other storage"),
    "supply": ("^", "#f2c12e", "supply (solar, wind, river, heat)"),
    "demand": ("v", "#c0392b", "demand"),
}

# edge key -> (colour, line style, words for the legend)
EDGE_STYLE = {
    "grid": ("#3b3b3b", "solid", "import / export"),
    "store": ("#2f6fdf", "solid", "charge / discharge"),
    "feed": ("#d4a017", "dashed", "supply fed in"),
    "serve": ("#c0392b", "dotted", "demand served"),
    "route": ("#1f9e89", "solid", "route (label: kind, delay)"),
}

_EDGE_GROUP = {"export": "grid", "import": "grid", "charge": "store", "discharge": "store",
               "feed": "feed", "natural": "feed", "serve": "serve"}


def _style_key(attrs) -> str:
    kind = attrs.get("kind")
    if kind == "storage":
        sk = attrs.get("storage_kind", "other")
        return sk if sk in M.KNOWN_KINDS else "other"
    return kind


def edge_label(key: str, attrs) -> str:
    lim = attrs.get("limit")
    text = key
    if "route" in attrs:
        r = attrs["route"]
        text = f"{r.kind}, {r.delay_steps} step{'s' if r.delay_steps != 1 else ''}"
        if r.factor != 1:
            text += f", x{r.factor:g}"
    if lim is not None:
        text += f" <= {lim:g} MW"
    return text


def layout(g: nx.MultiDiGraph) -> Dict[str, Tuple[float, float]]:
    """Layers: connections (top), sites, then assets grouped under their site.

    Within a site: each storage with its natural supply beside it, then the
    site's supplies, then its demands.
    """
    topo = Topology.from_graph(g)
    conns, sites = topo.connections, topo.sites
    assets = []
    placed = set()
    for site in sites:
        for n in topo.storages_at(site):
            u = topo.natural_supply_of(n)
            if u is not None and u not in placed:
                assets.append(u)
                placed.add(u)
            assets.append(n)
            placed.add(n)
        for n in (*topo.supplies_at(site), *topo.demands_at(site)):
            if n not in placed:
                assets.append(n)
                placed.add(n)
    assets += [n for n, a in g.nodes(data=True)
               if a.get("kind") not in ("connection", "site") and n not in placed]
    pos = {n: (i + 0.5, 0.0) for i, n in enumerate(assets)}

    def centre(n, below, fallback):
        xs = [pos[m][0] for m in below if m in pos]
        return sum(xs) / len(xs) if xs else fallback

    for i, site in enumerate(sites):
        below = [n for n in assets if topo.site_of(n) == site]
        pos[site] = (centre(site, below, i + 0.5), 1.6)
    for i, c in enumerate(conns):
        pos[c] = (centre(c, topo.sites_at(c), i + 0.5), 3.2)
    return pos


def draw(g: nx.MultiDiGraph, path: Path, title: str = "") -> None:
    """Write an SVG or PNG picture (by the file's suffix)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.lines import Line2D

    pos = layout(g)
    n_assets = max(sum(1 for _, a in g.nodes(data=True) if a["kind"] not in ("connection", "site")), 3)
    fig, ax = plt.subplots(figsize=(min(4 + 1.6 * n_assets, 40), 7))
    for key, (marker, colour, _) in NODE_STYLE.items():
        nodes = [n for n, a in g.nodes(data=True) if _style_key(a) == key]
        if nodes:
            nx.draw_networkx_nodes(g, pos, nodelist=nodes, node_shape=marker, node_color=colour,
                                   node_size=900, edgecolors="black", linewidths=0.8, ax=ax)
    nx.draw_networkx_labels(g, pos, labels={n: n for n in g.nodes}, font_size=8,
                            verticalalignment="top", ax=ax,
                            bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.8))
    for group, (colour, style, _) in EDGE_STYLE.items():
        edges = [(u, v, k) for u, v, k, a in g.edges(keys=True, data=True)
                 if ("route" in a and group == "route") or _EDGE_GROUP.get(k) == group]
        if not edges:
            continue
        rad = 0.25 if group in ("route", "grid", "store") else 0.0
        style_arc = f"arc3,rad={rad}"
        nx.draw_networkx_edges(g, pos, edgelist=[(u, v) for u, v, _ in edges], edge_color=colour,
                               style=style, arrows=True, arrowsize=14, node_size=900,
                               connectionstyle=style_arc, ax=ax)
        labels = {}
        for u, v, k in edges:
            labels.setdefault((u, v), []).append(edge_label(k, g.edges[u, v, k]))
        nx.draw_networkx_edge_labels(g, pos, edge_labels={e: "\n".join(t) for e, t in labels.items()},
                                     font_size=6, ax=ax, label_pos=0.5, rotate=False,
                                     connectionstyle=style_arc, font_color=colour,
                                     bbox=dict(boxstyle="round,pad=0.1", fc="white", ec="none", alpha=0.85))
    handles = [Line2D([], [], marker=m, color="white", markerfacecolor=c, markeredgecolor="black",
                      markersize=10, label=w) for m, c, w in NODE_STYLE.values()]
    handles += [Line2D([], [], color=c, linestyle=s, label=w) for c, s, w in EDGE_STYLE.values()]
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False)
    # the title may be a file's name (a portfolio that names none): '$' in it is text, not math
    ax.set_title(title or g.graph.get("name", ""), loc="left", parse_math=False)
    ax.axis("off")
    import warnings
    with warnings.catch_warnings():
        # a glyph the font lacks (CJK, ...) is drawn as a box; matplotlib's warning would
        # reach the command's stderr as if something had failed
        warnings.simplefilter("ignore", UserWarning)
        fig.tight_layout()
        _atomic(path, lambda tmp: fig.savefig(tmp, format=path.suffix[1:].lower(), dpi=150))
    plt.close(fig)


def to_dot(g: nx.MultiDiGraph) -> str:
    """DOT text with the same colours and shapes, for those who use graphviz.

    Written directly (DOT is a small text format; every identifier and label
    is a quoted string, escaped by :func:`_quote`); tests read it back with
    pydot to check it parses.
    """
    shapes = {"h": "hexagon", "s": "box", "o": "ellipse", "^": "triangle", "v": "invtriangle"}
    lines = [f"digraph {_dot_id(g.graph.get('name', 'portfolio'))} {{", "rankdir=TB;"]
    for n, a in g.nodes(data=True):
        marker, colour, _ = NODE_STYLE[_style_key(a)]
        font = "white" if a["kind"] == "connection" else "black"
        lines.append(f"{_dot_id(n)} [label={_quote(n)}, shape={shapes[marker]}, style=filled, "
                     f"fillcolor={_quote(colour)}, fontcolor={_quote(font)}];")
    for u, v, k, a in g.edges(keys=True, data=True):
        group = "route" if "route" in a else _EDGE_GROUP.get(k, "grid")
        colour, style, _ = EDGE_STYLE[group]
        lines.append(f"{_dot_id(u)} -> {_dot_id(v)} [label={_quote(edge_label(k, a))}, "
                     f"color={_quote(colour)}, style={style}];")
    lines.append("}")
    return "\n".join(lines) + "\n"


def _dot_id(name: str) -> str:
    return _quote(str(name))


def _quote(text: str) -> str:
    return '"' + str(text).replace("\\", "\\\\").replace('"', '\\"') + '"'


def write_picture(g: nx.MultiDiGraph, path: Path) -> None:
    suffix = path.suffix.lower()
    if suffix in (".svg", ".png"):
        draw(g, path)
    elif suffix in (".dot", ".gv"):
        text = to_dot(g)
        _atomic(path, lambda tmp: Path(tmp).write_text(text, "utf-8"))
    else:
        raise ValueError(f"cannot draw to '{path.name}': use a .svg, .png or .dot file name")


_atomic = replace_atomically     # portfolio.files: temporary file, flushed, renamed
