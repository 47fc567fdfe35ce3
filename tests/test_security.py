"""Files the tool reads that it did not write itself cannot run code."""

from __future__ import annotations

import hashlib
import os
import pickle
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


class _Plant:
    """Unpickling this writes a marker file: proof that a pickle was loaded."""

    def __init__(self, marker: str):
        self.marker = marker

    def __reduce__(self):
        return (open, (self.marker, "w"))


def test_a_planted_parse_table_cache_is_never_loaded(tmp_path):
    # Where earlier versions kept Lark's parse-table cache (a pickle), keyed by
    # the grammar's hash: a file planted there ran its code on the next lint.
    cache = tmp_path / "cache" / "portfolio"
    cache.mkdir(parents=True)
    marker = tmp_path / "pwned"
    grammar = (ROOT / "grammar" / "portfolio.lark").read_text()
    digest = hashlib.sha256(grammar.encode()).hexdigest()[:16]
    # Lark's layout: a hash line, then a pickle that Lark loads before it
    # compares the hash (so any hash will do)
    payload = b"0" * 64 + b"\n" + pickle.dumps(_Plant(str(marker)))
    for name in (f"grammar-{digest}.lark-cache", "grammar.lark-cache", "parser.pickle"):
        (cache / name).write_bytes(payload)
    env = dict(os.environ, XDG_CACHE_HOME=str(tmp_path / "cache"), HOME=str(tmp_path))
    demo = ROOT / "examples" / "kestrel_bay" / "kestrel_bay.folio"
    done = subprocess.run([sys.executable, "-m", "portfolio.cli", "lint", str(demo)],
                          capture_output=True, text=True, env=env, timeout=120)
    assert done.returncode == 0, done.stderr
    assert not marker.exists()
    assert sorted(p.name for p in cache.iterdir()) == sorted(
        [f"grammar-{digest}.lark-cache", "grammar.lark-cache", "parser.pickle"])
