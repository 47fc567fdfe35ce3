"""What the ``portfolio dispatch`` command shows: the status line, why there is
no schedule, the asset tables and the progress line.  Used by :mod:`portfolio.cli`
only (the library never prints)."""

from __future__ import annotations

import time

from .render import printable

WIDTH = 80        # the terminal's width when it cannot be asked (output to a file or a pipe)


def print_result(result, out, width: int = WIDTH) -> None:
    print(status_line(result, width), file=out)
    for note in result.summary.get("notes", ()):
        print(wrapped(printable(f"note: {note}"), width), file=out)


def width_of(out) -> int:
    """Columns to fill: the terminal's (at least 40) when ``out`` is one, else :data:`WIDTH`."""
    import shutil

    try:
        if out.isatty():
            return max(40, shutil.get_terminal_size((WIDTH, 24)).columns)
    except (AttributeError, ValueError, OSError):
        pass
    return WIDTH


def currency(summary: dict) -> str:
    """The unit of money on screen: the declared ISO 4217 code, or 'money' (docs/language.md)."""
    return summary.get("currency") or "money"


def money(x: float, summary: dict) -> str:
    """Money as the terminal shows it: two decimals, thousands grouped, the currency after."""
    return f"{x:,.2f} {currency(summary)}"


def wrapped(text: str, width: int) -> str:
    """``text`` broken into lines of at most ``width`` columns (continuations indented)."""
    import textwrap

    return "\n".join(textwrap.wrap(text, width=width, subsequent_indent="  ", break_on_hyphens=False))


def status_line(result, width: int = 0) -> str:
    """The status, objective, gap and times, parted by ' | '; with ``width``, broken into
    lines of at most that many columns between parts."""
    parts = [f"status: {result.status}"]
    if result.objective is not None:
        parts.append(f"objective {money(result.objective, result.summary or {})}")
    if result.mip_gap is not None:
        gap = result.mip_gap if result.mip_gap > 1e-12 else 0.0
        parts.append(f"gap {gap * 100:.3g} %")
    parts.append(f"build {result.build_seconds:.2f} s")
    parts.append(f"solve {result.solve_seconds:.2f} s")
    if not width:
        return " | ".join(parts)
    lines = [parts[0]]
    for part in parts[1:]:
        if len(lines[-1]) + 3 + len(part) <= width:
            lines[-1] += " | " + part
        else:
            lines.append("  " + part)
    return "\n".join(lines)


def explain_failure(result, err) -> None:
    messages = {
        "infeasible": "the portfolio's limits cannot all hold at once; no schedule",
        "unbounded": "the profit is unbounded: some flow has no limit (check connection and storage limits); no schedule",
        "no_schedule": _no_schedule_reason(result.summary),
        "error": "the solver failed; no schedule",
    }
    print(printable(f"portfolio: {messages.get(result.status, result.status)}"), file=err)
    said = result.summary.get("message") or ""
    solver = result.summary.get("solver_status") or ""
    if result.status == "error" and (said or solver):
        print(printable(f"  what the solver said: {said or solver}"), file=err)
    relaxed = getattr(result, "relaxed", None) or []
    if relaxed:
        print("these limits had to give for a schedule to exist (largest first):", file=err)
        for r in relaxed[:20]:
            first = f", first at {r.first.isoformat()}" if getattr(r, "first", None) is not None else ""
            print(printable(f"  {r.span}: {r.description} (by {r.amount:.5g} over {r.steps} step(s){first})"),
                  file=err)
        if len(relaxed) > 20:
            print(f"  ... and {len(relaxed) - 20} more", file=err)


def _no_schedule_reason(summary: dict) -> str:
    """Why no schedule came back, in the words of what actually stopped it."""
    solver = (summary.get("solver_status") or "").lower()
    limit = summary.get("time_limit")
    if "memory" in solver:
        return "the solver ran out of memory before it found a schedule; no schedule"
    if "time limit" in solver or limit is not None:
        return (f"no schedule was found within the time limit ({limit:g} s); a longer --time-limit "
                f"may find one; no schedule" if limit is not None else
                "no schedule was found within the solver's time limit; no schedule")
    shown = summary.get("solver_status") or "it stopped without a reason"
    return f"the solver stopped before it found a schedule ({shown}); no schedule"


