"""``portfolio fmt``: the canonical layout keeps the model, the comments and itself.

* Every example, every lint case that parses, and hypothesis-made files (the
  examples with their layout scrambled, numbers and units respelt; and the
  fuzz tests' mutated examples) are formatted; formatting again changes
  nothing, the checked model is the same (its fingerprint: every field but
  the source spans), the findings have the same codes, and every comment is
  still there, in order, with its text.
* A few hand-written files pin the layout's rules (docs/fmt.md).
* The command: ``--check`` exits 0, 1 or 2; ``--diff`` writes nothing; a
  file with a syntax error is reported as lint reports it and left untouched.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import os
import re
from collections import Counter
from datetime import datetime
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from portfolio import cli
from portfolio.api import lint_text
from portfolio.diagnostics import Sink
from portfolio.fmt import WIDTH, format_source, number
from portfolio.spans import Span
from portfolio.syntax import lines_of, parse, parser
from test_fuzz import mutated      # the fuzz tests' mutations of the examples

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = sorted((ROOT / "examples").glob("*/*.folio"))


def _utf8(path: Path) -> bool:
    try:
        path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError:
        return False       # the P001 cases: lint and fmt alike read no further
    return True


CASES = [p for p in sorted((ROOT / "tests" / "lint_cases").glob("*.folio")) if _utf8(p)]
FAST = dict(deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


# ---- what must not change ---------------------------------------------------------------

def _plain(x):
    """A model as plain data, without the spans (they move when the layout does)."""
    if dataclasses.is_dataclass(x):
        return {f.name: _plain(getattr(x, f.name)) for f in dataclasses.fields(x)
                if f.name not in ("span", "spans")}
    if isinstance(x, Span):
        return None
    if isinstance(x, np.ndarray):
        return [repr(float(v)) for v in x.ravel()]
    if isinstance(x, dict) or hasattr(x, "items"):
        return {str(k): _plain(v) for k, v in sorted(x.items(), key=lambda kv: str(kv[0]))}
    if isinstance(x, (list, tuple, set, frozenset)):
        return [_plain(v) for v in x]
    if isinstance(x, float):
        return repr(x)
    if isinstance(x, datetime):
        return x.isoformat()
    return x if isinstance(x, (str, int, bool, type(None))) else repr(x)


def fingerprint(p) -> str:
    """A hash of the checked model: every value, name and rule, but no source position."""
    return hashlib.sha256(json.dumps(_plain(p), sort_keys=True).encode()).hexdigest()


_COMMENT_OR_STRING = re.compile(r'"[^"\n]*"|#[^\n]*')


def comments(text: str):
    """The comments of a file, read on their own (a '#' inside a quoted text is no comment)."""
    return [m.group(0).rstrip() for m in _COMMENT_OR_STRING.finditer(lines_of(text)) if m.group(0)[0] == "#"]


def _codes(result):
    return Counter(d.code for d in result.diagnostics)


def assert_keeps(text: str, path: Path):
    """Format ``text`` (as if at ``path``) and check all that must hold; the formatted text."""
    first = format_source(text, str(path))
    assert first.ok, [d.message for d in first.diagnostics]
    again = format_source(first.text, str(path))
    assert again.text == first.text, "formatting twice changed the text"
    assert not again.changed
    assert comments(first.text) == comments(text)
    before = lint_text(text, str(path), path.parent)
    after = lint_text(first.text, str(path), path.parent)
    assert _codes(after) == _codes(before)
    assert (before.portfolio is None) == (after.portfolio is None)
    if before.portfolio is not None:
        assert fingerprint(after.portfolio) == fingerprint(before.portfolio)
    return first.text


def test_the_fingerprint_sees_a_changed_value():
    """The model comparison can fail: one changed number gives another fingerprint."""
    path = ROOT / "examples" / "kestrel_bay" / "kestrel_bay.folio"
    text = path.read_text("utf-8")
    a = lint_text(text, str(path), path.parent).portfolio
    b = lint_text(text.replace("energy 40 MWh", "energy 41 MWh"), str(path), path.parent).portfolio
    assert fingerprint(a) != fingerprint(b)


# ---- over every example and lint case -------------------------------------------------

@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.stem)
def test_examples(path):
    text = path.read_text("utf-8")
    out = assert_keeps(text, path)
    assert lint_text(out, str(path), path.parent).portfolio is not None
    assert all(len(line) <= WIDTH or "#" in line for line in out.splitlines())


def test_every_example_is_in_the_layout():
    """The repository's examples are written in the canonical layout: ``fmt --check``
    over all of them exits 0 (and names any that would change)."""
    assert EXAMPLES
    code, _, err = _cli(["fmt", "--check", *map(str, EXAMPLES)])
    assert code == 0, err
    assert f"0 would reformat, {len(EXAMPLES)} unchanged" in err


@pytest.mark.parametrize("path", CASES, ids=lambda p: p.stem)
def test_lint_cases(path):
    text = path.read_bytes().decode("utf-8-sig")
    sink = Sink()
    if parse(lines_of(text), str(path), sink) is None:
        # not laid out: reported with the same findings as lint gives
        got = format_source(text, str(path))
        assert not got.ok and got.text is None
        assert _codes(got) == _codes(lint_text(text, str(path), path.parent))
        return
    assert_keeps(text, path)


# ---- hypothesis: the layout does not depend on the layout --------------------------------

SPACES = [" ", "  ", "\t", "\n", "\n    ", " \n\t", "\f "]
RESPELL = {"number": lambda v: [v, "+" + v, "0" + v, v + ("" if "." in v else ".") + "0", v + "e0", v + "E+00"]}


@st.composite
def scrambled(draw):
    """An example with other spaces and line breaks between its tokens (blank lines and
    comments as they were), numbers spelt otherwise and 'h' written 'hr'."""
    path = draw(st.sampled_from(EXAMPLES))
    text = lines_of(path.read_text("utf-8"))
    toks = list(parser().parse_interactive(text).iter_parse())
    out, prev = [], 0
    for t in toks:
        gap = text[prev:t.start_pos]
        if "#" in gap or gap.count("\n") >= 2:
            out.append(gap)
        elif gap or draw(st.booleans()):
            out.append(draw(st.sampled_from(SPACES)))
        value = str(t)
        if t.type == "NUMBER" and re.fullmatch(r"\d+(\.\d+)?", value):
            value = draw(st.sampled_from(RESPELL["number"](value)))
        elif t.type == "UNIT" and value == "h":
            value = draw(st.sampled_from(["h", "hr"]))
        out.append(value)
        prev = t.end_pos
    out.append(text[prev:])
    return path, text, "".join(out)


@settings(max_examples=40, **FAST)
@given(scrambled())
def test_scrambled_examples_format_as_the_examples(case):
    path, text, scrambled_text = case
    assert format_source(scrambled_text, str(path)).text == format_source(text, str(path)).text
    assert_keeps(scrambled_text, path)


@settings(max_examples=60, **FAST)
@given(st.data())
def test_mutated_examples(data):
    """The fuzz tests' mutations of the examples: those that parse keep everything."""
    path, text = data.draw(mutated())
    if parse(lines_of(text), str(path), Sink()) is None:
        assert not format_source(text, str(path)).ok
        return
    assert_keeps(text, path)


