"""The ``portfolio`` command.  The only module that prints.

``main(argv)`` returns the exit code, so tests can call it directly.  Exit
codes (docs/cli.md): 0 clean or warnings only / schedule found; 1 lint errors;
2 usage or unreadable file; 3 infeasible; 4 unbounded; 5 no schedule within
the limits; 6 solver failure.
"""

from __future__ import annotations

import argparse
import errno
import os
import re
import sys
from pathlib import Path
from typing import List, Optional

from . import __version__
from .diagnostics import EXIT_ERRORS, EXIT_OK, EXIT_USAGE, REGISTRY, Report
from .cli_output import (Progress, StudyProgress, explain_failure, print_assets, print_marginal,
                         print_result, status_line, width_of, wrapped)
from .render import format_json, format_text, printable

# Heavy modules (the front end, pandas, Pyomo, HiGHS) are imported where they
# are used, so that `--help` is quick and a Ctrl-C during start-up is handled.


class _Parser(argparse.ArgumentParser):
    _argv: List[str] = []

    def parse_known_args(self, args=None, namespace=None):
        self._argv = list(sys.argv[1:] if args is None else args)   # for error(): what was typed
        return super().parse_known_args(args, namespace)

    def error(self, message):  # exit code 2, one line, no traceback
        if self.prog.endswith(" dispatch") and "required" in message and "FILE" in message:
            took = _windows_took(self._argv)
            if took is not None and not _duration_like(took):
                message = _windows_took_file(took)
        self.print_usage(sys.stderr)
        self.exit(EXIT_USAGE, f"portfolio: error: {message}\n")


# ``--windows`` takes an optional value, so ``--windows FILE`` reads FILE as COMMIT[/OVERLAP]
_DURATION_START = re.compile(r"\s*[0-9.]")


def _windows_took(argv: List[str]) -> Optional[str]:
    """The word ``--windows`` took as its value from ``argv`` (the next word), or None."""
    for i, word in enumerate(argv[:-1]):
        if word == "--":
            break
        if word == "--windows" and not argv[i + 1].startswith("-"):
            return argv[i + 1]
    return None


def _duration_like(text: str) -> bool:
    return bool(_DURATION_START.match(text)) and not text.lower().endswith(".folio") \
        and not os.path.isfile(text)


def _windows_took_file(took: str, file_left: bool = False) -> str:
    what = "but that is a file, not a duration" if file_left else "so no FILE was left"
    return (f"--windows took '{took}' as its value (COMMIT[/OVERLAP]), {what}: put FILE before "
            f"--windows (portfolio dispatch FILE --out DIR --windows), or give the windows with "
            f"'=' (--windows=1d/1d)")


def _checked(convert, ok, need: str):
    """An argparse type: ``convert`` the text, then require ``ok(value)``."""
    def parse(text: str):
        try:
            v = convert(text)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"'{text}' is not a {'whole number' if convert is int else 'number'}") from None
        if not ok(v):
            raise argparse.ArgumentTypeError(f"'{text}' must be {need}")
        return v
    return parse


_positive_float = _checked(float, lambda v: v > 0, "above zero")
_gap = _checked(float, lambda v: 0 <= v < 1, "a fraction from 0 to below 1 (0.0001 = 0.01 %)")
MAX_THREADS = 256     # as portfolio.solve.MAX_THREADS (not imported here: start-up stays light)
_threads = _checked(int, lambda v: 1 <= v <= MAX_THREADS, f"from 1 to {MAX_THREADS}")
_cases = _checked(int, lambda v: v >= 1, "from 1 up")


_CONFINE_HELP = ("read no file outside the portfolio file's folder (no absolute paths, '..' or "
                 "links leading out): for CI and services")


