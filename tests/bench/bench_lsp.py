"""Benchmark: the language server's diagnostics after a change (not collected by pytest).

    python tests/bench/bench_lsp.py [--storages 1000] [--changes 10]

Issue target: diagnostics for a 1,000-storage file within 1 s of a change.
The file is bench_lint.py's (storages from a preset, sites with a demand and
a supply read from a CSV).  The real server runs as a process
(``python -m portfolio lsp``, tests/lsp_client.py over its pipes); each
change edits one storage's energy, and the time is from sending
``didChange`` to receiving the ``publishDiagnostics`` of that version, so
it includes the server's debounce (``DEBOUNCE_S``) and the pipes.  Beside
it, ``lint_file`` on the same file in this process, for the ratio.
"""

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from bench_lint import make, time_lint  # noqa: E402
from lsp_client import LspClient  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--storages", type=int, default=1000)
    ap.add_argument("--sites", type=int, default=20)
    ap.add_argument("--changes", type=int, default=10)
    args = ap.parse_args(argv)
    from portfolio.lsp.server import DEBOUNCE_S

    with tempfile.TemporaryDirectory() as tmp:
        path = make(args.storages, args.sites, Path(tmp))
        text = path.read_text()
        size_kib = path.stat().st_size // 1024
        lint_s = time_lint(path)
        client = LspClient(cwd=HERE.parent.parent)
        try:
            client.initialize(Path(tmp))
            uri = path.as_uri()
            t = time.perf_counter()
            client.notify("textDocument/didOpen", {"textDocument": {"uri": uri, "languageId": "folio",
                                                                    "version": 1, "text": text}})
            got = client.wait_for("textDocument/publishDiagnostics", lambda p: p["uri"] == uri)
            open_s = time.perf_counter() - t
            assert got["diagnostics"] == [], got["diagnostics"][:3]
            line = next(i for i, x in enumerate(text.split("\n")) if "energy 3 MWh" in x)
            col = text.split("\n")[line].index("energy 3 MWh") + len("energy ")
            samples = []
            for k in range(args.changes):
                version = 2 + k
                change = {"range": {"start": {"line": line, "character": col},
                                    "end": {"line": line, "character": col + 1}}, "text": str(3 + k % 5)}
                t = time.perf_counter()
                client.notify("textDocument/didChange", {"textDocument": {"uri": uri, "version": version},
                                                         "contentChanges": [change]})
                got = client.wait_for("textDocument/publishDiagnostics",
                                      lambda p: p["uri"] == uri and p.get("version") == version)
                samples.append(time.perf_counter() - t)
                assert got["diagnostics"] == []
        finally:
            code = client.close()
    print(f"{args.storages} storages, {size_kib} KiB; server exit code {code}")
    print("| measure | seconds |")
    print("|---|---:|")
    print(f"| lint_file in process (median of 5) | {lint_s:.3f} |")
    print(f"| didOpen -> diagnostics (the first analysis) | {open_s:.3f} |")
    print(f"| didChange -> diagnostics, median of {args.changes} (includes the {DEBOUNCE_S} s debounce) "
          f"| {statistics.median(samples):.3f} |")
    print(f"| didChange -> diagnostics, slowest | {max(samples):.3f} |")
    print(f"| median change ÷ in-process lint | {statistics.median(samples) / lint_s:.2f} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
