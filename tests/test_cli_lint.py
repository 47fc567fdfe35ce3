"""The ``portfolio lint`` and ``portfolio codes`` commands: output formats and exit codes.

Exit codes (docs/cli.md): 0 clean or warnings only, 1 errors, 2 unreadable
file or bad command line.
"""

from __future__ import annotations

import io
import json
import re
import shutil
from pathlib import Path

import pytest

from portfolio import cli
from portfolio.diagnostics import REGISTRY

ROOT = Path(__file__).resolve().parents[1]
CASES = ROOT / "tests" / "lint_cases"
EXAMPLES = sorted((ROOT / "examples").glob("*/*.folio"))
HEAD = re.compile(r"^(?P<path>.+):(?P<line>\d+):(?P<col>\d+): (?P<sev>error|warning): (?P<msg>.+)$")
CODE = re.compile(r"^    code  (?P<code>P\d{3})$")


def blocks(out: str):
    """Each diagnostic of a text report: (head match, code, the indented lines below it)."""
    found = []
    for ln in out.splitlines():
        if not ln.startswith(" "):
            found.append((HEAD.match(ln), None, []))
        else:
            found[-1][2].append(ln)
    result = []
    for head, _, below in found:
        code = CODE.match(below[0]) if below else None
        result.append((head, code["code"] if code else None, below[1:]))
    return result


def run(*argv):
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(list(argv), out=out, err=err)
    return code, out.getvalue(), err.getvalue()


# ---- exit codes ----------------------------------------------------------------

def test_clean_examples_exit_0():
    code, out, err = run("lint", *map(str, EXAMPLES))
    assert code == 0
    assert out == ""
    assert f"{len(EXAMPLES)} files checked: 0 errors, 0 warnings" in err


def test_warnings_only_exit_0():
    code, out, err = run("lint", str(CASES / "P508_unused_connection.folio"))
    assert code == 0
    [(head, c, _)] = blocks(out)
    assert head["sev"] == "warning" and c == "P508"
    assert "1 file checked: 0 errors, 1 warning" in err


def test_errors_exit_1():
    code, out, _ = run("lint", str(CASES / "P201_unknown_connection.folio"))
    assert code == 1
    [(head, c, _)] = blocks(out)
    assert head["sev"] == "error" and c == "P201"


def test_errors_in_one_of_several_files_exit_1():
    code, _, err = run("lint", str(EXAMPLES[0]), str(CASES / "P304_soc_bounds.folio"))
    assert code == 1
    assert "2 files checked: 5 errors, 0 warnings" in err


@pytest.mark.parametrize("name, why", [
    ("missing.folio", "no such file"),
    ("folder", "folder"),
    ("latin1.folio", "not UTF-8"),
    ("binary.folio", "binary"),
])
def test_unreadable_exit_2(tmp_path, name, why):
    target = tmp_path / name
    if name == "folder":
        target.mkdir()
    elif name == "latin1.folio":
        target.write_bytes("portfolio café\n".encode("latin-1"))
    elif name == "binary.folio":
        target.write_bytes(b"portfolio a\x00b\n")
    code, out, err = run("lint", str(target))
    assert code == 2
    [(m, c, _)] = blocks(out)
    assert m and c == "P001" and why in m["msg"]
    assert "1 unreadable" in err


def test_unreadable_wins_over_errors(tmp_path):
    code, _, _ = run("lint", str(CASES / "P201_unknown_connection.folio"), str(tmp_path / "nope.folio"))
    assert code == 2


@pytest.mark.parametrize("argv", [
    ["lint"],                                   # no file
    ["lint", "--format", "xml", "x.folio"],      # bad choice
    ["lint", "--bogus", "x.folio"],             # unknown option
    ["lnt", "x.folio"],                         # unknown command
    [],                                         # no command
])
def test_bad_command_line_exit_2(argv, capsys):
    code, out, _ = run(*argv)
    assert code == 2
    assert out == ""
    err = capsys.readouterr().err               # argparse writes its usage to the real stderr
    assert "portfolio" in err and "error" in err
    assert "Traceback" not in err


# ---- text format ---------------------------------------------------------------------

def test_text_format_points_at_the_source():
    path = CASES / "P201_unknown_connection.folio"
    code, out, _ = run("lint", str(path))
    [(m, c, below)] = blocks(out)
    assert m, out
    assert (m["path"], m["sev"], c) == (str(path), "error", "P201")
    line, col = int(m["line"]), int(m["col"])
    source = path.read_text("utf-8").split("\n")[line - 1]
    assert below[0].startswith("    text  ")
    shown = below[0][len("    text  "):]
    # the source line without its indentation, the misspelt word (4 long) between the markers
    assert shown.replace(">>", "", 1).replace("<<", "", 1) == source.strip()
    assert shown.count(">>") == 1 and shown.count("<<") == 1
    lead = len(source) - len(source.lstrip())
    assert shown.index(">>") == col - 1 - lead
    assert shown[shown.index(">>") + 2:shown.index("<<")] == "gird"
    assert "did you mean 'grid'?" in m["msg"]


def test_text_format_of_a_series_fault_shows_the_csv_line():
    code, out, _ = run("lint", str(CASES / "P403_bad_cells.folio"))
    assert code == 1
    found = blocks(out)
    assert [c for _, c, _ in found] == ["P403", "P403"]
    assert all(h["path"].endswith("bad_cell.csv") for h, _, _ in found)
    assert found[0][2][0] == "    text  2027-03-01T01:00Z,>>x<<"      # the CSV line, the bad cell marked
    assert found[1][2][0] == "    text  2027-03-01T02:00Z,>><<"       # an empty cell: the place marked
    assert all(any(ln.startswith("    note  series 'load' declared at") for ln in below)
               for _, _, below in found)