def build_parser() -> argparse.ArgumentParser:
    ap = _Parser(prog="portfolio", description="Dispatch several linked energy-storage assets from a .folio file.")
    ap.add_argument("--version", action="version", version=f"portfolio {__version__}")
    sub = ap.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    lint = sub.add_parser("lint", help="check portfolio files and report problems")
    lint.add_argument("files", nargs="+", metavar="FILE")
    lint.add_argument("--format", choices=("text", "json"), default="text")
    lint.add_argument("--quiet", "-q", action="store_true", help="print only the problems, no summary")
    lint.add_argument("--confine", action="store_true", help=_CONFINE_HELP)

    fm = sub.add_parser("fmt", help="rewrite portfolio files in the canonical layout (docs/fmt.md)")
    fm.add_argument("files", nargs="+", metavar="FILE", help="files to lay out; '-' reads standard input "
                    "and writes the result to standard output")
    fm.add_argument("--check", action="store_true",
                    help="write nothing; exit 1 when a file is not in the canonical layout (for CI)")
    fm.add_argument("--diff", action="store_true", help="write nothing; print what would change as a unified diff")

    sub.add_parser("lsp", help="run the language server over standard input and output (docs/lsp.md)")

    codes = sub.add_parser("codes", help="list every diagnostic code")
    codes.add_argument("--format", choices=("text", "markdown"), default="text")

    d = sub.add_parser("dispatch", help="find the best schedule and write it per asset")
    d.add_argument("file", metavar="FILE")
    d.add_argument("--out", required=True, metavar="DIR", help="output folder (replaced atomically)")
    d.add_argument("--time-limit", type=_positive_float, metavar="S", help="stop after S seconds with the best schedule so far")
    d.add_argument("--gap", type=_gap, metavar="R", help="relative MIP gap to stop at (default 0.0001 = 0.01 %%)")
    d.add_argument("--threads", type=_threads, metavar="N", help="solver threads (default: HiGHS's choice)")
    d.add_argument("--no-warm-start", action="store_true",
                   help="skip the first schedule from the LP relaxation before the search")
    d.add_argument("--windows", nargs="?", const="", metavar="COMMIT[/OVERLAP]",
                   help="dispatch window by window, each committing COMMIT and seeing OVERLAP more "
                        "(default 1d/1d; durations such as 24h, 1d, 90min), with the whole horizon's "
                        "LP bound; see docs/windows.md")
    d.add_argument("--window-end", metavar="RULE", default=None,
                   help="how a window that is not the last treats its end: 'value' what is left at the "
                        "LP's marginal value (default), reach the LP's state of charge ('target'), or "
                        "end exactly there ('pin', the default with --workers); with --foresight: "
                        "'hold' what it started with (default), 'free', or a money value per MWh")
    d.add_argument("--workers", type=_threads, metavar="N", default=None,
                   help="with --windows: solve N windows at once in N processes (ends pinned)")
    d.add_argument("--foresight", metavar="DURATION", default=None,
                   help="limited foresight: each window sees only DURATION ahead (e.g. 48h) and "
                        "commits --commit of it; see docs/windows.md")
    d.add_argument("--commit", metavar="DURATION", default=None,
                   help="with --foresight: the hours each window keeps (default 1d)")
    d.add_argument("--bound", choices=("auto", "whole", "split"), default=None,
                   help="with --windows/--foresight: where the bound comes from: the whole "
                        "horizon's LP ('whole'), or pieces that never hold the whole horizon at once "
                        "('split', for horizons too long for memory); 'auto' (default) splits above "
                        "200,000 storage-steps; see docs/windows.md")
    d.add_argument("--whole", action="store_true",
                   help="one MILP over the whole horizon, even where windows are the default "
                        "(above 31 days with binary rules; docs/windows.md)")
    d.add_argument("--marginal-values", action="store_true",
                   help="also value one more MW of every power limit and one more MWh of every "
                        "storage's upper state of charge, per step, with the on/off decisions held "
                        "(marginal_values.csv; see docs/marginal-values.md)")
    d.add_argument("--parquet", action="store_true", help="also write Parquet files beside the CSVs")
    d.add_argument("--quiet", "-q", action="store_true", help="print only the status line")
    d.add_argument("--confine", action="store_true", help=_CONFINE_HELP)
    d.add_argument("--report", action="store_true",
                   help="also write report.html into the output folder (see 'portfolio report')")

    sd = sub.add_parser("study", help="run every case of a study declared in the file, on Dask")
    sd.add_argument("file", metavar="FILE")
    sd.add_argument("study", nargs="?", metavar="STUDY", help="the study to run (needed when the file has several)")
    sd.add_argument("--out", required=True, metavar="DIR",
                    help="study folder: one folder a case, cases.csv/.parquet, plots; a re-run resumes")
    sd.add_argument("--scheduler", metavar="ADDRESS",
                    help="an existing Dask scheduler (tcp://host:8786); default: a local cluster on 127.0.0.1")
    sd.add_argument("--workers", type=_threads, metavar="N",
                    help="local cluster only: worker processes (default: cores); not with "
                         "--scheduler, whose own workers run the cases")
    sd.add_argument("--schedules", action="store_true", help="also write each case's full schedule folder")
    sd.add_argument("--time-limit", type=_positive_float, metavar="S", help="solver seconds per case")
    sd.add_argument("--gap", type=_gap, metavar="R", help="relative MIP gap per case (default 0.0001)")
    sd.add_argument("--threads", type=_threads, metavar="N", help="HiGHS threads per case (default 1)")
    sd.add_argument("--chunk", type=_cases, metavar="N",
                    help="cases per Dask task (default: large tasks first, single cases last; "
                         "1: one case a task, for a few long cases)")
    sd.add_argument("--quiet", "-q", action="store_true", help="no progress bar, only the last line")
    sd.add_argument("--confine", action="store_true", help=_CONFINE_HELP)

    rp = sub.add_parser("report", help="write DIR/report.html: one self-contained page of a dispatch's output "
                                            "folder or of a study folder")
    rp.add_argument("folder", metavar="DIR", help="the output folder of a dispatch or a study (its --out)")

    gr = sub.add_parser("graph", help="draw the portfolio's network (SVG, PNG or DOT)")
    gr.add_argument("file", metavar="FILE")
    gr.add_argument("--out", required=True, metavar="PATH", help="picture to write: .svg, .png or .dot")
    gr.add_argument("--confine", action="store_true", help=_CONFINE_HELP)
    return ap


