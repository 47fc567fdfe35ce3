"""Fuzzing the series reader: every example's CSVs, mutated byte by byte.

Each case copies one example folder, damages one of its CSV files (cells
replaced by odd numbers, dates and text; delimiters, quotes, NULs and line
ends inserted; rows cut or repeated; the file truncated), and lints the
example.  What must hold: no traceback, every diagnostic of a registered
kind, every span inside the file it names.  Inputs stay small (a few
kilobytes) and the count is fixed, so the run is quick; the same strategy
runs as long as wanted in tests/bench/bench_fuzz.py.
"""

from __future__ import annotations

import shutil
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from portfolio.api import lint_file
from portfolio.diagnostics import REGISTRY
from portfolio.render import format_text

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = sorted(p for p in (ROOT / "examples").glob("*/*.folio") if list(p.parent.rglob("*.csv")))

ODD_CELLS = ["", " ", "nan", "inf", "-inf", "1e400", "-1e400", "1e21", "12,5", "1.2.3", "0x10", "1_000",
             "２", "NULL", "\x00", '"', '""', "2027-02-30T00:00", "2027-03-01T24:00", "9999-99-99",
             "2027-03-01", "-0", "+5", ".5", "5.", "1e-400", "\u00a0", "\x1b[31m"]
INSERTS = [",", ";", "\t", '"', "\n", "\r", "\r\n", "\x00", "\ufeff", "#", "\\", " ", "e"]


@st.composite
def damaged(draw):
    """(example, which CSV, its new bytes)."""
    example = draw(st.sampled_from(EXAMPLES))
    csvs = sorted(example.parent.rglob("*.csv"))
    target = draw(st.sampled_from(csvs))
    text = target.read_text(encoding="utf-8")
    lines = text.splitlines(keepends=True)
    for _ in range(draw(st.integers(1, 6))):
        op = draw(st.sampled_from(["cell", "insert", "drop_row", "repeat_row", "truncate"]))
        if not lines:
            break
        i = draw(st.integers(0, len(lines) - 1))
        if op == "cell":
            cells = lines[i].rstrip("\r\n").split(",")
            j = draw(st.integers(0, len(cells) - 1))
            cells[j] = draw(st.sampled_from(ODD_CELLS))
            lines[i] = ",".join(cells) + "\n"
        elif op == "insert":
            k = draw(st.integers(0, len(lines[i])))
            lines[i] = lines[i][:k] + draw(st.sampled_from(INSERTS)) + lines[i][k:]
        elif op == "drop_row":
            del lines[i]
        elif op == "repeat_row":
            lines.insert(i, lines[i])
        else:
            lines = lines[:i]
    data = "".join(lines).encode("utf-8", errors="surrogatepass")[:64 * 1024]
    return example, target.relative_to(example.parent), data


def lint_damaged(tmp: Path, case) -> None:
    """Copy the example, write the damaged CSV, lint, check the result."""
    example, rel, data = case
    folder = tmp / example.parent.name
    if folder.exists():
        shutil.rmtree(folder)
    shutil.copytree(example.parent, folder)
    (folder / rel).write_bytes(data)
    result = lint_file(folder / example.name)
    for d in result.diagnostics:
        assert d.code in REGISTRY and type(d) is REGISTRY[d.code], d
        assert d.span.line >= 1 and d.span.col >= 1, d
        p = Path(d.span.path)
        if p.exists():
            n = len(p.read_bytes().replace(b"\r\n", b"\n").replace(b"\r", b"\n").split(b"\n"))
            assert d.span.line <= n + 1, (d, n)
        format_text(d)                         # rendering never fails either
    if result.portfolio is not None:
        assert not result.errors


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(damaged())
def test_damaged_csvs_give_diagnostics_not_tracebacks(tmp_path, case):
    lint_damaged(tmp_path, case)
