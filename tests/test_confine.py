"""The confined mode (--confine): no series file outside the portfolio's folder."""

from __future__ import annotations

import io
import os

import pytest

from portfolio.api import lint_file
from portfolio.cli import main

TEXT = ('portfolio c\nhorizon start 2027-01-01T00:00 length 2 h step 1 h zone "UTC"\n'
        'price p from "{path}" column "a"\nconnection g {{ sell at p buy at p }}\n')
CSV = "time,a\n2027-01-01T00:00,1\n2027-01-01T01:00,2\n"


@pytest.fixture()
def layout(tmp_path):
    inside = tmp_path / "portfolio"
    (inside / "data").mkdir(parents=True)
    (inside / "data" / "p.csv").write_text(CSV)
    (tmp_path / "secret.csv").write_text(CSV)
    os.symlink(tmp_path / "secret.csv", inside / "data" / "link.csv")
    return tmp_path, inside


@pytest.mark.parametrize("written, why", [
    ("{root}/secret.csv", "absolute path"),
    ("../secret.csv", "'..'"),
    ("~/secret.csv", "'~'"),
    ("data/link.csv", "symbolic link"),
])
def test_a_path_leaving_the_folder_is_refused_only_when_confined(layout, written, why):
    root, inside = layout
    src = inside / "c.folio"
    src.write_text(TEXT.format(path=written.format(root=root)))
    confined = lint_file(src, confine=True)
    assert [d.code for d in confined.diagnostics] == ["P412"] and why in confined.diagnostics[0].message
    assert confined.diagnostics[0].span.line == 3                     # the series statement
    if not written.startswith("~"):
        assert lint_file(src).ok                                      # the default reads it


def test_a_file_inside_is_read_in_confined_mode(layout):
    _, inside = layout
    src = inside / "c.folio"
    src.write_text(TEXT.format(path="data/p.csv"))
    assert lint_file(src, confine=True).ok


def test_the_commands_take_the_option(layout, tmp_path):
    root, inside = layout
    src = inside / "c.folio"
    src.write_text(TEXT.format(path="../secret.csv"))
    for argv in (["lint", str(src), "--confine"],
                 ["dispatch", str(src), "--out", str(tmp_path / "o"), "--confine"],
                 ["graph", str(src), "--out", str(tmp_path / "n.dot"), "--confine"]):
        err, out = io.StringIO(), io.StringIO()
        assert main(argv, out=out, err=err) == 1, argv
        assert "P412" in out.getvalue() + err.getvalue()
    assert not (tmp_path / "o").exists() and not (tmp_path / "n.dot").exists()