def test_text_format_notes_and_quiet():
    code, out, err = run("lint", "--quiet", str(CASES / "P202_duplicate_name.folio"))
    assert code == 1 and err == ""
    assert "\n    note  first declared at" in out
    assert "note:" not in out                       # the label replaces the note's own prefix


def test_text_format_every_case_has_well_formed_heads():
    """Every diagnostic of every case renders as 'path:line:col: severity: message',
    then its code on a line of its own, then labelled lines of at most 80
    columns (a note may overrun only by a word that cannot be broken)."""
    files = sorted(CASES.glob("*.folio"))
    code, out, _ = run("lint", "--quiet", *map(str, files))
    found = blocks(out)
    assert found and all(m for m, _, _ in found), [m for m, _, _ in found if not m][:3]
    labels = re.compile(r"^    (text  |note  |fix   |      )\S")     # or a wrapped note's next line
    for m, c, below in found:
        assert c in REGISTRY and REGISTRY[c].severity == m["sev"], (m.group(0), c)
        assert "[" + c + "]" not in m.group(0)
        for ln in below:
            assert labels.match(ln), ln
            assert len(ln) <= 80 or len(ln.split()) <= 2, ln        # over 80: one unbreakable word alone
        assert sum(ln.startswith("    text  ") for ln in below) <= 1


def test_text_format_retired_word_names_its_replacement():
    path = CASES / "P104_retired_inflow.folio"
    code, out, _ = run("lint", str(path))
    [(m, c, below)] = blocks(out)
    assert code == 1 and c == "P104" and (m["line"], m["col"]) == ("7", "3")
    assert "'supply'" in m["msg"]
    assert below[0].startswith("    text  >>inflow<< pv ")
    assert below[1:] == ["    fix   write 'supply' in place of 'inflow'"]


# ---- JSON format -----------------------------------------------------------------------

def test_json_format(tmp_path):
    files = [str(EXAMPLES[0]), str(CASES / "P304_soc_bounds.folio"), str(tmp_path / "gone.folio")]
    code, out, err = run("lint", "--format", "json", *files)
    assert code == 2
    doc = json.loads(out)
    assert set(doc) == {"files", "diagnostics"}
    assert [f["path"] for f in doc["files"]] == files
    assert [(f["errors"], f["warnings"], f["readable"]) for f in doc["files"]] == [(0, 0, True), (5, 0, True), (1, 0, False)]
    keys = {"path", "line", "column", "end_line", "end_column", "severity", "code", "message", "notes"}
    for d in doc["diagnostics"]:
        assert set(d) == keys
        assert d["code"] in REGISTRY and d["severity"] == REGISTRY[d["code"]].severity
        assert d["line"] >= 1 and d["column"] >= 1 and isinstance(d["notes"], list)
    assert [d["code"] for d in doc["diagnostics"]] == ["P304"] * 5 + ["P001"]
    assert [d["line"] for d in doc["diagnostics"][:5]] == [10, 11, 12, 13, 14]   # one storage a line


def test_json_agrees_with_text():
    path = str(CASES / "P205_wrong_kind.folio")
    _, text, _ = run("lint", path)
    _, js, _ = run("lint", "--format", "json", path)
    from_text = [(c, int(m["line"]), int(m["col"])) for m, c, _ in blocks(text)]
    from_json = [(d["code"], d["line"], d["column"]) for d in json.loads(js)["diagnostics"]]
    assert from_text == from_json and len(from_json) == 5


def test_json_clean_is_empty_list():
    code, out, _ = run("lint", "--format", "json", str(EXAMPLES[0]))
    assert code == 0
    assert json.loads(out)["diagnostics"] == []


# ---- codes ------------------------------------------------------------------------------

def test_codes_lists_every_code():
    code, out, _ = run("codes")
    assert code == 0
    listed = [ln.split()[0] for ln in out.splitlines()]
    assert listed == sorted(REGISTRY)
    for ln in out.splitlines():
        c = ln.split()[0]
        assert REGISTRY[c].severity in ln and REGISTRY[c].summary in ln


def test_codes_markdown():
    code, out, _ = run("codes", "--format", "markdown")
    assert code == 0
    assert out == cli.codes_markdown()
    rows = [ln for ln in out.splitlines() if ln.startswith("| P")]
    assert [r.split("|")[1].strip() for r in rows] == sorted(REGISTRY)


def test_docs_table_is_generated_from_the_registry():
    """docs/diagnostics.md holds exactly the table `portfolio codes --format markdown` prints."""
    doc = (ROOT / "docs" / "diagnostics.md").read_text("utf-8")
    table = cli.codes_markdown()
    assert table in doc, "regenerate the table in docs/diagnostics.md with 'portfolio codes --format markdown'"
    doc_rows = [ln for ln in doc.splitlines() if re.match(r"^\|\s*P\d{3}\s*\|", ln)]
    assert doc_rows == [ln for ln in table.splitlines() if ln.startswith("| P")]


# ---- the same file, rewritten in place, is shown fresh --------------------------------------

def test_source_line_follows_a_rewritten_file(tmp_path):
    target = tmp_path / "p.folio"
    shutil.copy(CASES / "P201_unknown_connection.folio", target)
    _, first, _ = run("lint", str(target))
    text = target.read_text("utf-8").replace("site yard at gird {", "site  yard  at  gird {")
    target.write_text(text, "utf-8")
    _, second, _ = run("lint", str(target))
    assert "    text  site yard at >>gird<< {" in first
    assert "    text  site  yard  at  >>gird<< {" in second