def main(argv: Optional[List[str]] = None, out=None, err=None) -> int:
    out = out or sys.stdout
    err = err or sys.stderr
    try:
        args = build_parser().parse_args(argv)
    except SystemExit as e:
        return int(e.code) if isinstance(e.code, int) else EXIT_USAGE
    args.argv = ["portfolio", *(sys.argv[1:] if argv is None else argv)]   # provenance
    try:
        if args.command == "lint":
            return cmd_lint(args, out, err)
        if args.command == "codes":
            return cmd_codes(args, out)
        if args.command == "fmt":
            return cmd_fmt(args, out, err)
        if args.command == "lsp":
            from .lsp.server import main as lsp_main   # pygls only here: other commands start without it
            return lsp_main()
        if args.command == "dispatch":
            return cmd_dispatch(args, out, err)
        if args.command == "graph":
            return cmd_graph(args, out, err)
        if args.command == "report":
            return cmd_report(args, out, err)
        if args.command == "study":
            return cmd_study(args, out, err)
    except KeyboardInterrupt:
        print("portfolio: interrupted", file=err)
        return 130
    return EXIT_USAGE  # pragma: no cover


def cmd_lint(args, out, err) -> int:
    from .api import lint_file

    report = Report()
    results = []
    for f in args.files:
        r = lint_file(f, confine=args.confine)
        results.append(r)
        if r.unreadable:
            report.add_unreadable()
        else:
            report.add(r.diagnostics)
    if args.format == "json":
        print(format_json(results), file=out)
    else:
        for r in results:
            for d in r.diagnostics:
                print(format_text(d), file=out)
        if not args.quiet:
            print(report.summary(), file=err)
    return report.exit_code


