"""Regenerate the invented demo profiles under examples/*/profiles/.

The scenario is made up: invented places, invented assets, invented numbers
shaped only roughly like real days (a midday solar bell, an evening price
peak).  Run: python examples/make_profiles.py
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent


def _write(df: pd.DataFrame, path: Path) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    df.to_csv(path, index=False, float_format="%.3f")


def price_curve(index: pd.DatetimeIndex, rng, base=55.0, swing=35.0, noise=6.0) -> np.ndarray:
    h = index.hour + index.minute / 60.0
    shape = (-0.6 * np.exp(-((h - 13) ** 2) / 8)        # midday solar dip
             + 1.0 * np.exp(-((h - 19) ** 2) / 4)       # evening peak
             + 0.4 * np.exp(-((h - 8) ** 2) / 3))       # morning shoulder
    return base + swing * shape + rng.normal(0, noise, len(index))


def solar_curve(index: pd.DatetimeIndex, peak_mw: float, rng) -> np.ndarray:
    h = index.hour + index.minute / 60.0
    bell = np.clip(np.sin((h - 6) / 13 * math.pi), 0, None) ** 1.5
    cloud = np.clip(1 - rng.gamma(1.2, 0.12, len(index)), 0.2, 1)
    return peak_mw * bell * cloud


def main() -> None:
    rng = np.random.default_rng(20270301)
    # kestrel_bay: one battery beside solar, 48 h, prices hourly, solar every 15 min.
    hourly = pd.date_range("2027-03-01T00:00", periods=48, freq="h", tz="UTC")
    quarter = pd.date_range("2027-03-01T00:00", periods=48 * 4, freq="15min", tz="UTC")
    stamp = lambda idx: idx.strftime("%Y-%m-%dT%H:%M%z").str.replace(r"(\d\d)(\d\d)$", r"\1:\2", regex=True)
    _write(pd.DataFrame({"time": stamp(hourly), "price": price_curve(hourly, rng)}),
           HERE / "kestrel_bay/profiles/spot.csv")
    _write(pd.DataFrame({"time": stamp(quarter), "mw": solar_curve(quarter, 18.0, rng)}),
           HERE / "kestrel_bay/profiles/pv.csv")
    _write(pd.DataFrame({"time": stamp(hourly), "mw": 1.5 + 0.8 * np.sin(np.arange(48) / 24 * 2 * math.pi) ** 2}),
           HERE / "kestrel_bay/profiles/plant.csv")

    # heron_flats: two sites behind one connection, 24 h at 30 min, local zone.
    half = pd.date_range("2027-06-14T00:00", periods=48, freq="30min", tz="Europe/Lisbon")
    _write(pd.DataFrame({"time": stamp(half), "eur_per_mwh": price_curve(half, rng, base=70, swing=50)}),
           HERE / "heron_flats/profiles/day_ahead.csv")
    _write(pd.DataFrame({"time": stamp(half), "kw": 1000 * solar_curve(half, 6.0, rng)}),
           HERE / "heron_flats/profiles/roof_pv.csv")
    _write(pd.DataFrame({"time": stamp(half), "mw": 0.8 + 0.4 * rng.random(48)}),
           HERE / "heron_flats/profiles/cold_store.csv")

    # glen_cascade: two reservoirs in cascade, 72 h hourly, river flow after rain.
    h72 = pd.date_range("2027-10-04T00:00", periods=72, freq="h", tz="UTC")
    river = 6 + 10 * np.exp(-((np.arange(72) - 20) ** 2) / 60) + rng.normal(0, 0.3, 72)
    _write(pd.DataFrame({"time": stamp(h72), "price": price_curve(h72, rng, base=60, swing=40)}),
           HERE / "glen_cascade/profiles/prices.csv")
    _write(pd.DataFrame({"time": stamp(h72), "mw": np.clip(river, 0, None)}),
           HERE / "glen_cascade/profiles/river.csv")

    # ridge_and_river: four sites on two connections, 48 h at 30 min.
    h48 = pd.date_range("2027-11-08T00:00", periods=96, freq="30min", tz="UTC")
    _write(pd.DataFrame({"time": stamp(h48), "north": price_curve(h48, rng, base=62, swing=45),
                         "valley": price_curve(h48, rng, base=58, swing=30)}),
           HERE / "ridge_and_river/profiles/prices.csv")
    _write(pd.DataFrame({"time": stamp(h48), "mw": solar_curve(h48, 12.0, rng)}),
           HERE / "ridge_and_river/profiles/sunfield_pv.csv")
    stream = 4 + 3 * np.exp(-((np.arange(96) - 40) ** 2) / 200) + rng.normal(0, 0.2, 96)
    _write(pd.DataFrame({"time": stamp(h48), "mw": np.clip(stream, 0, None)}),
           HERE / "ridge_and_river/profiles/stream.csv")
    _write(pd.DataFrame({"time": stamp(h48), "mw": 1.2 + 0.6 * (h48.hour.isin(range(7, 19)))}),
           HERE / "ridge_and_river/profiles/kiln_load.csv")

    # corrie_steps: three pools down one glen, the lower two a pumped pair, 48 h hourly.
    # Its own generator, so the profiles above stay as they were.
    rng = np.random.default_rng(20270913)
    h48c = pd.date_range("2027-09-13T00:00", periods=48, freq="h", tz="UTC")
    burn = 3 + 5 * np.exp(-((np.arange(48) - 30) ** 2) / 40) + rng.normal(0, 0.2, 48)
    _write(pd.DataFrame({"time": stamp(h48c), "price": price_curve(h48c, rng, base=58, swing=48)}),
           HERE / "corrie_steps/profiles/prices.csv")
    _write(pd.DataFrame({"time": stamp(h48c), "mw": np.clip(burn, 0, None)}),
           HERE / "corrie_steps/profiles/burn.csv")


if __name__ == "__main__":
    main()
