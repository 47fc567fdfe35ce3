"""The results contract: what a dispatch writes, in one place (docs/outputs.md).

* :data:`TABLES`: per table kind, its columns in order, each with its unit
  and meaning; :data:`COLUMNS` the names alone.
* :data:`SUMMARY_KEYS` (and :data:`OPTIONAL_SUMMARY_KEYS`): the top-level
  keys of ``summary.json``; :data:`ASSET_GROUPS`: the per-asset sections;
  :data:`ASSET_KEYS`, :data:`STORAGE_KEYS`, :data:`ROUTE_KEYS`: the keys of
  one asset's entry.
* :data:`RESERVED_NAMES`: names an asset may not take (they are output files).
* :data:`CAUTION`: the one wording of the caution, for summary.json and the terminal.
* :data:`MARGINAL_LIMITS`, :data:`MARGINAL_KEYS`, :data:`MARGINAL_LIMIT_KEYS`,
  :func:`marginal_column`: the marginal values (``marginal_values.csv`` and
  the ``marginal_values`` key of summary.json).
* Output folder: :data:`MARKER`, :data:`FORMATS`, :data:`WIDE`, :data:`SUMMARY_FILE`,
  :func:`table_file`.

:mod:`portfolio.schedule` makes its tables through :func:`frame` (a table
whose columns differ from the contract is an error), :mod:`portfolio.writers`
names files and refuses folders by it, and the CLI's tables follow it.  A
test compares docs/outputs.md with this module.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Dict, Mapping, Tuple

if TYPE_CHECKING:
    import numpy as np
    import pandas as pd


CAUTION = ("Schedules are advisory. The plant's own protection systems, manufacturer limits, the grid "
           "operator's instructions and local codes and licensed practice always come first. Reservoir "
           "spill affects people downstream.")


@dataclass(frozen=True)
class Column:
    name: str
    unit: str       # MW, MWh, money/MWh, money, or "-" for a word
    meaning: str


# -- tables -------------------------------------------------------------------------------

TABLES: Mapping[str, Tuple[Column, ...]] = {
    "storage": (
        Column("charge_mw", "MW", "total charge: drawn from the site plus supply fed straight into the store"),
        Column("discharge_mw", "MW", "discharge, grid side"),
        Column("soc_mwh", "MWh", "content at the END of the step"),
        Column("spill_mw", "MW", "spilled: stored MWh per step / step hours"),
        Column("mode", "-", "charge, discharge, idle, or both (tolerance 1e-6 MW)"),
        Column("routed_in_mw", "MW", "arriving from routes, target units (water in transit at the start included; not pump routes: pumped water is the store's charge)"),
        Column("routed_out_mw", "MW", "leaving into routes of every kind, source's stored MWh per step / step hours"),
        Column("supply_in_mw", "MW", "the store's own supply (a river's natural inflow), stored MWh per step / step hours; 0 without one"),
        Column("pump_mw", "MW", "power drawn to pump water up into the store from a lower one (its charge when a pump route feeds it); 0 without one"),
        # a store declared in volume ('energy equivalent'): the same quantities as water; empty for a store declared in MWh
        Column("content_m3", "m3", "content at the END of the step as water: soc_mwh / energy equivalent; empty for a store declared in MWh"),
        Column("discharge_m3_per_s", "m3/s", "water through the turbine: discharge_mw / discharge efficiency / energy equivalent / 3600; empty for a store declared in MWh"),
        Column("spill_m3_per_s", "m3/s", "water spilled: spill_mw / energy equivalent / 3600; empty for a store declared in MWh"),
        Column("supply_in_m3_per_s", "m3/s", "the store's own supply as water: supply_in_mw / energy equivalent / 3600; empty for a store declared in MWh"),
    ),
    "supply": (
        Column("available_mw", "MW", "the supply's profile: used + curtailed"),
        Column("used_mw", "MW", "delivered to the site and straight into stores together"),
        Column("curtailed_mw", "MW", "not taken"),
    ),
    "demand": (
        Column("demand_mw", "MW", "the demand's profile"),
    ),
    "site": (
        Column("import_mw", "MW", "net import through the site's meter"),
        Column("export_mw", "MW", "net export through the site's meter"),
    ),
    "connection": (
        Column("import_mw", "MW", "net import through the connection's meter"),
        Column("export_mw", "MW", "net export through the connection's meter"),
        Column("sell_price", "money/MWh", "the sell price expression"),
        Column("buy_price", "money/MWh", "the buy price expression"),
        Column("cashflow", "money", "step hours x (sell_price x export_mw - buy_price x import_mw)"),
    ),
    "route": (
        Column("flow_mw", "MW", "leaving the source: source's stored MWh per step / step hours"),
        Column("arriving_mw", "MW", "reaching the target after the delay, factor and efficiency applied"),
    ),
    # horizons of more than one day: daily and monthly totals per asset (periods.csv), one row
    # per period and asset, indexed by the period's first step
    "periods": (
        Column("period", "-", "day or month, in the horizon's zone"),
        Column("label", "-", "the day (YYYY-MM-DD) or month (YYYY-MM)"),
        Column("asset", "-", "the asset's name"),
        Column("kind", "-", "storage, supply, demand, site or connection"),
        Column("energy_in_mwh", "MWh", "energy in over the period, as the per-asset key energy_in_mwh"),
        Column("energy_out_mwh", "MWh", "energy out over the period, as the per-asset key energy_out_mwh"),
        Column("net_value", "money", "the asset's net value over the period (negative: a cost)"),
        Column("curtailed_mwh", "MWh", "supply not taken over the period (0 for other kinds)"),
        Column("spilled_mwh", "MWh", "stored energy or water spilled over the period (0 for other kinds)"),
    ),
    # dispatch by windows only: one row per window, indexed by its first step (windows.csv)
    "windows": (
        Column("window", "-", "the window's number, from 1"),
        Column("steps", "-", "steps the window sees (commit and overlap, clipped at the horizon's end)"),
        Column("commit_steps", "-", "steps of it kept in the stitched schedule"),
        Column("end", "-", "how its end was treated: value, target, or horizon (the last window)"),
        Column("status", "-", "the window's certified status"),
        Column("objective", "money", "the window's own objective, the value of what it leaves in store included"),
        Column("bound", "money", "the window's certified bound"),
        Column("gap", "-", "the window's relative gap"),
        Column("seconds", "s", "time to build and solve it"),
    ),
}

COLUMNS: Dict[str, list] = {kind: [c.name for c in cols] for kind, cols in TABLES.items()}

# -- summary.json ------------------------------------------------------------------------

SUMMARY_KEYS = (
    "status", "objective", "best_bound", "mip_gap", "build_seconds", "solve_seconds",
    "handoff_seconds", "start_seconds", "start_objective", "lp_bound", "explain_seconds",
    "polish_seconds", "time_limit", "certificate", "polish", "tie_break", "steps", "step_hours",
    "start", "zone", "portfolio", "variant", "warm_start", "solver_status", "model", "caution",
    "storages", "supplies", "demands", "sites", "connections", "routes", "relaxed", "notes",
    "provenance", "network", "currency",
)
# summary["provenance"]: where the result came from (portfolio/provenance.py); a summary
# without it was written by an older version (the report refuses it)
PROVENANCE_KEYS = ("tool_version", "highs_version", "inputs", "command", "started_utc")
# summary["network"]: who is where, and the limits a report draws against
NETWORK_KEYS = ("sites", "connections", "storages")
OPTIONAL_SUMMARY_KEYS = ("message",          # present only when there is something to say
                         "windows",          # dispatch by windows only (docs/windows.md)
                         "marginal_values")  # when asked for (docs/marginal-values.md)
WINDOW_KEYS = ("commit_h", "overlap_h", "end", "foresight_h", "workers", "count", "bound_method",
               "lp_bound",
               "lp_seconds", "stitched_objective", "gap", "ratio_to_bound", "resolved",
               "max_violation", "worst", "seconds", "windows")
WINDOWS_TABLE = "windows"          # the per-window table's file: windows.<format>
PERIODS_TABLE = "periods"          # daily and monthly totals: periods.<format>

# -- marginal values (dispatch --marginal-values; docs/marginal-values.md) --------------------

MARGINAL_TABLE = "marginal_values"     # its file: marginal_values.<format>
# per summary section, the limits valued: the model's field names, each a column
# <asset>.<limit> of marginal_values.csv (as schedule.csv's <name>.<column>)
def _power_limits(owner: str, *limits: str) -> Tuple[Column, ...]:
    return tuple(Column(f"{lim}_max", "money/MW", f"one more MW of the {owner}'s {lim} limit in this "
                                                  f"step alone") for lim in limits)


MARGINAL_LIMITS: Mapping[str, Tuple[Column, ...]] = {
    "connections": _power_limits("connection", "export", "import"),
    "sites": _power_limits("site", "export", "import"),
    "storages": _power_limits("storage", "charge", "discharge") + (
        Column("soc_max", "money/MWh", "one more MWh of the upper state-of-charge limit at the end of this step alone"),
    ),
}
MARGINAL_KEYS = ("status", "message", "objective", "lp_objective", "fixed_binaries", "degenerate",
                 "seconds", "energy_capacity", "limits", "notes")
MARGINAL_LIMIT_KEYS = ("group", "asset", "limit", "unit", "declared", "horizon", "largest",
                       "largest_at", "binding_steps", "families", "path", "line", "column")


def marginal_column(asset: str, limit: str) -> str:
    """A column of marginal_values.csv."""
    return f"{asset}.{limit}"


# summary section -> the table kind of its assets
ASSET_GROUPS: Mapping[str, str] = {
    "storages": "storage", "supplies": "supply", "demands": "demand", "sites": "site",
    "connections": "connection", "routes": "route",
}

ASSET_KEYS = ("net_value", "energy_in_mwh", "energy_out_mwh", "equivalent_full_cycles",
              "curtailed_mwh", "spilled_mwh")
# a storage's analyst figures: energy-weighted prices (money/MWh) at its connection's price
PRICE_KEYS = ("average_charge_price", "average_discharge_price", "spread_captured")
STORAGE_KEYS = ASSET_KEYS + ("soc_end_mwh",) + PRICE_KEYS
ROUTE_KEYS = ("in_transit_end_mwh", "flow_mwh")

# the per-asset figures the terminal shows, in this order (a column is shown when
# some asset of the group has it non-zero; net value whenever the group has it)
CLI_ASSET_COLUMNS = ("net_value", "energy_in_mwh", "energy_out_mwh", "equivalent_full_cycles",
                     "curtailed_mwh", "spilled_mwh", "in_transit_end_mwh")
CLI_GROUP_ORDER = ("connections", "sites", "storages", "supplies", "demands", "routes")
# the terminal's short headings (money columns add the currency)
CLI_HEADINGS = {"net_value": "net value", "energy_in_mwh": "in MWh", "energy_out_mwh": "out MWh",
                "equivalent_full_cycles": "cycles", "curtailed_mwh": "curtailed MWh",
                "spilled_mwh": "spilled MWh", "in_transit_end_mwh": "in transit MWh",
                "flow_mwh": "flowed MWh", "average_charge_price": "avg charge",
                "average_discharge_price": "avg discharge", "spread_captured": "spread"}
MONEY_KEYS = ("net_value",)                      # per-asset keys in money
PRICE_UNIT_KEYS = PRICE_KEYS                     # per-asset keys in money per MWh

# -- output folder -------------------------------------------------------------------------

MARKER = ".portfolio-output"       # lists the files this tool wrote; its presence makes a folder ours
FORMATS = ("csv", "parquet")
WIDE = "schedule"                  # every table in one: schedule.<format>
SUMMARY_FILE = "summary.json"
REPORT_FILE = "report.html"        # `portfolio report DIR` (portfolio/report/), listed in the marker
RESERVED_NAMES = (WIDE, "summary")  # an asset so named would clash with an output file


def table_file(name: str, fmt: str) -> str:
    """The file of one table (an asset's, or :data:`WIDE`) in format ``fmt``."""
    return f"{name}.{fmt}"


def frame(kind: str, data: Mapping[str, "np.ndarray"], index: "pd.DatetimeIndex") -> "pd.DataFrame":
    """A table of ``kind`` with the contract's columns, in the contract's order.

    ``data`` must give exactly those columns: a missing or an extra one is a
    programming error (raised), never a silent change of the output.
    """
    want = COLUMNS[kind]
    if set(data) != set(want) or len(data) != len(want):
        missing = [c for c in want if c not in data]
        extra = [c for c in data if c not in want]
        raise KeyError(f"{kind} table: columns differ from the contract (missing {missing}, extra {extra})")
    import pandas as pd   # the contract is also read by the checker, which needs no pandas

    return pd.DataFrame({c: data[c] for c in want}, index=index)