@settings(max_examples=200, **FAST)
@given(st.from_regex(r"[-+]?(\d{1,5}(\.\d{0,5})?|\.\d{1,5})([eE][-+]?\d{1,4})?", fullmatch=True))
def test_a_respelt_number_has_the_same_value(text):
    plain = number(text)
    assert float(plain) == float(text)
    assert number(plain) == plain
    assert not plain.startswith("+") and "E" not in plain


# ---- the layout's rules (docs/fmt.md), on small files ---------------------------------------

def fmt(text: str) -> str:
    got = format_source(text, "t.folio")
    assert got.ok
    return got.text


def test_blocks_indent_and_one_item_blocks_stay_inline():
    text = ("site s at c {storage a like p {energy 6 MWh} storage b {energy 1 MWh charge max 1 MW}\n"
            "storage e {} }")
    assert fmt(text) == ("site s at c {\n"
                         "  storage a like p { energy 6 MWh }\n"
                         "  storage b {\n"
                         "    energy 1 MWh\n"
                         "    charge max 1 MW\n"
                         "  }\n"
                         "  storage e {}\n"
                         "}\n")


def test_trailing_comments_align_and_own_line_comments_keep_their_place():
    text = ("# head\n\n\n\nconnection c {   # the grid\n  export max 8 MW # out\n"
            "  import max 10 MW      # in\n\n  # about selling\n  sell at 5 per MWh\n"
            "  # last words\n}\n\n\n")
    assert fmt(text) == ("# head\n\n"
                         "connection c {  # the grid\n"
                         "  export max 8 MW   # out\n"
                         "  import max 10 MW  # in\n"
                         "\n"
                         "  # about selling\n"
                         "  sell at 5 per MWh\n"
                         "  # last words\n"
                         "}\n")