def cmd_fmt(args, out, err) -> int:
    """Exit 2 when a file was not read or has a syntax error (it is left as it is),
    else 1 with --check when a file would change, else 0."""
    from .files import replace_atomically
    from .fmt import format_file, format_source

    unread = changed = same = 0
    for f in args.files:
        if f == "-":
            r = format_source(sys.stdin.read(), "<stdin>")
        else:
            r = format_file(f)
        for d in r.diagnostics:
            print(format_text(d, texts={r.path: r.original} if r.original is not None else None), file=err)
        if not r.ok:
            unread += 1
            print(printable(f"portfolio: {r.path} was not formatted"), file=err)
            continue
        if not r.changed:
            same += 1
            if f == "-" and not (args.check or args.diff):
                print(r.text, file=out, end="")
            continue
        changed += 1
        if args.diff:
            for line in r.diff().splitlines():    # tabs kept, any other control character shown escaped
                print("\t".join(printable(part) for part in line.split("\t")), file=out)
        if args.check or args.diff:
            if args.check:
                print(printable(f"would reformat {r.path}"), file=err)
            continue
        if f == "-":
            print(r.text, file=out, end="")
            continue
        real = Path(f).resolve()          # a link keeps pointing at the rewritten file
        try:
            mode = real.stat().st_mode & 0o7777
            replace_atomically(real, lambda tmp, text=r.text: Path(tmp).write_text(text, "utf-8"), mode)
        except OSError as e:
            print(printable(f"portfolio: error: cannot write '{f}': {e.strerror or e}"), file=err)
            unread += 1
            continue
        print(printable(f"reformatted {r.path}"), file=err)
    verb = "would reformat" if args.check or args.diff else "reformatted"
    if any(f != "-" for f in args.files):
        print(f"fmt: {changed} {verb}, {same} unchanged" + (f", {unread} not formatted" if unread else ""),
              file=err)
    if unread:
        return EXIT_USAGE
    return EXIT_ERRORS if args.check and changed else EXIT_OK


def cmd_codes(args, out) -> int:
    if args.format == "markdown":
        print(codes_markdown(), file=out, end="")
    else:
        for code, cls in sorted(REGISTRY.items()):
            print(f"{code}  {cls.severity:<7}  {cls.__name__:<22} {cls.summary}", file=out)
    return EXIT_OK


def codes_markdown() -> str:
    lines = ["| code | severity | kind | meaning |", "|---|---|---|---|"]
    for code, cls in sorted(REGISTRY.items()):
        lines.append(f"| {code} | {cls.severity} | {cls.__name__} | {cls.summary} |")
    return "\n".join(lines) + "\n"


def _lint_first(path, err, consequence: str, confine: bool = False):
    """Lint ``path`` and print its findings; (result, None) to go on, or (result, exit code)."""
    from .api import lint_file

    r = lint_file(path, confine=confine)
    for d in r.diagnostics:
        print(format_text(d), file=err)
    if r.unreadable:
        return r, EXIT_USAGE
    if not r.ok:
        print(printable(f"portfolio: {len(r.errors)} error(s) in {path}; {consequence}"), file=err)
        return r, EXIT_ERRORS
    return r, None


def cmd_graph(args, out, err) -> int:
    from .draw import write_picture

    target = Path(args.out)
    if target.suffix.lower() not in (".svg", ".png", ".dot", ".gv"):
        print(printable(f"portfolio: error: cannot draw to '{target}': use a .svg, .png or .dot file name"), file=err)
        return EXIT_USAGE
    r, code = _lint_first(args.file, err, "nothing was drawn", args.confine)
    if code is not None:
        return code
    if target.resolve() == Path(args.file).resolve():
        print("portfolio: error: the picture would overwrite the portfolio file", file=err)
        return EXIT_USAGE
    if not target.parent.exists():
        print(printable(f"portfolio: error: the folder '{target.parent}' does not exist"), file=err)
        return EXIT_USAGE
    try:
        write_picture(r.graph, target)
    except (OSError, ValueError) as e:
        print(printable(f"portfolio: error: cannot write '{target}': {e}"), file=err)
        return EXIT_USAGE
    print(f"network of {r.portfolio.name} drawn to {target}", file=out)
    return EXIT_OK


# ---- dispatch ---------------------------------------------------------------------

