"""Data-driven lint cases: one small .folio file per diagnostic and way it fires.

Each file in tests/lint_cases/ states what linting it must produce in comment
lines at its top, one per diagnostic::

    # expect: P201 at 6:11                         (a position in the case file)
    # expect: P403 at profiles/bad_cell.csv:4:19   (a position in a series file)
    # expect: nothing                              (a case that must lint clean)
    # options: confine                             (lint it as `--confine` does)

The test compares the exact multiset of (code, file, line, column).  The
expectations were written by hand from the case text (the column is where the
offending word starts, counting from 1).
"""

from __future__ import annotations

import re
from collections import Counter
from pathlib import Path

import pytest

from portfolio.api import lint_file
from portfolio.diagnostics import ERROR, REGISTRY

CASES = Path(__file__).resolve().parent / "lint_cases"
FILES = sorted(CASES.glob("*.folio"))
EXPECT = re.compile(r"^#\s*expect:\s*(?:(?P<none>nothing)|(?P<code>P\d{3})\s+at\s+"
                    r"(?:(?P<file>[^\s:]+):)?(?P<line>\d+):(?P<col>\d+))\s*$")


def expectations(path: Path):
    """The expected (code, file, line, col) of a case, from its leading comment lines."""
    text = path.read_bytes().decode("utf-8", errors="replace")   # P001 cases are not UTF-8
    found, nothing = [], False
    for line in text.split("\n"):
        if not line.startswith("# expect"):
            if found or nothing:
                break
            continue
        m = EXPECT.match(line.rstrip("\r"))
        assert m, f"{path.name}: cannot read expectation line {line!r}"
        if m["none"]:
            nothing = True
            continue
        target = (path.parent / m["file"]).resolve() if m["file"] else path.resolve()
        found.append((m["code"], target, int(m["line"]), int(m["col"])))
    assert found or nothing, f"{path.name} states no '# expect:' line"
    assert not (found and nothing), f"{path.name} expects both nothing and something"
    return found


def options(path: Path) -> set:
    """Options of a case: a leading line '# options: confine' lints it with --confine."""
    found = set()
    for line in path.read_text(encoding="utf-8", errors="replace").splitlines():
        if line.startswith("# options:"):
            found |= set(line.split(":", 1)[1].split())
    return found


def actual(path: Path):
    result = lint_file(path, confine="confine" in options(path))
    got = [(d.code, Path(d.span.path).resolve(), d.span.line, d.span.col) for d in result.diagnostics]
    return result, got


def _show(items):
    return sorted(f"{c} at {p.name}:{ln}:{col}" for c, p, ln, col in items)


@pytest.mark.parametrize("path", FILES, ids=[p.stem for p in FILES])
def test_case(path):
    want = expectations(path)
    result, got = actual(path)
    assert Counter(got) == Counter(want), f"\n got: {_show(got)}\nwant: {_show(want)}"
    # A portfolio comes back exactly when no error is expected.
    expect_errors = any(REGISTRY[c].severity == ERROR for c, *_ in want)
    assert result.ok is (not expect_errors)
    assert (result.portfolio is None) is expect_errors


def test_every_code_has_a_case():
    """A new code in the registry needs a case file that makes it fire."""
    named = {p.name[:4] for p in FILES}
    fired = {c for p in FILES for c, *_ in expectations(p)}
    missing = sorted(set(REGISTRY) - (named & fired))
    assert not missing, f"codes without a lint case in tests/lint_cases/: {missing}"


@pytest.mark.parametrize("path", FILES, ids=[p.stem for p in FILES])
def test_case_is_named_for_what_it_checks(path):
    code = path.name[:4]
    assert code in REGISTRY, f"{path.name} is not named after a registered code"
    want = {c for c, *_ in expectations(path)}
    if "_ok_" in path.stem:
        assert not want, f"{path.name} is a must-lint-clean case"
    else:
        assert code in want, f"{path.name} does not expect {code}"


def test_expectation_reader_rejects_garbage(tmp_path):
    bad = tmp_path / "P101_x.folio"
    bad.write_text("# expect: P101 at six:11\nportfolio x\n")
    with pytest.raises(AssertionError):
        expectations(bad)
    silent = tmp_path / "P101_y.folio"
    silent.write_text("portfolio x\n")
    with pytest.raises(AssertionError):
        expectations(silent)


def test_every_diagnostic_kind_is_frozen_comparable_and_picklable():
    """The kinds are plain subclasses of the frozen Diagnostic (portfolio/diagnostics.py):
    as frozen as a dataclass of their own, equal only to their own kind, and they pickle
    (they cross to Dask workers and the language server's threads)."""
    import dataclasses
    import pickle

    from portfolio.diagnostics import REGISTRY
    from portfolio.spans import Span
    span = Span("x.folio", 1, 1, 1, 2)
    for code, kind in REGISTRY.items():
        d = kind(span, "m", ("n",))
        assert d.code == code and kind.__doc__ == kind.summary
        assert pickle.loads(pickle.dumps(d)) == d and hash(d) == hash(kind(span, "m", ("n",)))
        assert dataclasses.replace(d, message="q").message == "q" and d.message == "m"
        for attempt in (lambda: setattr(d, "message", "z"), lambda: setattr(d, "other", 1),
                        lambda: delattr(d, "notes")):
            with pytest.raises(dataclasses.FrozenInstanceError):
                attempt()
    a, b = REGISTRY["P201"], REGISTRY["P202"]
    assert a(span, "m") != b(span, "m")