def print_assets(result, out, width: int = WIDTH) -> None:
    """Per-asset figures in tables that fit ``width`` columns, the storages' prices, and the
    line that reconciles the assets' net values with the objective."""
    from rich.console import Console
    from rich.table import Table

    from .contract import CLI_ASSET_COLUMNS, CLI_GROUP_ORDER, CLI_HEADINGS, PRICE_KEYS

    console = Console(file=out, width=width, highlight=False, emoji=False)
    summary = result.summary
    cur = currency(summary)
    routes = {r.name: r for r in getattr(getattr(result, "portfolio", None), "routes", ()) or ()}
    for group in CLI_GROUP_ORDER:
        rows = summary.get(group) or {}
        if not rows:
            continue
        if group == "routes":
            cols = ["flow_mwh", "in_transit_end_mwh"]     # always: what flowed, what is on its way
        else:
            cols = [c for c in CLI_ASSET_COLUMNS
                    if any(v.get(c) not in (None, 0, 0.0) for v in rows.values())
                    or (c == "net_value" and any(c in v for v in rows.values()))]
        table = Table(title=group, title_justify="left", show_edge=False, pad_edge=False)
        table.add_column("name", overflow="fold")
        if group == "routes":
            table.add_column("from -> to", overflow="fold")
        for c in cols:
            head = CLI_HEADINGS.get(c, c) + (f" {cur}" if c == "net_value" else "")
            table.add_column(head, justify="right")
        for name, v in rows.items():
            cells = [printable(name)]
            if group == "routes":
                r = routes.get(name)
                cells.append(printable(f"{r.source} -> {r.target}") if r is not None else "")
            cells += [_num(v.get(c), _DIGITS.get(c, 2)) for c in cols]
            table.add_row(*cells)
        console.print(table)
    stores = summary.get("storages") or {}
    if any(v.get(k) is not None for v in stores.values() for k in PRICE_KEYS):
        table = Table(title=f"storage prices ({cur}/MWh, energy-weighted at the connection's price)",
                      title_justify="left", show_edge=False, pad_edge=False)
        table.add_column("name", overflow="fold")
        for c in PRICE_KEYS + ("equivalent_full_cycles",):
            table.add_column(CLI_HEADINGS.get(c, c), justify="right")
        for name, v in stores.items():
            table.add_row(printable(name), *[_num(v.get(c), 2) for c in PRICE_KEYS + ("equivalent_full_cycles",)])
        console.print(table)
    line = reconcile_line(summary)
    if line:
        print(wrapped(line, width), file=out)


_DIGITS = {"equivalent_full_cycles": 2}


def reconcile_line(summary: dict) -> str:
    """Why the numbers on screen add up: the storages', supplies' and demands' net values sum to
    the objective, which is the connections' cashflow less the storages' wear."""
    objective = summary.get("objective")
    if objective is None:
        return ""
    assets = sum(float(v.get("net_value") or 0.0) for g in ("storages", "supplies", "demands")
                 for v in (summary.get(g) or {}).values())
    cash = sum(float(v.get("net_value") or 0.0) for v in (summary.get("connections") or {}).values())
    wear = cash - float(objective)
    return (f"net values of storages, supplies and demands add up to the objective "
            f"({money(assets, summary)}): the connections' cashflow {money(cash, summary)} less "
            f"storage wear {money(wear, summary)}; a negative net value is a cost.")


MARGINAL_SHOWN = 10      # rows of the largest marginal values the terminal shows


def print_marginal(result, out, width: int = WIDTH) -> None:
    """The largest marginal values (per limit and step) and what they mean, or why there are none."""
    mv = result.summary.get("marginal_values")
    if not mv:
        return
    if mv["status"] != "computed":
        print(printable(f"note: {mv['message']}"), file=out)
        return
    for note in mv.get("notes", ()):
        print(printable(f"note: marginal values: {note}"), file=out)
    table = getattr(result, "marginal_values", None)
    cells = []
    if table is not None:
        for col in table.columns:
            for when, v in table[col].items():
                if v:
                    cells.append((abs(v), col, when, v))
    cells.sort(key=lambda c: (-c[0], c[1], c[2]))
    cap = mv.get("energy_capacity") or {}
    if not cells:
        print("marginal values: no limit binds (every value is 0); per step: marginal_values.csv", file=out)
    else:
        from rich.console import Console
        from rich.table import Table

        from .contract import marginal_column

        units = {marginal_column(lim["asset"], lim["limit"]): lim["unit"] for lim in mv["limits"]}
        print(printable(f"marginal values: one more unit of a limit in one step, on/off decisions "
                        f"held; largest {min(len(cells), MARGINAL_SHOWN)} of {len(cells)}, all in "
                        f"marginal_values.csv"), file=out)
        t = Table(show_edge=False)
        for name, just in (("limit", "left"), ("step", "left"), ("value", "right"), ("unit", "left")):
            t.add_column(name, justify=just)
        for _, col, when, v in cells[:MARGINAL_SHOWN]:
            t.add_row(printable(col), when.isoformat(), f"{v:,.3f}", units.get(col, "").replace("money", currency(result.summary)))
        Console(file=out, width=width, highlight=False).print(t)
    for name, v in cap.items():
        print(printable(f"one more MWh of storage {name}'s upper state of charge, every step: {v:,.3f}"),
              file=out)