def cmd_dispatch(args, out, err) -> int:
    from .dispatch import dispatch, exit_code
    from .solve import SolveOptions

    r, code = _lint_first(args.file, err, "nothing was dispatched or written", args.confine)
    if code is not None:
        return code
    if args.marginal_values and (args.windows is not None or args.foresight is not None):
        from .marginal import windows_refusal
        print(printable(f"portfolio: error: {windows_refusal()}; nothing was dispatched or written"),
              file=err)
        return EXIT_USAGE
    spec, problem = _windows_spec(args, r.portfolio.horizon)
    if problem:
        print(printable(f"portfolio: error: {problem}; nothing was dispatched or written"), file=err)
        return EXIT_USAGE
    default = None
    if spec is None and not args.whole and not args.marginal_values:
        from .windows import AUTO_DAYS, binary_rules, by_default
        spec = by_default(r.portfolio)
        if spec is not None and args.bound is not None:
            from dataclasses import replace
            spec = replace(spec, bound=args.bound)
        if spec is not None:
            rules = binary_rules(r.portfolio)
            default = (f"dispatched by windows, the default for a horizon longer than "
                       f"{AUTO_DAYS:g} days with binary rules ({rules[0]}"
                       f"{f' and {len(rules) - 1} more' if len(rules) > 1 else ''}); "
                       f"--whole for one MILP")
    elif spec is None and args.marginal_values and not args.whole:
        from .windows import AUTO_DAYS, by_default
        if by_default(r.portfolio) is not None:
            default = (f"dispatched as one MILP over the whole horizon, not by windows (the default "
                       f"for a horizon longer than {AUTO_DAYS:g} days with binary rules): "
                       f"--marginal-values needs one schedule and one LP over the whole horizon; "
                       f"this can take much longer (--time-limit bounds it)")
    if spec is None and args.bound is not None:
        print(printable(f"portfolio: error: {_bound_refusal(args, r.portfolio)}; nothing was "
                        f"dispatched or written"), file=err)
        return EXIT_USAGE
    out_dir = Path(args.out)
    problem = _output_problem(out_dir, Path(args.file))
    if problem is None and args.parquet:
        import importlib.util
        if importlib.util.find_spec("pyarrow") is None:
            problem = "--parquet needs pyarrow, which is not installed (pip install 'portfolio[parquet]')"
    if problem is None:
        from .writers import OutputFolderError, check_output_folder
        try:
            check_output_folder(out_dir, r.portfolio)   # refuse before a long solve, not after
        except OutputFolderError as e:
            problem = str(e)
    if problem:
        print(printable(f"portfolio: error: {problem}"), file=err)
        return EXIT_USAGE
    kw = {}
    if args.time_limit is not None:
        kw["time_limit"] = args.time_limit
    if args.gap is not None:
        kw["mip_gap"] = args.gap
    if args.threads is not None:
        kw["threads"] = args.threads
    if args.no_warm_start:
        kw["warm_start"] = False
    options = SolveOptions(**kw)
    progress = Progress(err, quiet=args.quiet)
    try:
        if spec is None:
            if default and not args.quiet:
                print(printable(f"portfolio: {default}"), file=err)
            result = dispatch(r.portfolio, options, progress=progress)
            if default:
                result.summary["notes"].append(default)
        else:
            from .windows import dispatch_windows
            if default and not args.quiet:
                print(printable(f"portfolio: {default}"), file=err)
            result = dispatch_windows(r.portfolio, spec, options, progress=progress.windows,
                                      phase=progress.phase)
            if default:
                result.summary["notes"].append(default)
        if args.marginal_values:
            from .marginal import attach
            attach(result, options)      # never raises for a dispatch without a schedule
    finally:
        progress.close()
    status = result.status
    from .provenance import with_command
    from .writers import OutputFolderError
    with_command(result.summary, args.argv)
    if status in ("optimal", "feasible"):
        # written first: a closed or full terminal must not cost the schedule
        formats = ("csv", "parquet") if args.parquet else ("csv",)
        try:
            result.write(out_dir, formats=formats)
        except (OSError, ValueError, OutputFolderError) as e:
            print(status_line(result), file=out)
            print(printable(f"portfolio: error: cannot write '{out_dir}': {e}"), file=err)
            return EXIT_USAGE
        width = width_of(out)
        print_result(result, out, width)
        if spec is not None:
            _print_windows(result, out)
        if not args.quiet:
            print_marginal(result, out, width)
            from .contract import CAUTION   # one wording for the terminal and summary.json
            print_assets(result, out, width)
            print(printable(f"schedule written to {out_dir}/"), file=out)
            print(wrapped(f"caution: {CAUTION}", width), file=out)
        if args.report:
            return _report_after(out_dir, out, err, args.quiet) or exit_code(status)
    else:
        try:   # no schedule, but the summary (status, limits that gave) for tools to read
            result.write(out_dir)
            written = f"summary written to {out_dir}/summary.json (no schedule)"
        except (OSError, ValueError, OutputFolderError) as e:
            written = f"portfolio: could not write the summary to '{out_dir}': {e}"
        print_result(result, out, width_of(out))
        explain_failure(result, err)
        mv = result.summary.get("marginal_values")
        if mv:
            print(printable(f"portfolio: {mv['message']}"), file=err)
        print(printable(written), file=err)
        if args.report and written.startswith("summary"):
            return _report_after(out_dir, out, err, args.quiet) or exit_code(status)
    return exit_code(status)


