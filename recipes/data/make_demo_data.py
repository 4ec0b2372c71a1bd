"""Write the invented demo data sets (all seeded; no real firm or building) next to this file.

    python recipes/data/make_demo_data.py

deliveries.csv  Harbour Lane Deliveries: minutes per delivery route (learnopt.demo.make_data)
blend.csv       Copperfield Paints: a test panel's reflectance as a blend of four base tints
quality.csv     Northfold Ceramics: pass/fail of fired tiles from two production lines
bike_stops.csv  Lanternfield bike couriers: drop points (km east/north of the district office) with
                weekly refills needed (learnopt.demo.make_bike_stops)
energy.csv      Marlow Street offices: daily electricity use (cooling, heating is on gas) by
                outdoor temperature band
services.csv    Tollbridge Parcel Co.: which service (standard, express, freight) each parcel was
                booked on, by weight, distance and sender type
Each file is written atomically (a temporary file renamed into place).
"""
from pathlib import Path

import numpy as np
import pandas as pd

from learnopt.interface.demo import make_bike_stops, make_data

HERE = Path(__file__).resolve().parent


def blend(n: int = 160, seed: int = 11) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    tints = rng.uniform(0.05, 0.95, size=(n, 4))                # each base tint's reflectance per wavelength
    share = np.array([0.45, 0.30, 0.25, 0.0])                   # true recipe (the fourth tint unused)
    panel = tints @ share + rng.normal(0, 0.01, n)
    return pd.DataFrame({"wavelength_nm": np.linspace(400, 700, n).round(1), "ochre": tints[:, 0].round(4),
                         "umber": tints[:, 1].round(4), "sienna": tints[:, 2].round(4),
                         "slate": tints[:, 3].round(4), "panel": panel.round(4)})


def quality(n: int = 500, seed: int = 5) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    line = rng.choice(["A", "B"], n)
    kiln_temp = rng.normal(1180, 15, n)
    moisture = rng.gamma(4, 0.5, n)
    glaze_mm = rng.normal(0.8, 0.1, n)
    score = 0.08 * (kiln_temp - 1180) - 0.9 * (moisture - 2) + 6 * (glaze_mm - 0.8) + 0.6 * (line == "A")
    passed = np.where(score + rng.logistic(0, 0.8, n) > 0, "pass", "fail")
    return pd.DataFrame({"line": line, "kiln_temp_c": kiln_temp.round(1), "moisture_pct": moisture.round(2),
                         "glaze_mm": glaze_mm.round(3), "result": passed})


def energy(n: int = 730, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    temp = rng.normal(12, 8, n)
    band = pd.cut(temp, [-np.inf, 5, 15, 22, np.inf], labels=["b1_cold", "b2_mild", "b3_warm", "b4_hot"])
    occupancy = rng.uniform(0.2, 1.0, n)
    weekday = rng.random(n) < 5 / 7
    base = 800 + 450 * occupancy + 120 * weekday
    cooling = 35 * np.maximum(temp - 14, 0)
    kwh = base + cooling + rng.gamma(2, 40, n)
    return pd.DataFrame({"outdoor_c": temp.round(1), "band": band.astype(str), "occupancy": occupancy.round(3),
                         "weekday": weekday.astype(int), "kwh": kwh.round(1)})


def services(n: int = 900, seed: int = 8) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    weight = rng.gamma(2.0, 4.0, n)
    distance = rng.uniform(2, 320, n)
    sender = rng.choice(["business", "household"], n, p=[0.4, 0.6])
    business = sender == "business"
    score = np.column_stack([np.zeros(n),                                     # standard
                             0.012 * distance - 1.5 + 0.8 * business,         # express
                             0.30 * weight - 3.5 + 0.004 * distance])         # freight
    chance = np.exp(score) / np.exp(score).sum(axis=1, keepdims=True)
    booked = (chance.cumsum(axis=1) > rng.random((n, 1))).argmax(axis=1)
    return pd.DataFrame({"weight_kg": weight.round(2), "distance_km": distance.round(1), "sender": sender,
                         "service": np.array(["standard", "express", "freight"])[booked]})


def write(frame: pd.DataFrame, name: str) -> Path:
    out = HERE / name
    tmp = out.with_suffix(".csv.tmp")
    frame.to_csv(tmp, index=False)
    tmp.replace(out)
    return out


if __name__ == "__main__":
    for frame, name in ((make_data(), "deliveries.csv"), (blend(), "blend.csv"), (quality(), "quality.csv"),
                        (energy(), "energy.csv"), (make_bike_stops(), "bike_stops.csv"),
                        (services(), "services.csv")):
        print(f"wrote {write(frame, name)}")