def _num(x, digits: int = 2) -> str:
    if x is None:
        return ""
    if isinstance(x, (int, float)):
        return f"{x:,.{digits}f}"
    return str(x)


class Progress:
    """Feedback on stderr once a solve has run for a couple of seconds.

    A timer starts a spinner after ``after`` seconds (LPs report nothing while
    they run); MIP solves also update it with the best objective and gap.
    """

    def __init__(self, err, quiet=False, after=2.0):
        import threading

        self.err, self.quiet = err, quiet
        self.start = time.monotonic()
        self.status = None
        self.text = "solving..."
        self.lock = threading.Lock()
        self.timer = None
        if not quiet:
            self.timer = threading.Timer(after, self._show)
            self.timer.daemon = True
            self.timer.start()

    def _show(self):
        from rich.console import Console

        with self.lock:
            if self.status is None and self.timer is not None:
                self.status = Console(file=self.err).status(self.text)
                self.status.start()

    def windows(self, done, total, elapsed, objective=None):
        """After each window of a dispatch by windows (portfolio.windows)."""
        if self.quiet:
            return
        text = f"window {done}/{total}  {elapsed:.0f} s"
        if 0 < done < total:
            text += f"  about {elapsed / done * (total - done):.0f} s to go"
        with self.lock:
            self.text = text
            if self.status is not None:
                self.status.update(text)

    def phase(self, what, done, total, elapsed):
        """Before and during the LPs around the windows (portfolio.windows)."""
        if self.quiet:
            return
        text = f"{what}: LP {done}/{total}  {elapsed:.0f} s" if total > 1 else f"{what}...  {elapsed:.0f} s"
        with self.lock:
            self.text = text
            if self.status is not None:
                self.status.update(text)

    def __call__(self, elapsed, objective=None, bound=None, gap=None):
        if self.quiet:
            return
        text = f"solving... {elapsed:.0f} s"
        if objective is not None:
            text += f"  best {objective:,.2f}"
        if gap is not None:
            text += f"  gap {gap * 100:.3g} %"
        with self.lock:
            self.text = text
            if self.status is not None:
                self.status.update(text)

    def close(self):
        with self.lock:
            if self.timer is not None:
                self.timer.cancel()
                self.timer = None
            if self.status is not None:
                self.status.stop()
                self.status = None


class StudyProgress:
    """A progress bar over a study's cases on stderr: done, failed, ETA (rich)."""

    def __init__(self, err, quiet=False):
        self.err, self.quiet = err, quiet
        self.bar = self.task = None

    def __call__(self, done, failed, skipped, total):
        if self.quiet:
            return
        from rich.console import Console
        from rich.progress import (BarColumn, MofNCompleteColumn, Progress as Bar, TextColumn,
                                   TimeElapsedColumn, TimeRemainingColumn)
        if self.bar is None:
            self.bar = Bar(TextColumn("cases"), BarColumn(), MofNCompleteColumn(),
                           TextColumn("{task.fields[failed]} failed, {task.fields[skipped]} done before"),
                           TimeElapsedColumn(), TextColumn("ETA"), TimeRemainingColumn(),
                           console=Console(file=self.err), transient=False)
            self.bar.start()
            self.task = self.bar.add_task("cases", total=total - skipped, failed=0, skipped=skipped)
        self.bar.update(self.task, completed=done, failed=failed)

    def close(self):
        if self.bar is not None:
            self.bar.stop()
            self.bar = None
