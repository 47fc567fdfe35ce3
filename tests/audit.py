"""A schedule auditor: re-check a written output folder against the model.

``audit(portfolio, out_dir)`` re-reads every CSV that
``DispatchResult.write(out_dir)`` wrote (the per-asset files,
``schedule.csv``) and ``summary.json``, and re-checks the schedule from the
portfolio's declared parameters only (docs/model.md, docs/outputs.md).  It
never imports the engine.  It returns a list of violations, one line each
(empty when the schedule is sound).

Tolerances: a limit or identity is violated when it is off by more than
``tol`` (1e-6) times ``max(1, scale)`` (the cashflow identity also by the
CSVs' rounding, ROUNDING = 5e-7 times its absolute coefficients: each
value read back is within 5e-7 of the schedule's, docs/outputs.md "CSV
precision"; so are the balances that add several rounded columns), where ``scale`` is the size of the
largest term in that row (balances of a 300 MWh store are checked to about
3e-4 MWh; a 1 MW limit to 1e-6 MW).  Money sums (cashflow, objective,
net values) use the same rule with the sum of the absolute terms as scale,
because the written tables clip values below 1e-9 to zero.

A state carried in from before the horizon (``was ...``) starts the run and
rest automaton below and bounds the first step's ramp.

Minimum run and rest are checked on the ``mode`` column as the model
defines them: a storage's mode binary may be "on" in a step where its flow
is zero (when its minimum output is zero), so the auditor asks whether SOME
assignment of modes that agrees with the mode column wherever a flow is
non-zero satisfies the run and rest rules (a small automaton over the
steps), rather than reading every idle step as off.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Dict, List, Optional

import numpy as np
import pandas as pd

from portfolio.model import END_AT_LEAST, END_EQUAL, PRIOR_CHARGE, PRIOR_IDLE, Portfolio

TOL = 1e-6
# The CSVs are rounded to 6 decimals (docs/outputs.md, "CSV precision"): a value read back is
# within ROUNDING of the schedule's.  A row mixing rounded values with large coefficients (a
# cashflow: price x MW) may then be off by ROUNDING x the sum of its absolute coefficients; that
# check is allowed exactly so much more (the writer's documented precision, not a looser audit).
ROUNDING = 5e-7
MODE_TOL = 1e-6          # the output contract's tolerance for the mode column

# The output contract restated from docs/outputs.md on purpose, not imported from
# portfolio.schedule: if the writer's columns drift from the documented contract, the audit fails.
COLUMNS = {
    "storage": ["charge_mw", "discharge_mw", "soc_mwh", "spill_mw", "mode",
                "routed_in_mw", "routed_out_mw", "supply_in_mw", "pump_mw",
                "content_m3", "discharge_m3_per_s", "spill_m3_per_s", "supply_in_m3_per_s"],
    "supply": ["available_mw", "used_mw", "curtailed_mw"],
    "demand": ["demand_mw"],
    "site": ["import_mw", "export_mw"],
    "connection": ["import_mw", "export_mw", "sell_price", "buy_price", "cashflow"],
    "route": ["flow_mw", "arriving_mw"],
}
ASSET_KEYS = ("net_value", "energy_in_mwh", "energy_out_mwh", "equivalent_full_cycles",
              "curtailed_mwh", "spilled_mwh")


# a store's water columns (empty for a store declared in MWh; check_water)
WATER = ("content_m3", "discharge_m3_per_s", "spill_m3_per_s", "supply_in_m3_per_s")


class _Audit:
    def __init__(self, p: Portfolio, out: Path, tol: float):
        self.p, self.out, self.tol = p, out, tol
        self.T, self.dt = p.horizon.steps, p.horizon.step_hours
        self.times = [ts.isoformat() for ts in p.horizon.index]
        self.problems: List[str] = []
        self.tables: Dict[str, pd.DataFrame] = {}

    # -- reporting ---------------------------------------------------------------
    def bad(self, msg: str) -> None:
        self.problems.append(msg)

    def close(self, name: str, what: str, got, want, scale=None, rounding=0.0) -> None:
        """Per-step equality within tolerance; report the worst step.  ``rounding``: the
        most the CSVs' rounding can move the row (ROUNDING x its absolute coefficients)."""
        got, want = np.asarray(got, dtype=float), np.asarray(want, dtype=float)
        if scale is None:
            scale = np.maximum(np.abs(got), np.abs(want))
        err = (np.abs(got - want) - self.tol * np.maximum(1.0, np.asarray(scale, dtype=float))
               - np.asarray(rounding, dtype=float))
        err = np.atleast_1d(err)
        if err.size and np.nanmax(err) > 0 or np.isnan(err).any():
            t = int(np.nanargmax(err)) if not np.isnan(err).all() else 0
            g, w = np.atleast_1d(got), np.atleast_1d(want)
            where = f" at {self.times[t]}" if g.size == self.T and self.T > 1 else ""
            self.bad(f"{name}: {what}{where}: {g[t]:.9g}, expected {w[t]:.9g}")

    def at_most(self, name: str, what: str, got, limit, scale=None) -> None:
        got = np.atleast_1d(np.asarray(got, dtype=float))
        limit = np.broadcast_to(np.asarray(limit, dtype=float), got.shape)
        if scale is None:
            scale = np.maximum(np.abs(got), np.abs(limit))
        err = got - limit - self.tol * np.maximum(1.0, scale)
        if err.size and (np.nanmax(err) > 0 or np.isnan(err).any()):
            t = int(np.nanargmax(err)) if not np.isnan(err).all() else 0
            self.bad(f"{name}: {what} at {self.times[t] if self.T > t else t}: "
                     f"{got[t]:.9g} above {limit[t]:.9g}")

    def at_least(self, name: str, what: str, got, limit) -> None:
        got = np.atleast_1d(np.asarray(got, dtype=float))
        limit = np.broadcast_to(np.asarray(limit, dtype=float), got.shape)
        err = limit - got - self.tol * np.maximum(1.0, np.maximum(np.abs(got), np.abs(limit)))
        if err.size and (np.nanmax(err) > 0 or np.isnan(err).any()):
            t = int(np.nanargmax(err)) if not np.isnan(err).all() else 0
            self.bad(f"{name}: {what} at {self.times[t] if self.T > t else t}: "
                     f"{got[t]:.9g} below {limit[t]:.9g}")

    def money(self, name: str, what: str, got, want, terms, coef=0.0) -> None:
        """A sum within tolerance; ``coef``: the coefficient of the rounded CSV value in each
        term, one for all or one per term (the sum may move by ROUNDING x |coef| per term:
        a net value, price x step hours x a rounded MW, by ROUNDING x |price| x step hours)."""
        scale = float(np.sum(np.abs(np.asarray(terms, dtype=float)))) if np.size(terms) else 0.0
        if got is None or not isinstance(got, (int, float)) or not math.isfinite(got):
            self.bad(f"{name}: {what} is {got!r}, expected {want:.9g}")
            return
        reach = ROUNDING * float(np.sum(np.broadcast_to(np.abs(np.asarray(coef, dtype=float)),
                                                        np.shape(np.ravel(terms)))))
        if abs(got - want) > self.tol * max(1.0, scale, abs(want)) + reach:
            self.bad(f"{name}: {what} is {got:.9g}, expected {want:.9g}")

    # -- reading -------------------------------------------------------------------
    def read(self, name: str, kind: str) -> Optional[pd.DataFrame]:
        path = self.out / f"{name}.csv"
        if not path.is_file():
            self.bad(f"{name}: {path.name} is missing")
            return None
        try:
            df = pd.read_csv(path, dtype={"time": str, "mode": str}, keep_default_na=False)
        except Exception as exc:            # a broken file is a finding, not a crash
            self.bad(f"{name}: {path.name} cannot be read ({exc})")
            return None
        want = ["time"] + COLUMNS[kind]
        if list(df.columns) != want:
            self.bad(f"{name}: columns {list(df.columns)}, expected {want}")
            return None
        if list(df["time"]) != self.times:
            self.bad(f"{name}: time column does not list the horizon's step starts "
                     f"(first {df['time'].iloc[0] if len(df) else None!r}, expected "
                     f"{self.times[0] if self.times else None!r}; {len(df)} rows for {self.T} steps)")
            return None
        for c in COLUMNS[kind]:
            if c == "mode":
                continue
            vals = pd.to_numeric(df[c], errors="coerce")
            if c in WATER and (vals.isna().all() or self.p.storages[name].mwh_per_m3 is None):
                df[c] = vals.astype(float)          # empty for a store in MWh: check_water says
                continue
            if vals.isna().any():
                self.bad(f"{name}: column {c} has a value that is not a number")
                return None
            df[c] = vals.astype(float)
        self.tables[name] = df
        return df

    def col(self, name, c) -> np.ndarray:
        return self.tables[name][c].to_numpy(dtype=float)

    # -- the checks ----------------------------------------------------------------------
    def run(self) -> None:
        p = self.p
        kinds = {}
        for n in p.storages:
            kinds[n] = "storage"
        for n in p.supplies:
            kinds[n] = "supply"
        for n in p.demands:
            kinds[n] = "demand"
        for n in p.sites:
            kinds[n] = "site"
        for n in p.connections:
            kinds[n] = "connection"
        for r in p.routes:
            kinds[r.name] = "route"
        ok = all(self.read(n, k) is not None for n, k in list(kinds.items()))
        self.summary = self.read_summary()
        if not ok:
            return
        self.check_wide(kinds)
        for s in p.storages.values():
            self.check_storage_limits(s)
            self.check_modes(s)
        self.check_routes_and_balances()
        for i in p.supplies.values():
            self.check_supply(i)
        for d in p.demands.values():
            self.close(d.name, "demand_mw", self.col(d.name, "demand_mw"), p.profile(d.profile))
        self.check_sites()
        self.check_connections()
        if self.summary is not None:
            self.check_summary()

    def read_summary(self) -> Optional[dict]:
        path = self.out / "summary.json"
        if not path.is_file():
            self.bad("summary.json is missing")
            return None
        try:
            s = json.loads(path.read_text(encoding="utf-8"))
        except ValueError as exc:
            self.bad(f"summary.json is not JSON ({exc})")
            return None
        for key in ("status", "objective", "best_bound", "mip_gap", "build_seconds",
                    "solve_seconds", "steps", "step_hours", "caution"):
            if key not in s:
                self.bad(f"summary.json has no {key!r}")
        if s.get("status") not in ("optimal", "feasible"):
            self.bad(f"summary.json: status {s.get('status')!r} for a written schedule")
        if s.get("steps") != self.T:
            self.bad(f"summary.json: steps {s.get('steps')!r}, expected {self.T}")
        if s.get("step_hours") != self.dt:
            self.bad(f"summary.json: step_hours {s.get('step_hours')!r}, expected {self.dt}")
        caution = s.get("caution")
        if not isinstance(caution, str) or not caution.strip() or "\n" in caution:
            self.bad("summary.json: caution is not a one-line text")
        return s

    def check_wide(self, kinds) -> None:
        path = self.out / "schedule.csv"
        if not path.is_file():
            self.bad("schedule.csv is missing")
            return
        wide = pd.read_csv(path, dtype=str, keep_default_na=False)
        want = ["time"] + [f"{n}.{c}" for n, k in kinds.items() for c in COLUMNS[k]]
        if sorted(wide.columns) != sorted(want):
            extra = sorted(set(wide.columns) - set(want))
            missing = sorted(set(want) - set(wide.columns))
            self.bad(f"schedule.csv: columns differ (missing {missing[:4]}, extra {extra[:4]})")
            return
        if list(wide["time"]) != self.times:
            self.bad("schedule.csv: time column does not list the horizon's step starts")
        for n, k in kinds.items():
            for c in COLUMNS[k]:
                w = wide[f"{n}.{c}"]
                if c == "mode":
                    if list(w) != list(self.tables[n]["mode"]):
                        self.bad(f"schedule.csv: {n}.mode differs from {n}.csv")
                    continue
                got = pd.to_numeric(w, errors="coerce").to_numpy(dtype=float)
                if c in WATER and np.isnan(self.col(n, c)).all():     # a store declared in MWh
                    if not np.isnan(got).all():
                        self.bad(f"schedule.csv: {n}.{c} is given, {n}.csv leaves it empty")
                    continue
                self.close("schedule.csv", f"{n}.{c} vs {n}.csv", got, self.col(n, c))

    # storages ---------------------------------------------------------------
    def check_storage_limits(self, s) -> None:
        n = s.name
        c, d = self.col(n, "charge_mw"), self.col(n, "discharge_mw")
        soc, q = self.col(n, "soc_mwh"), self.col(n, "spill_mw")
        for what, v in (("charge_mw", c), ("discharge_mw", d), ("spill_mw", q),
                        ("routed_in_mw", self.col(n, "routed_in_mw")),
                        ("routed_out_mw", self.col(n, "routed_out_mw"))):
            self.at_least(n, f"{what} negative", v, 0.0)
        self.at_most(n, "charge above charge max", c, s.charge_max)
        self.at_most(n, "discharge above discharge max", d, s.discharge_max)
        if not s.spill_allowed:
            self.at_most(n, "spill where spill is not allowed", q, 0.0)
        elif s.spill_max is not None:
            self.at_most(n, "spill above spill max", q, s.spill_max)
        self.close(n, "supply_in_mw vs the store's own supply profile", self.col(n, "supply_in_mw"),
                   self.p.profile(s.supply) if s.supply else np.zeros(self.T))
        self.check_cycles(s, d)
        self.check_water(s, c, d, soc, q)
        self.at_least(n, "soc below soc min", soc, s.soc_min)
        self.at_most(n, "soc above soc max", soc, s.soc_max)
        if self.T:
            slack = self.tol * max(1.0, abs(soc[-1]), abs(s.end_value))
            if s.end_rule == END_AT_LEAST and soc[-1] < s.end_value - slack:
                self.bad(f"{n}: soc at the end {soc[-1]:.9g} below the end rule's {s.end_value:.9g}")
            elif s.end_rule == END_EQUAL and abs(soc[-1] - s.end_value) > slack:
                self.bad(f"{n}: soc at the end {soc[-1]:.9g}, the end rule says equal to {s.end_value:.9g}")
        if s.ramp_mw_per_h is not None and self.T > 1:
            net = d - c
            self.at_most(n, "ramp (change of net output) above the ramp limit",
                         np.abs(np.diff(net)), s.ramp_mw_per_h * self.dt,
                         scale=np.maximum(np.abs(net[1:]), np.abs(net[:-1])))
        if s.ramp_mw_per_h is not None and s.prior_mode is not None and self.T:
            # from the net output declared before the horizon (discharge +, charge -, idle 0)
            first = d[0] - c[0]
            self.at_most(n, "ramp from the output before the horizon to the first step above the ramp limit",
                         abs(first - s.prior_net_mw), s.ramp_mw_per_h * self.dt,
                         scale=max(abs(first), abs(s.prior_net_mw)))

    def check_water(self, s, c, d, soc, q) -> None:
        """A store declared in volume gives its content in m3 and its flows in m3/s beside MWh and
        MW: content_m3 = soc_mwh / e, a flow = MW / e / 3600 (e = energy equivalent, MWh per m3;
        the turbine's water is the content drawn, discharge / discharge efficiency).  A store
        declared in MWh leaves them empty."""
        n, e = s.name, s.mwh_per_m3
        if e is None:
            for col in WATER:
                if not np.isnan(self.col(n, col)).all():
                    self.bad(f"{n}: {col} is given for a store declared in MWh")
            return
        nat = self.col(n, "supply_in_mw")
        for col, want_mwh, coef in (("content_m3", soc, 1.0), ("discharge_m3_per_s", d / s.eta_discharge / 3600.0, 1.0 / s.eta_discharge),
                                    ("spill_m3_per_s", q / 3600.0, 1.0), ("supply_in_m3_per_s", nat / 3600.0, 1.0)):
            got = self.col(n, col)
            # the MWh/MW column is rounded in the CSV too: its rounding, scaled to water, and the water column's own
            self.close(n, f"{col} vs its MWh column / energy equivalent", got, want_mwh / e,
                       rounding=ROUNDING * (1.0 + coef / e))

    def check_cycles(self, s, d) -> None:
        """docs/model.md: per local calendar day (a part day pro rata) and over the horizon."""
        if s.cycles_per_day is None and s.cycles_horizon is None:
            return
        usable = s.soc_max - s.soc_min
        drawn = d * self.dt / s.eta_discharge
        if s.cycles_horizon is not None:
            self.at_most(s.name, "equivalent full cycles over the horizon above the limit",
                         float(drawn.sum()), s.cycles_horizon * usable, scale=float(drawn.sum()))
        if s.cycles_per_day is not None:
            local = pd.to_datetime(pd.Series(self.times), utc=True).dt.tz_convert(self.p.horizon.zone)
            dates = local.dt.date.to_numpy()
            for day in dict.fromkeys(dates):
                members = dates == day
                midnight = pd.Timestamp(day).tz_localize(self.p.horizon.zone)
                after = (pd.Timestamp(day) + pd.Timedelta(days=1)).tz_localize(self.p.horizon.zone)
                share = min(1.0, int(members.sum()) * self.dt / ((after - midnight) / pd.Timedelta(hours=1)))
                got = float(drawn[members].sum())
                self.at_most(s.name, f"equivalent full cycles on {day} above the daily limit",
                             got, s.cycles_per_day * usable * share, scale=got)

    def check_modes(self, s) -> None:
        n = s.name
        c, d = self.col(n, "charge_mw"), self.col(n, "discharge_mw")
        mode = list(self.tables[n]["mode"])
        ch, dc = c > MODE_TOL, d > MODE_TOL
        expect = np.where(ch, np.where(dc, "both", "charge"), np.where(dc, "discharge", "idle"))
        for t in range(self.T):
            if mode[t] != expect[t]:
                self.bad(f"{n}: mode at {self.times[t]} is {mode[t]!r} but the flows say {str(expect[t])!r} "
                         f"(charge {c[t]:.9g}, discharge {d[t]:.9g})")
                return
        # docs/language.md: a minimum output, run or rest makes the modes exclusive
        exclusive = (s.exclusive or s.charge_min > 0 or s.discharge_min > 0
                     or s.min_run_h > 0 or s.min_rest_h > 0)
        if exclusive:
            both = [t for t in range(self.T) if mode[t] == "both"]
            if both:
                self.bad(f"{n}: charges and discharges at once at {self.times[both[0]]} "
                         f"although its modes are exclusive")
        if s.charge_min > 0:
            self.at_least(n, "charge below its minimum when running", np.where(ch, c, np.inf), s.charge_min)
        if s.discharge_min > 0:
            self.at_least(n, "discharge below its minimum when running", np.where(dc, d, np.inf),
                          s.discharge_min)
        R, D = _steps_up(s.min_run_h, self.dt), _steps_up(s.min_rest_h, self.dt)
        if R > 1 or D > 0:
            bad_t = _run_rest_unexplained(mode, s, R, D, exclusive, _start_state(s, R, D, self.dt))
            if bad_t is not None:
                self.bad(f"{n}: no choice of modes matching the mode column satisfies "
                         f"min run {R} step(s) / min rest {D} step(s) (fails at {self.times[bad_t]})")

    # routes and storage balances ------------------------------------------------------
    def check_routes_and_balances(self) -> None:
        p, T, dt = self.p, self.T, self.dt
        arrive_mwh = {k: np.zeros(T) for k in p.storages}
        out_mwh = {k: np.zeros(T) for k in p.storages}
        transfer_mwh = {k: np.zeros(T) for k in p.storages}
        # what the CSVs' rounding may move each sum (ROUNDING x its coefficients, per MW column)
        arrive_coef = {k: 0.0 for k in p.storages}
        out_coef = {k: 0.0 for k in p.storages}
        for r in p.routes:
            src = p.storages[r.source]
            flow_csv = self.col(r.name, "flow_mw")
            if r.kind == "release":
                out = self.col(r.source, "discharge_mw") / src.eta_discharge * dt
                self.close(r.name, "flow_mw (release = discharge / discharge efficiency)",
                           flow_csv, out / dt, rounding=ROUNDING * (1.0 + 1.0 / src.eta_discharge))
                coef = 1.0 / src.eta_discharge
            elif r.kind == "spill":
                out = self.col(r.source, "spill_mw") * dt
                self.close(r.name, "flow_mw (spill)", flow_csv, out / dt, rounding=2 * ROUNDING)
                coef = 1.0
            elif r.kind == "pump":
                # docs/model.md, pumping: the upper store's charge lifts eta_charge * charge / factor
                # of the lower store's MWh; it leaves the lower store's balance like a transfer
                up = p.storages[r.target]
                coef = up.eta_charge / r.factor
                lifted = coef * self.col(r.target, "charge_mw")
                self.close(r.name, "flow_mw (pump = upper charge x charge efficiency / factor)",
                           flow_csv, lifted, rounding=ROUNDING * (1.0 + coef))
                out = lifted * dt
                transfer_mwh[r.source] += out
            else:
                coef = 1.0
                out = flow_csv * dt
                self.at_least(r.name, "transfer flow negative", flow_csv, 0.0)
                transfer_mwh[r.source] += out
            if r.max_mw is not None:
                self.at_most(r.name, "route flow above its max", out / dt, r.max_mw)
            D = int(r.delay_steps)
            arr = np.zeros(T)
            if D > 0:
                arr[:min(D, T)] = r.in_transit / D
            if D < T:
                arr[D:] = r.factor * r.efficiency * out[:T - D]
            self.close(r.name, "arriving_mw", self.col(r.name, "arriving_mw"), arr / dt,
                       rounding=ROUNDING * (1.0 + r.factor * r.efficiency * coef))
            if r.kind != "pump":    # pumped water reaches the upper store as its own charge term
                arrive_mwh[r.target] += arr
                arrive_coef[r.target] += r.factor * r.efficiency * coef
            out_coef[r.source] += coef
            out_mwh[r.source] += out
            if self.summary is not None:
                got = self.summary.get("routes", {}).get(r.name, {}).get("in_transit_end_mwh")
                want = r.factor * r.efficiency * float(out[max(T - D, 0):].sum()) if D > 0 else 0.0
                self.money(r.name, "summary in_transit_end_mwh", got, want, out[max(T - D, 0):])
        pumped = {r.target for r in p.routes if r.kind == "pump"}
        for s in p.storages.values():
            n = s.name
            self.close(n, "pump_mw (the charge of a pumped store, else 0)", self.col(n, "pump_mw"),
                       self.col(n, "charge_mw") if n in pumped else np.zeros(T), rounding=2 * ROUNDING)
            self.close(n, "routed_in_mw", self.col(n, "routed_in_mw"), arrive_mwh[n] / dt,
                       rounding=ROUNDING * (1.0 + arrive_coef[n]))
            self.close(n, "routed_out_mw", self.col(n, "routed_out_mw"), out_mwh[n] / dt,
                       rounding=ROUNDING * (1.0 + out_coef[n]))
            c, d = self.col(n, "charge_mw"), self.col(n, "discharge_mw")
            soc, q = self.col(n, "soc_mwh"), self.col(n, "spill_mw")
            nat = p.profile(s.supply) if s.supply else np.zeros(T)
            prev = np.r_[s.soc_start, soc[:-1]] * (1.0 - s.loss_per_h) ** dt
            terms = [prev, s.eta_charge * c * dt, d * dt / s.eta_discharge, q * dt, nat * dt,
                     arrive_mwh[n], transfer_mwh[n]]
            want = terms[0] + terms[1] - terms[2] - terms[3] + terms[4] + terms[5] - terms[6]
            scale = np.max(np.abs(np.vstack(terms + [soc])), axis=0)
            self.close(n, "energy balance (soc)", soc, want, scale=scale,
                       rounding=ROUNDING * (2.0 + dt * (s.eta_charge + 1.0 / s.eta_discharge + 1.0
                                                        + arrive_coef[n] + out_coef[n])))

    # supplies, sites, connections ------------------------------------------------------------
    def check_supply(self, i) -> None:
        n = i.name
        avail, used, cur = (self.col(n, c) for c in ("available_mw", "used_mw", "curtailed_mw"))
        self.close(n, "available_mw vs the declared profile", avail, self.p.profile(i.profile))
        self.close(n, "used + curtailed = available", used + cur, avail, rounding=3 * ROUNDING)
        self.at_least(n, "used_mw negative", used, 0.0)
        self.at_least(n, "curtailed_mw negative", cur, 0.0)
        if not i.curtail_allowed:
            self.at_most(n, "curtailed although curtailment is not allowed", cur, 0.0)
        if "site" not in i.targets:
            into = sum((self.col(k, "charge_mw") for k in i.targets), np.zeros(self.T))
            self.at_most(n, "used more than its target stores charge", used, into)

    def check_sites(self) -> None:
        p, T = self.p, self.T
        for s in p.sites.values():
            n = s.name
            imp, exp = self.col(n, "import_mw"), self.col(n, "export_mw")
            self.at_least(n, "import_mw negative", imp, 0.0)
            self.at_least(n, "export_mw negative", exp, 0.0)
            if s.export_max is not None:
                self.at_most(n, "export above the site's export max", exp, s.export_max)
            if s.import_max is not None:
                self.at_most(n, "import above the site's import max", imp, s.import_max)
            terms = [imp, exp]
            inj = np.zeros(T)
            for i in p.supplies.values():
                if i.site == n:
                    inj = inj + self.col(i.name, "used_mw")
                    terms.append(self.col(i.name, "used_mw"))
            for k in [x for x in p.storages.values() if x.site == n]:
                inj = inj + self.col(k.name, "discharge_mw") - self.col(k.name, "charge_mw")
                terms += [self.col(k.name, "discharge_mw"), self.col(k.name, "charge_mw")]
            for dm in p.demands.values():
                if dm.site == n:
                    inj = inj - self.col(dm.name, "demand_mw")
                    terms.append(self.col(dm.name, "demand_mw"))
            scale = np.max(np.abs(np.vstack(terms)), axis=0)
            self.close(n, "site balance (export - import = net injection of its assets)",
                       exp - imp, inj, scale=scale, rounding=ROUNDING * (len(terms) + 2))
            self.check_split(s)

    def check_split(self, site) -> None:
        """Supply fed straight into stores: can used_mw be split among its targets?

        Per step, a flow problem: each supply's used power goes to its target
        stores (at most their total charge) or, if "site" is a target, to the site.
        A store that charges only from its sources (``charge only from``) must get
        ALL of its charge that way (none from the site, so none from the grid): its
        edge to the sink has a lower bound equal to its charge.  Solved as a
        circulation with lower bounds (each forced edge's amount moved to a super
        source and sink): feasible iff the maximum flow saturates them.
        """
        import networkx as nx
        p = self.p
        infl = [i for i in p.supplies.values() if i.site == site.name and any(t != "site" for t in i.targets)]
        only = [k for k in p.storages.values() if k.site == site.name and k.charge_sources is not None]
        if not infl and not only:
            return
        for t in range(self.T):
            g = nx.DiGraph()
            need = 0.0
            for i in infl:
                u = max(float(self.col(i.name, "used_mw")[t]), 0.0)
                need += u
                g.add_edge("S", ("i", i.name), capacity=u)      # src -> supply, forced to u
                for tg in i.targets:
                    if tg == "site":
                        g.add_edge(("i", i.name), "sink")     # unbounded: the site takes the rest
                    else:
                        g.add_edge(("i", i.name), ("k", tg))
                        if p.storages[tg].charge_sources is None:
                            g.add_edge(("k", tg), "sink",
                                       capacity=max(float(self.col(tg, "charge_mw")[t]), 0.0))
            g.add_edge("src", "T", capacity=need)
            forced = 0.0
            for k in only:
                c = max(float(self.col(k.name, "charge_mw")[t]), 0.0)
                forced += c
                g.add_edge(("k", k.name), "T", capacity=c)     # store -> sink, forced to c
            g.add_edge("S", "sink", capacity=forced)
            g.add_edge("sink", "src")                           # the circulation closes
            got = nx.maximum_flow_value(g, "S", "T")
            if need + forced - got > self.tol * max(1.0, need + forced):
                what = (f"supplies fed straight into stores ({need:.9g} MW used) cannot be split among their "
                        f"targets" if not only else
                        f"supplies fed straight into stores ({need:.9g} MW used) cannot be split among their "
                        f"targets while the stores that charge only from them ({forced:.9g} MW) get all "
                        f"their charge from them (some came from the grid)")
                self.bad(f"{site.name}: at {self.times[t]} {what}")
                return

    def check_connections(self) -> None:
        p, T, dt = self.p, self.T, self.dt
        exp_all, imp_all = np.zeros(T), np.zeros(T)
        for cn in p.connections.values():
            n = cn.name
            imp, exp = self.col(n, "import_mw"), self.col(n, "export_mw")
            self.at_least(n, "import_mw negative", imp, 0.0)
            self.at_least(n, "export_mw negative", exp, 0.0)
            if cn.export_max is not None:
                self.at_most(n, "export above the connection's export max", exp, cn.export_max)
            if cn.import_max is not None:
                self.at_most(n, "import above the connection's import max", imp, cn.import_max)
            net = np.zeros(T)
            terms = [imp, exp]
            for s in [x for x in p.sites.values() if x.connection == n]:
                net = net + self.col(s.name, "export_mw") - self.col(s.name, "import_mw")
                terms += [self.col(s.name, "export_mw"), self.col(s.name, "import_mw")]
            self.close(n, "net flow = sum of its sites' net flows", exp - imp, net,
                       scale=np.max(np.abs(np.vstack(terms)), axis=0), rounding=ROUNDING * len(terms))
            sell, buy = p.price(cn.sell), p.price(cn.buy)
            self.close(n, "sell_price vs the declared price", self.col(n, "sell_price"), sell)
            self.close(n, "buy_price vs the declared price", self.col(n, "buy_price"), buy)
            both = (imp > self.tol) & (exp > self.tol)
            if cn.exclusive and both.any():
                self.bad(f"{n}: imports and exports at once at {self.times[int(np.argmax(both))]} "
                         f"although direction is exclusive")
            cheap = both & (buy < sell)
            if cheap.any():
                self.bad(f"{n}: imports and exports at once at {self.times[int(np.argmax(cheap))]} "
                         f"while buying is cheaper than selling")
            cash = dt * (sell * exp - buy * imp)
            self.close(n, "cashflow = step hours x (sell x export - buy x import)",
                       self.col(n, "cashflow"), cash,
                       scale=dt * np.maximum(np.abs(sell * exp), np.abs(buy * imp)),
                       rounding=ROUNDING * (1.0 + dt * (np.abs(sell) + np.abs(buy))))
            exp_all, imp_all = exp_all + exp, imp_all + imp
        cap = p.cap
        if cap is not None:
            if cap.export_max is not None:
                self.at_most(cap.name, "total export above the portfolio-wide cap", exp_all, cap.export_max)
            if cap.import_max is not None:
                self.at_most(cap.name, "total import above the portfolio-wide cap", imp_all, cap.import_max)

    # summary ---------------------------------------------------------------------------
    def check_summary(self) -> None:
        p, T, dt, S = self.p, self.T, self.dt, self.summary
        cash_terms, wear_terms = [], []
        for cn in p.connections:
            cash_terms.append(self.col(cn, "cashflow"))
        for s in p.storages.values():
            wear_terms.append(s.wear * self.col(s.name, "discharge_mw") * dt)
        cash = float(np.sum(cash_terms)) if cash_terms else 0.0
        wear = float(np.sum(wear_terms)) if wear_terms else 0.0
        all_terms = np.concatenate([np.ravel(x) for x in cash_terms + wear_terms]) if cash_terms else []
        self.money("summary.json", "objective (sum of cashflows - wear)", S.get("objective"),
                   cash - wear, all_terms, coef=max([1.0] + [s.wear * dt for s in p.storages.values()]))

        def entry(section, name):
            e = S.get(section, {}).get(name)
            if not isinstance(e, dict):
                self.bad(f"summary.json: no entry for {section} {name!r}")
                return None
            missing = [k for k in ASSET_KEYS if k not in e]
            if missing:
                self.bad(f"summary.json: {section} {name!r} lacks {missing}")
                return None
            return e

        # energies
        for s in p.storages.values():
            e = entry("storages", s.name)
            if e is None:
                continue
            c, d, q = (self.col(s.name, x) for x in ("charge_mw", "discharge_mw", "spill_mw"))
            self.money(s.name, "summary energy_in_mwh", e["energy_in_mwh"], float(c.sum()) * dt, c * dt, coef=dt)
            self.money(s.name, "summary energy_out_mwh", e["energy_out_mwh"], float(d.sum()) * dt, d * dt, coef=dt)
            self.money(s.name, "summary spilled_mwh", e["spilled_mwh"], float(q.sum()) * dt, q * dt, coef=dt)
            # docs/model.md: equivalent full cycles = MWh drawn from the store to discharge
            # (d / eta_discharge) over the usable capacity soc_max - soc_min; none for a store
            # that cannot charge (or has no usable capacity)
            usable = s.soc_max - s.soc_min
            if s.charge_max > 0 and usable > 0:
                drawn = d * dt / s.eta_discharge
                self.money(s.name, "summary equivalent_full_cycles", e["equivalent_full_cycles"],
                           float(drawn.sum()) / usable, drawn / usable)
            elif e["equivalent_full_cycles"] is not None:
                self.bad(f"{s.name}: summary equivalent_full_cycles is {e['equivalent_full_cycles']!r} "
                         "for a store that does not cycle (it cannot charge)")
            if "soc_end_mwh" in e and T:
                self.money(s.name, "summary soc_end_mwh", e["soc_end_mwh"],
                           float(self.col(s.name, "soc_mwh")[-1]), [self.col(s.name, "soc_mwh")[-1]])
        for i in p.supplies.values():
            e = entry("supplies", i.name)
            if e is None:
                continue
            for key, colname in (("energy_in_mwh", "available_mw"), ("energy_out_mwh", "used_mw"),
                                 ("curtailed_mwh", "curtailed_mw")):
                v = self.col(i.name, colname)
                self.money(i.name, f"summary {key}", e[key], float(v.sum()) * dt, v * dt, coef=dt)
        for section, names in (("sites", p.sites), ("connections", p.connections)):
            for n in names:
                e = entry(section, n)
                if e is None:
                    continue
                imp, exp = self.col(n, "import_mw"), self.col(n, "export_mw")
                self.money(n, "summary energy_in_mwh", e["energy_in_mwh"], float(imp.sum()) * dt, imp * dt, coef=dt)
                self.money(n, "summary energy_out_mwh", e["energy_out_mwh"], float(exp.sum()) * dt, exp * dt, coef=dt)
        for dm in p.demands.values():
            e = entry("demands", dm.name)
            if e is not None:
                v = self.col(dm.name, "demand_mw")
                self.money(dm.name, "summary energy_in_mwh", e["energy_in_mwh"], float(v.sum()) * dt, v * dt, coef=dt)

        # net value attribution
        price = {}
        for cn in p.connections.values():
            exp = self.col(cn.name, "export_mw")
            price[cn.name] = np.where(exp > 0, p.price(cn.sell), p.price(cn.buy))
        total_rev, total_terms = 0.0, []
        for site in p.sites.values():
            pr = price.get(site.connection, np.zeros(T))
            site_rev, site_terms = 0.0, []
            direct = {k for i in p.supplies.values() if i.site == site.name for k in i.targets if k != "site"}
            group_got, group_want, group_terms, group_coefs = 0.0, 0.0, [], []
            for k in [x for x in p.storages.values() if x.site == site.name]:
                e = entry("storages", k.name)
                d, c = self.col(k.name, "discharge_mw"), self.col(k.name, "charge_mw")
                terms = np.r_[dt * pr * d, dt * pr * c, k.wear * d * dt]
                coefs = np.r_[dt * np.abs(pr), dt * np.abs(pr), np.full(T, k.wear * dt)]
                want = float(np.sum(dt * pr * (d - c))) - k.wear * float(d.sum()) * dt
                got = e["net_value"] if e else None
                if k.name in direct:        # its own charge includes supply: check as a group
                    group_want += want
                    group_terms.append(terms)
                    group_coefs.append(coefs)
                    group_got = None if got is None or group_got is None else group_got + got
                else:
                    self.money(k.name, "summary net value (attribution)", got, want, terms, coef=coefs)
                site_rev += got if isinstance(got, (int, float)) else 0.0
                site_terms.append(terms)
            for i in p.supplies.values():
                if i.site != site.name:
                    continue
                e = entry("supplies", i.name)
                u = self.col(i.name, "used_mw")
                want = float(np.sum(dt * pr * u))
                got = e["net_value"] if e else None
                if any(t != "site" for t in i.targets):
                    group_want += want
                    group_terms.append(dt * pr * u)
                    group_coefs.append(dt * np.abs(pr))
                    group_got = None if got is None or group_got is None else group_got + got
                else:
                    self.money(i.name, "summary net value (attribution)", got, want, dt * pr * u,
                               coef=dt * np.abs(pr))
                site_rev += got if isinstance(got, (int, float)) else 0.0
                site_terms.append(dt * pr * u)
            for dm in p.demands.values():
                if dm.site != site.name:
                    continue
                e = entry("demands", dm.name)
                v = self.col(dm.name, "demand_mw")
                got = e["net_value"] if e else None
                self.money(dm.name, "summary net value (attribution)", got, -float(np.sum(dt * pr * v)),
                           dt * pr * v, coef=dt * np.abs(pr))
                site_rev += got if isinstance(got, (int, float)) else 0.0
                site_terms.append(dt * pr * v)
            if group_terms:
                self.money(site.name, "summary net value of the stores and supplies that feed them "
                           "(attribution, as a group)", group_got, group_want, np.concatenate(group_terms),
                           coef=np.concatenate(group_coefs))
            e = entry("sites", site.name)
            flat = np.concatenate([np.ravel(x) for x in site_terms]) if site_terms else []
            if e is not None:
                self.money(site.name, "summary net value = sum of its assets'", e["net_value"], site_rev, flat)
            total_rev += site_rev
            total_terms.append(flat)
        flat = np.concatenate([np.ravel(x) for x in total_terms]) if total_terms else []
        self.money("summary.json", "sum of the assets' net values vs the objective", total_rev,
                   S.get("objective") if isinstance(S.get("objective"), (int, float)) else float("nan"), flat)
        for cn in p.connections:
            e = entry("connections", cn)
            if e is not None:
                v = self.col(cn, "cashflow")
                self.money(cn, "summary net value = its cashflow", e["net_value"], float(v.sum()), v, coef=1.0)