def _bound_refusal(args, p) -> str:
    """Why ``--bound`` cannot be used: this dispatch is one MILP, and what made it one."""
    head = ("--bound goes with windows (--windows, --foresight, or a horizon longer than 31 days "
            "with binary rules)")
    if args.whole:
        return f"{head}, and --whole makes this dispatch one MILP: leave out --bound or --whole"
    from .windows import by_default
    if args.marginal_values and by_default(p) is not None:
        return (f"{head}, and --marginal-values makes this dispatch one MILP over the whole horizon "
                f"(its values are those of one LP over the whole horizon), where this horizon "
                f"would otherwise go by windows: leave out --bound, or --marginal-values")
    return f"{head}, and this dispatch is one MILP: leave out --bound"


def _windows_spec(args, horizon):
    """(spec or None, problem or None) from --windows, --window-end, --workers, --foresight, --commit
    and --bound (which also applies to the windows a long horizon takes by default)."""
    from dataclasses import replace

    from .windows import WindowsError, foresight, parse, plan
    windows = args.windows is not None
    sighted = args.foresight is not None
    if windows and sighted:
        return None, "--windows and --foresight are two ways of cutting the horizon: choose one"
    if args.whole and (windows or sighted):
        return None, "--whole is one MILP over the whole horizon: leave out --windows/--foresight"
    if not (windows or sighted):
        for flag, value in (("--window-end", args.window_end), ("--workers", args.workers),
                            ("--commit", args.commit)):
            if value is not None:
                return None, f"{flag} needs --windows or --foresight"
        return None, None
    if sighted and args.workers is not None:
        return None, ("--workers: windows of limited foresight follow each other (each starts "
                      "where the one before left), so they run one at a time")
    if windows and args.commit is not None:
        return None, "--commit goes with --foresight (with --windows write COMMIT[/OVERLAP])"
    if windows and args.windows and not _duration_like(args.windows):
        if args.windows.lower().endswith(".folio") or os.path.isfile(args.windows):
            if any(a.startswith("--windows=") for a in getattr(args, "argv", ())):
                return None, (f"--windows={args.windows} names a file, not windows: write the "
                              f"windows as COMMIT[/OVERLAP] (--windows=1d/1d)")
            return None, _windows_took_file(args.windows, file_left=True)
    try:
        if sighted:
            spec = foresight(args.foresight, args.commit, args.window_end or "hold")
        else:
            workers = args.workers or 1
            end = args.window_end or ("pin" if workers > 1 else "value")
            spec = parse(args.windows, end, workers)
        if args.bound is not None:
            spec = replace(spec, bound=args.bound)
        plan(spec, horizon.steps, horizon.step_hours)
    except WindowsError as e:
        return None, str(e)
    return spec, None