def test_a_comment_inside_a_statement_breaks_it_there():
    text = "horizon start 2027-01-01T00:00 # from new year\n length 24 h step 1 h"
    assert fmt(text) == ("horizon start 2027-01-01T00:00  # from new year\n"
                         "    length 24 h step 1 h\n")


def test_spelling_spacing_and_long_lists():
    values = " ".join(str(v) for v in range(100))
    out = fmt(f"price p values [{values}] per MWh\nconnection c {{ sell at p minus +2.50 per MWh"
              f" export max 5 % import max 5 percent }} portfolio x horizon length 24 hr step .5 hr start 2027-01-01")
    lines = out.splitlines()
    assert lines[0].startswith("price p values [0 1 2")
    assert all(len(line) <= WIDTH for line in lines)
    assert all(line.startswith("    ") for line in lines[1:lines.index("connection c {")])
    assert "  sell at p minus 2.5 per MWh" in lines
    assert "  export max 5%" in lines and "  import max 5 percent" in lines
    assert lines[-1] == "horizon length 24 h step 0.5 h start 2027-01-01"


def test_an_empty_file_and_a_file_of_comments():
    assert fmt("") == ""
    assert fmt("\n\n  # only this   \n\n") == "# only this\n"


def test_windows_line_ends_become_plain():
    assert fmt("portfolio x\r\nhorizon length 1 h\r\n") == "portfolio x\nhorizon length 1 h\n"


# ---- the command ---------------------------------------------------------------------------

def _cli(argv):
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(argv, out=out, err=err)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture
def files(tmp_path):
    messy = tmp_path / "messy.folio"
    messy.write_text("portfolio   x   # the name\nconnection c{export max 8 MW}\n")
    tidy = tmp_path / "tidy.folio"
    tidy.write_text("portfolio x  # the name\nconnection c { export max 8 MW }\n")
    broken = tmp_path / "broken.folio"
    broken.write_text("site a at b {\n  export max 5 MW\n")
    return messy, tidy, broken


def test_check_exit_codes(files):
    messy, tidy, broken = files
    before = {p: p.read_bytes() for p in files}
    assert _cli(["fmt", "--check", str(tidy)])[0] == 0
    code, _, err = _cli(["fmt", "--check", str(tidy), str(messy)])
    assert code == 1 and "would reformat" in err and str(messy) in err
    assert _cli(["fmt", "--check", str(tidy), str(messy), str(broken)])[0] == 2
    assert {p: p.read_bytes() for p in files} == before     # --check writes nothing


def test_diff_prints_and_writes_nothing(files):
    messy, tidy, _ = files
    before = messy.read_bytes()
    code, out, _ = _cli(["fmt", "--diff", str(messy), str(tidy)])
    assert code == 0
    assert "-portfolio   x   # the name" in out and "+portfolio x  # the name" in out
    assert messy.read_bytes() == before


def test_writes_the_layout_and_keeps_the_permissions(files):
    messy, tidy, _ = files
    os.chmod(messy, 0o640)
    code, _, err = _cli(["fmt", str(messy), str(tidy)])
    assert code == 0 and "reformatted" in err
    assert messy.read_text() == tidy.read_text()
    assert messy.stat().st_mode & 0o777 == 0o640
    assert [p.name for p in messy.parent.iterdir() if p.name.startswith(".")] == []   # no temporary left
    assert _cli(["fmt", "--check", str(messy)])[0] == 0


def test_a_syntax_error_is_reported_and_the_file_untouched(files):
    _, _, broken = files
    stat = broken.stat()
    before = broken.read_bytes()
    code, _, err = _cli(["fmt", str(broken)])
    assert code == 2
    assert f"{broken}:1:13: error:" in err and "P102" in err      # as lint reports it
    assert broken.read_bytes() == before and broken.stat().st_mtime_ns == stat.st_mtime_ns
    assert _cli(["lint", str(broken)])[1].splitlines()[0] in err


def test_an_unreadable_file(tmp_path):
    code, _, err = _cli(["fmt", str(tmp_path / "missing.folio")])
    assert code == 2 and "P001" in err


def test_a_link_is_followed(files, tmp_path):
    messy, tidy, _ = files
    link = tmp_path / "link.folio"
    link.symlink_to(messy)
    assert _cli(["fmt", str(link)])[0] == 0
    assert link.is_symlink() and messy.read_text() == tidy.read_text()