def _steps_up(hours: float, dt: float) -> int:
    """Whole steps, rounded up (docs/language.md: run, rest and carried-in times)."""
    return int(math.ceil(hours / dt - 1e-9)) if hours > 0 else 0


def _start_state(s, R: int, D: int, dt: float) -> tuple:
    """The automaton's state before step 0 from the declared 'was ...' (docs/language.md):
    (uc, ud, steps into a charge run, steps into a discharge run, rest steps still owed).
    Not declared: idle and rested.  A duration left out is longer than any rule."""
    if s.prior_mode is None:
        return (0, 0, 0, 0, 0)
    steps = None if s.prior_h is None else _steps_up(s.prior_h, dt)
    if s.prior_mode == PRIOR_IDLE:
        return (0, 0, 0, 0, 0 if steps is None else max(D - steps, 0))
    ran = R if steps is None else min(steps, R)
    if s.prior_mode == PRIOR_CHARGE:
        return (1, 0, ran, 0, 0)
    return (0, 1, 0, ran, 0)


def _run_rest_unexplained(mode, s, R: int, D: int, exclusive: bool,
                          start: tuple = (0, 0, 0, 0, 0)) -> Optional[int]:
    """First step at which no mode assignment can explain the mode column, or None.

    Binaries uc, ud per step: 1 where that mode's flow shows, 0 where it does
    not and the mode has a minimum output (flow >= min x binary), free
    otherwise; a mode the store cannot use (max 0) is always 0.  Rules (from
    the model): before the horizon the state ``start`` (default idle and
    rested; see :func:`_start_state`); a run of either mode lasts at least R
    steps unless the horizon cuts it; after a run ends the store is idle
    (neither mode) for D steps; exclusive: never both.
    """
    T = len(mode)

    def allowed(t, m):
        shows = mode[t] in (m, "both")
        if shows:
            return (1,)
        mx = s.charge_max if m == "charge" else s.discharge_max
        mn = s.charge_min if m == "charge" else s.discharge_min
        if mx <= 0 or mn > 0:
            return (0,)
        return (0, 1)

    # state: (uc, ud, run_c, run_d, rest_left)
    states = {start}
    for t in range(T):
        nxt = set()
        for (uc, ud, kc, kd, rest) in states:
            for nc in allowed(t, "charge"):
                for nd in allowed(t, "discharge"):
                    if exclusive and nc and nd:
                        continue
                    if R > 1 and ((uc and not nc and kc < R) or (ud and not nd and kd < R)):
                        continue
                    stop = (uc and not nc) or (ud and not nd)
                    if D > 0 and (rest > 0 or stop) and (nc or nd):
                        continue
                    new_rest = max(rest - 1, D - 1 if (stop and D > 0) else 0, 0)
                    nxt.add((nc, nd, min(kc + 1, R) if nc else 0, min(kd + 1, R) if nd else 0, new_rest))
        if not nxt:
            return t
        states = nxt
    return None


def audit(portfolio: Portfolio, out_dir, tol: float = TOL) -> List[str]:
    """Re-check the output folder ``out_dir`` of a dispatch of ``portfolio``."""
    a = _Audit(portfolio, Path(out_dir), tol)
    a.run()
    return a.problems