def cmd_study(args, out, err) -> int:
    if args.scheduler is not None and args.workers is not None:
        print(printable("portfolio: error: --workers sets the size of the local cluster only; with "
                        "--scheduler the cases run on that scheduler's own workers: leave out "
                        "--workers (or --scheduler); no case was run"), file=err)
        return EXIT_USAGE
    if args.scheduler is None:
        from .study.run import fresh, warm
        if fresh(args.out):  # a study with cases done starts it only if one is still to run
            warm()   # the local workers' fork server imports while the file is read and checked
    r, code = _lint_first(args.file, err, "no case was run", args.confine)
    if code is not None:
        return code
    from .solve import SolveOptions
    from .study import StudyError, pick, run
    from .study.run import check_folder
    try:
        study = pick(r.portfolio, args.study)
        out_dir = Path(args.out)
        problem = _output_problem(out_dir, Path(args.file)) or check_folder(out_dir, r.portfolio, study)
    except StudyError as e:
        problem = str(e)
    if problem:
        print(printable(f"portfolio: error: {problem}"), file=err)
        return EXIT_USAGE
    kw = {"threads": args.threads or 1}
    if args.time_limit is not None:
        kw["time_limit"] = args.time_limit
    if args.gap is not None:
        kw["mip_gap"] = args.gap
    if args.scheduler is not None:
        _quiet_dask()
    bar = StudyProgress(err, quiet=args.quiet)
    try:
        got = run(r.portfolio, study.name, out_dir, SolveOptions(**kw), scheduler=args.scheduler,
                  workers=args.workers, schedules=args.schedules, progress=bar, chunk=args.chunk)
    except StudyError as e:
        bar.close()
        print(printable(f"portfolio: error: {e}"), file=err)
        return EXIT_USAGE
    finally:
        bar.close()
    df = got.frame
    ok = int(df["status"].isin(("optimal", "feasible")).sum())
    print(printable(f"study {study.name}: {len(df)} cases, {ok} with a schedule, {len(df) - ok} without; "
                    f"{got.solved} solved now, {got.skipped} done before"), file=out)
    if not args.quiet:
        for _, row in df[~df["status"].isin(("optimal", "feasible"))].head(10).iterrows():
            print(printable(f"  case {row['case']}: {row['status']} {row['message']}"), file=out)
        print(printable(f"cases table written to {out_dir}/cases.csv"), file=out)
    return EXIT_OK if ok == len(df) else EXIT_ERRORS


def _report_after(out_dir: Path, out, err, quiet: bool) -> int:
    """``dispatch --report``: the report straight after the output folder; 0, or EXIT_USAGE."""
    from .report import ReportError, write_report
    try:
        rep = write_report(out_dir)
    except ReportError as e:
        print(printable(f"portfolio: error: no report: {e}"), file=err)
        return EXIT_USAGE
    if not quiet:
        print(printable(f"report written to {rep.path}"), file=out)
    return 0


def cmd_report(args, out, err) -> int:
    from .report import ReportError, write_report
    try:
        rep = write_report(Path(args.folder))
    except ReportError as e:
        print(printable(f"portfolio: error: {e}; no report written"), file=err)
        return EXIT_USAGE
    what = (f" ({rep.note})" if rep.note else "" if rep.status in ("optimal", "feasible")
            else f" (status {rep.status}: no schedule; the page says why)")
    print(printable(f"report written to {rep.path}{what}"), file=out)
    return EXIT_OK


def _quiet_dask() -> None:
    """Dask's own log lines off this command's stderr (a scheduler lost mid-study logged
    its reconnection tracebacks there): what happens to the cases, the command says.  Our
    local cluster silences its processes itself (study/run.py's local_cluster)."""
    import logging

    import distributed  # noqa: F401  (its logging is set up when it is imported)
    for name in ["distributed", *logging.root.manager.loggerDict]:
        if name == "distributed" or name.startswith("distributed."):
            logging.getLogger(name).setLevel(logging.CRITICAL)


def _print_windows(result, out) -> None:
    w = result.summary["windows"]
    gap = "unknown" if w["gap"] is None else f"{100 * w['gap']:.3g} %"
    bound = "none" if w["lp_bound"] is None else f"{w['lp_bound']:,.2f}"
    n = w["count"]
    ends = "its end" if n == 1 else "their ends"
    if w["foresight_h"] is not None:
        ratio = "unknown" if w["ratio_to_bound"] is None else f"{100 * w['ratio_to_bound']:.2f} %"
        print(printable(f"limited foresight: {_count(n, 'window')} committing {w['commit_h']:g} h "
                        f"and seeing {w['foresight_h']:g} h, '{w['end']}' at {ends}; {ratio} of "
                        f"the perfect-foresight LP bound {bound}; per window: windows.csv"), file=out)
        return
    at_once = min(w["workers"], n)      # never more at once than there are windows
    again = f", {w['resolved']} solved again at a seam" if at_once > 1 else ""
    print(printable(f"windows: {n} of {w['commit_h']:g} h (+{w['overlap_h']:g} h seen), "
                    f"{w['end']} at {ends}, {at_once} at once{again}; LP bound {bound}, "
                    f"gap {gap}; per window: windows.csv"), file=out)


