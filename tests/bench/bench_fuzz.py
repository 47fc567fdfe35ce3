"""A long fuzz run of the parser and the series reader (not collected by pytest).

    python tests/bench/bench_fuzz.py [--examples 5000] [--seed 0]

The strategies of tests/test_fuzz.py (text) and tests/test_fuzz_csv.py
(damaged CSVs), with many more examples than the default test run takes.
A failure prints Hypothesis's smallest failing input and exits 1.
"""

import argparse
import os
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE.parent.parent), str(HERE.parent)]

from hypothesis import HealthCheck, given, seed, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

import test_fuzz as T  # noqa: E402
import test_fuzz_csv as C  # noqa: E402
from portfolio.api import lint_text  # noqa: E402


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--examples", type=int, default=5000)
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()
    opts = dict(max_examples=args.examples, deadline=None, database=None,
                suppress_health_check=list(HealthCheck))

    @seed(args.seed)
    @settings(**opts)
    @given(st.text(max_size=2000))
    def text(t):
        T.check_result(lint_text(t, "fuzz.folio"), t, "fuzz.folio")

    @seed(args.seed)
    @settings(**opts)
    @given(C.damaged())
    def csvs(case):
        with tempfile.TemporaryDirectory() as d:
            C.lint_damaged(Path(d), case)

    failed = False
    for name, run in (("random text", text), ("damaged CSVs", csvs)):
        try:
            run()
            print(f"{name}: {args.examples} examples, no failure", flush=True)
        except Exception as exc:      # noqa: BLE001 - the finding is printed
            failed = True
            print(f"{name}: FAILED: {exc!r}", flush=True)
    sys.exit(1 if failed else 0)


if __name__ == "__main__":
    os.environ.setdefault("PYTHONHASHSEED", "0")
    main()
