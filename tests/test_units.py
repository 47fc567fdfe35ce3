"""portfolio.units: the vocabulary's table against pint, and pint imported only when needed.

pint (https://pint.readthedocs.io) is the owner of truth: the table in
portfolio/units_table.py was computed by it, and here pint computes every
entry again, for every pair of words of units.txt, to the last bit.
"""

from __future__ import annotations

import math
import subprocess
import sys

import pytest

from portfolio import units as U
from portfolio import units_table

WORDS = [None] + sorted(units_table.WORDS)


def _outcome(fn, unit, per, dims):
    try:
        dim, f = fn(unit, per, dims)
        return ("ok", dim.key, f)
    except U.UnitProblem as p:
        return (p.kind, str(p))


@pytest.mark.parametrize("dims", [U.ALL, (U.POWER,), (U.ENERGY, U.FRACTION), (U.PRICE,), (U.TIME,)],
                         ids=["all", "power", "energy-or-fraction", "price", "time"])
def test_the_table_gives_what_pint_gives_for_every_pair_of_words(dims):
    seen = 0
    for unit in WORDS:
        for per in WORDS:
            table = _outcome(U.factor.__wrapped__, unit, per, dims)
            pint = _outcome(U.pint_factor, unit, per, dims)
            assert table == pint, (unit, per)
            seen += table[0] == "ok"
    assert seen > 0


def test_the_table_is_up_to_date_with_units_txt():
    words, factors = U.build_table()
    assert words == units_table.WORDS, "run: python -m portfolio.units"
    assert {k: v for k, v in factors.items() if v[0] is not None} == units_table.FACTORS
    assert all(math.isnan(f) for d, f in factors.values() if d is None)


def test_every_suggested_unit_is_in_the_vocabulary():
    assert set(U.SUGGESTED) <= set(units_table.WORDS)
    assert U.known_units() == list(U.SUGGESTED)


def test_a_plural_goes_to_pint_and_a_typing_error_is_unknown():
    assert U.factor("hours", None, (U.TIME,)) == (U.TIME, 1.0)
    with pytest.raises(U.UnitProblem) as e:
        U.factor("MWW", None, (U.POWER,))
    assert e.value.kind == "unknown" and str(e.value) == "MWW"
    with pytest.raises(U.UnitProblem) as e:
        U.factor("MW", "h", (U.POWER,))
    assert e.value.kind == "dimension" and str(e.value) == U.RAMP.words


def _imports_pint(code: str) -> bool:
    out = subprocess.run([sys.executable, "-c", code + "\nimport sys; print('pint' in sys.modules)"],
                         capture_output=True, text=True, check=True).stdout.split()
    return out[-1] == "True"


def test_importing_the_units_does_not_import_pint():
    assert not _imports_pint("import portfolio.units")


def test_a_word_of_the_table_does_not_import_pint_and_another_word_does():
    ask = "from portfolio import units as U\nU.factor({!r}, {!r}, U.ALL)"
    assert not _imports_pint(ask.format("kW", "min"))
    assert not _imports_pint(ask.format("%", None))
    assert _imports_pint(ask.format("minutes", None))


def test_the_language_guide_lists_the_vocabulary_by_dimension():
    """docs/language.md's Units table names every symbol of units.txt, each under its dimension."""
    import re
    from pathlib import Path

    ureg = U.registry()
    doc = (Path(__file__).resolve().parents[1] / "docs" / "language.md").read_text(encoding="utf-8")
    rows = {"power": U.POWER, "energy": U.ENERGY, "duration": U.TIME, "percentage": U.FRACTION,
            "volume": U.VOLUME}
    listed = set()
    for label, dim in rows.items():
        row = re.search(rf"^\| {label} \| ([^|]*) \|", doc, re.M)
        assert row, label
        words = re.findall(r"`([^`]+)`", row.group(1))
        for w in words:
            assert U.factor(w, None, (dim,))[0] is dim, (label, w)
        listed.update(words)
    symbols = {ureg._units[name].symbol or name for name in set(units_table.WORDS.values())}
    assert symbols == listed