def _count(n: int, word: str) -> str:
    """``1 window``, ``4 windows``."""
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def _output_problem(out_dir: Path, source: Path) -> Optional[str]:
    """Why ``--out`` cannot be the output folder (nothing is ever written over an input), or None."""
    src = source.resolve()
    od = out_dir.resolve()
    if od == src:
        return (f"--out '{out_dir}' is the portfolio file itself, not a folder: --out names a "
                f"folder to write into; choose a new folder, e.g. "
                f"'{source.stem}_out' (the portfolio file is left as it is)")
    if od in src.parents:
        return (f"the output folder '{out_dir}' holds the portfolio file itself, and no input "
                f"is ever inside what the tool writes; choose a new folder")
    if od.exists() and not od.is_dir():
        return (f"--out '{out_dir}' is an existing file, not a folder: --out names a folder to "
                f"write into; choose a new folder (the file is left as it is)")
    return None


_interrupted = False


def on_interrupt(signum, frame) -> None:
    """The command's SIGINT handler: remember the Ctrl-C, then raise KeyboardInterrupt.

    A C extension being imported at that moment may turn the KeyboardInterrupt
    into another error (NumPy reports an ImportError for its datetime module);
    the flag lets :func:`run` still end quietly with 130."""
    global _interrupted
    _interrupted = True
    raise KeyboardInterrupt


def _unraisable(args) -> None:
    """``sys.unraisablehook`` of the command.  Python cannot raise an exception out of a
    garbage-collector callback (Dask's ``GCDiagnosis`` keeps one) or a ``__del__``: a Ctrl-C
    arriving there is printed as "Exception ignored" and lost, and the command would run on
    to its end.  Such a KeyboardInterrupt of :func:`on_interrupt` is delivered again from
    outside that callback (a thread asks the main thread, as a second Ctrl-C would); any
    other unraisable exception goes to Python's own hook."""
    if _interrupted and args.exc_type is KeyboardInterrupt:
        import _thread
        import threading
        again = threading.Timer(0.05, _thread.interrupt_main)
        again.daemon = True
        again.start()
        return
    sys.__unraisablehook__(args)


def install_interrupt_handling() -> None:
    """Ctrl-C handling of the command: :func:`on_interrupt` for SIGINT and
    :func:`_unraisable` for a Ctrl-C Python could not raise."""
    import signal
    signal.signal(signal.SIGINT, on_interrupt)
    sys.unraisablehook = _unraisable


def _leave_interrupted() -> None:
    _quiet_stdout()
    print("portfolio: interrupted", file=sys.stderr)
    sys.stderr.flush()
    # a cancelled HiGHS run may still be busy in a worker thread until its
    # next check: leave without waiting for it (nothing is being written)
    os._exit(130)


def run() -> None:  # console-script entry point
    """``main`` with the process-level cases: Ctrl-C (exit 130), a reader
    that went away (``portfolio lint ... | head``) or a full standard output:
    a message or silence, never a traceback."""
    try:
        code = main()
        sys.stdout.flush()
        if code == 130:               # interrupted (main said so on stderr)
            sys.stderr.flush()
            os._exit(130)             # see below: do not wait for a cancelled HiGHS run
    except KeyboardInterrupt:
        _leave_interrupted()
    except BrokenPipeError:
        _quiet_stdout()                 # the reader has gone: nothing more to say
        code = 141                      # 128 + SIGPIPE, as a shell reports it
    except OSError as e:
        if e.errno not in (errno.ENOSPC, errno.EIO, errno.EDQUOT):
            raise
        _quiet_stdout()
        print(printable(f"portfolio: cannot write to standard output: {e.strerror}"), file=sys.stderr)
        code = EXIT_USAGE
    except Exception:
        if not _interrupted:
            raise
        _leave_interrupted()   # an error that a Ctrl-C caused on its way through
    sys.exit(code)


def _quiet_stdout() -> None:
    """Point fd 1 at /dev/null so the interpreter's final flush cannot fail."""
    try:
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, sys.stdout.fileno())
        os.close(null)
    except (OSError, ValueError, AttributeError):
        pass


if __name__ == "__main__":  # pragma: no cover
    run()
