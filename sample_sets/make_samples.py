"""Write the invented demo tables in this folder (fixed seed, reproducible).

Run ``python sample_sets/make_samples.py`` to regenerate every CSV next to this
script; the same NumPy version gives byte-identical files. ``--check`` instead
compares a linear model with a small MLP on each table (see ``check_nonlinearity``). Every scenario is
invented; the formulas below are the whole truth about each table. Each table
has nonlinear structure (thresholds, interactions, saturation), a few categorical
columns, some missing cells, a row identifier the profile should ignore, and the
target as the last column.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261201
HERE = Path(__file__).resolve().parent


def _holes(rng, df: pd.DataFrame, columns, share: float) -> None:
    """Blank out ``share`` of the cells of ``columns`` at random (missing values)."""
    for c in columns:
        mask = rng.random(len(df)) < share
        df.loc[mask, c] = np.nan


def _sigmoid(z):
    return 1.0 / (1.0 + np.exp(-z))


def orchard_water(rng, n=3000) -> pd.DataFrame:
    """Litres of water drawn per orchard block per day: zero on and after rainy days."""
    day = rng.integers(0, 365, n)
    date = pd.Timestamp("2025-01-01") + pd.to_timedelta(day, unit="D")
    block = rng.choice([f"B{i:02d}" for i in range(1, 13)], n)
    crop = rng.choice(["apple", "pear", "cherry", "plum"], n, p=[0.4, 0.25, 0.2, 0.15])
    soil = rng.choice(["sand", "loam", "clay"], n, p=[0.3, 0.5, 0.2])
    season = np.sin(2 * np.pi * (day - 100) / 365)
    max_temp = 17 + 11 * season + rng.normal(0, 3.5, n)
    rain = np.where(rng.random(n) < 0.35, rng.gamma(1.2, 6.0, n), 0.0)
    rain_prev = np.where(rng.random(n) < 0.35, rng.gamma(1.2, 6.0, n), 0.0)
    humidity = np.clip(55 - 1.2 * (max_temp - 17) + 0.8 * rain + rng.normal(0, 9, n), 10, 100)
    age = rng.integers(2, 40, n)
    canopy = np.clip(rng.beta(4, 2, n), 0.05, 1.0)
    crop_need = pd.Series(crop).map({"apple": 1.0, "pear": 0.9, "cherry": 1.25,
                                     "plum": 0.8}).to_numpy()
    soil_drain = pd.Series(soil).map({"sand": 1.35, "loam": 1.0, "clay": 0.7}).to_numpy()
    # evaporative demand grows faster than linearly with heat, falls with humidity
    demand = np.maximum(max_temp - 12, 0) ** 1.5 * (1.3 - humidity / 100)
    # young trees need little, mature ones level off
    size = np.tanh(age / 12) * canopy
    wet = rain + 0.6 * rain_prev
    need = 9.0 * demand * size * crop_need * soil_drain - 18.0 * wet
    water = np.maximum(need + rng.normal(0, 6, n), 0.0)
    water[wet > 8] = 0.0  # no watering after a soaking
    df = pd.DataFrame({
        "record_id": [f"OW-{i:05d}" for i in range(1, n + 1)],
        "date": date.strftime("%Y-%m-%d"),
        "block": block, "crop": crop, "soil": soil,
        "tree_age_years": age, "canopy_cover": canopy.round(3),
        "max_temp_c": max_temp.round(1), "humidity_pct": humidity.round(1),
        "rain_mm": rain.round(1), "rain_prev_day_mm": rain_prev.round(1),
        "sensor_firmware": "v2.3",
        "water_drawn_litres": water.round(1),
    })
    _holes(rng, df, ["max_temp_c", "humidity_pct", "canopy_cover", "soil"], 0.04)
    return df


def greenhouse_temp(rng, n=3000) -> pd.DataFrame:
    """Change of the inside temperature over the next hour (degrees C, signed)."""
    hour = rng.integers(0, 24, n)
    zone = rng.choice(["north", "south", "east", "propagation"], n)
    vent = rng.choice(["closed", "half", "open"], n, p=[0.45, 0.3, 0.25])
    heater = rng.choice(["off", "on"], n, p=[0.7, 0.3])
    screen = rng.choice(["none", "shade", "thermal"], n)
    outside = 8 + 9 * np.sin(2 * np.pi * (hour - 9) / 24) + rng.normal(0, 4, n)
    inside = outside + 6 + rng.normal(0, 3, n) + 4 * (heater == "on")
    sun = np.maximum(np.sin(np.pi * (hour - 6) / 14), 0) * rng.uniform(150, 900, n)
    humidity = np.clip(rng.normal(70, 12, n), 25, 100)
    vent_open = pd.Series(vent).map({"closed": 0.0, "half": 0.5, "open": 1.0}).to_numpy()
    shade = pd.Series(screen).map({"none": 1.0, "shade": 0.55, "thermal": 0.8}).to_numpy()
    gap = inside - outside
    # solar gain saturates; venting loss grows with the gap times the opening;
    # heaters push up strongly only while the room is below 18 C
    gain = 3.2 * np.tanh(sun * shade / 450)
    loss = 0.22 * gap * (0.25 + vent_open) ** 1.3
    heat = np.where(heater == "on", 2.5 * _sigmoid((18 - inside) / 1.5), 0.0)
    zone_eff = pd.Series(zone).map({"north": -0.3, "south": 0.4, "east": 0.0,
                                    "propagation": 0.2}).to_numpy()
    change = gain - loss + heat + zone_eff - 0.01 * (humidity - 70) + rng.normal(0, 0.35, n)
    df = pd.DataFrame({
        "reading_id": np.arange(100001, 100001 + n),
        "zone": zone, "vent": vent, "heater": heater, "screen": screen,
        "hour": hour, "outside_temp_c": outside.round(2), "inside_temp_c": inside.round(2),
        "solar_w_m2": sun.round(0), "humidity_pct": humidity.round(1),
        "temp_change_next_hour": change.round(3),
    })
    _holes(rng, df, ["solar_w_m2", "humidity_pct", "screen"], 0.05)
    return df


def kiln_batches(rng, n=2500) -> pd.DataFrame:
    """Whether a ceramics kiln batch passes inspection (yes / no)."""
    kiln = rng.choice(["K1", "K2", "K3", "K4"], n)
    clay = rng.choice(["stoneware", "porcelain", "earthenware"], n, p=[0.45, 0.3, 0.25])
    shift = rng.choice(["early", "late", "night"], n)
    target_temp = pd.Series(clay).map({"stoneware": 1240.0, "porcelain": 1290.0,
                                       "earthenware": 1080.0}).to_numpy()
    peak = target_temp + rng.normal(0, 28, n)
    ramp = rng.uniform(40, 220, n)  # degrees per hour
    hold = rng.uniform(5, 60, n)
    moisture = np.clip(rng.gamma(2.0, 1.2, n), 0.1, 12)
    load = rng.uniform(80, 420, n)
    kiln_drift = pd.Series(kiln).map({"K1": 0.0, "K2": 6.0, "K3": -9.0, "K4": 14.0}).to_numpy()
    # passing needs the peak inside a window around the clay's temperature (a bump,
    # not a slope), a ramp that is not too fast for wet or heavy loads, and enough hold
    off = (peak + kiln_drift - target_temp) / 22
    window = np.exp(-off ** 2)
    stress = (ramp / 120) ** 2 * (0.6 + moisture / 3) * (load / 250)
    z = 5.0 * window - 2.0 * stress + 1.2 * np.tanh((hold - 15) / 8) - 1.5 \
        - 0.3 * (shift == "night")
    passed = rng.random(n) < _sigmoid(2.5 * z)
    df = pd.DataFrame({
        "batch_id": [f"KB{i:04d}" for i in range(1, n + 1)],
        "kiln": kiln, "clay": clay, "shift": shift,
        "peak_temp_c": peak.round(1), "ramp_c_per_hour": ramp.round(1),
        "hold_minutes": hold.round(1), "clay_moisture_pct": moisture.round(2),
        "load_kg": load.round(1),
        "passes_inspection": np.where(passed, "yes", "no"),
    })
    _holes(rng, df, ["clay_moisture_pct", "hold_minutes", "shift"], 0.04)
    return df


def coffee_roast(rng, n=2400) -> pd.DataFrame:
    """The grade of a coffee roast: light, medium, medium_dark or dark."""
    origin = rng.choice(["ethiopia", "colombia", "brazil", "sumatra", "kenya"], n)
    process = rng.choice(["washed", "natural", "honey"], n, p=[0.5, 0.35, 0.15])
    roaster = rng.choice(["drum_A", "drum_B", "fluid_bed"], n)
    charge = rng.uniform(180, 230, n)
    moisture = np.clip(rng.normal(10.5, 1.2, n), 7, 14)
    first_crack = rng.uniform(360, 600, n)
    development = rng.uniform(45, 240, n)
    drop = rng.uniform(195, 240, n)
    density = rng.normal(0.70, 0.04, n)
    roaster_heat = pd.Series(roaster).map({"drum_A": 0.0, "drum_B": 2.5,
                                           "fluid_bed": -3.0}).to_numpy()
    proc = pd.Series(process).map({"washed": 0.0, "natural": 1.5, "honey": 0.8}).to_numpy()
    # roast degree: drop temperature and development time interact, saturating;
    # wet dense beans roast lighter; fluid beds run cooler
    heat = drop - 215 + roaster_heat + 0.15 * (charge - 205)
    degree = (0.5 * heat * (1.0 + 0.8 * np.tanh((development - 110) / 40))
              + 3.0 * np.tanh((development - 110) / 30) - 0.6 * (moisture - 10.5) ** 2
              - 25 * (density - 0.70) + proc + rng.normal(0, 1.0, n))
    grade = np.select([degree < -5, degree < 1.5, degree < 7], ["light", "medium",
                                                                "medium_dark"], "dark")
    df = pd.DataFrame({
        "roast_id": np.arange(1, n + 1),
        "origin": origin, "process": process, "roaster": roaster,
        "charge_temp_c": charge.round(1), "bean_moisture_pct": moisture.round(2),
        "bean_density": density.round(3), "first_crack_s": first_crack.round(0),
        "development_s": development.round(0), "drop_temp_c": drop.round(1),
        "roast_grade": grade,
    })
    _holes(rng, df, ["bean_moisture_pct", "bean_density", "process"], 0.04)
    return df


def seed_germination(rng, n=2000) -> pd.DataFrame:
    """The share of the seeds in a tray that germinate (in [0, 1])."""
    species = rng.choice(["tomato", "lettuce", "pepper", "basil", "onion"], n)
    substrate = rng.choice(["peat", "coir", "rockwool"], n)
    light = rng.choice(["dark", "low", "full"], n)
    temp = rng.uniform(8, 36, n)
    soak = rng.uniform(0, 24, n)
    age = rng.uniform(0, 48, n)
    water = rng.uniform(20, 200, n)
    sown = rng.integers(40, 201, n)
    best_t = pd.Series(species).map({"tomato": 24.0, "lettuce": 17.0, "pepper": 28.0,
                                     "basil": 25.0, "onion": 19.0}).to_numpy()
    light_eff = np.where((species == "lettuce") & (light == "dark"), -1.5, 0.0) + \
        np.where(light == "full", 0.3, 0.0)
    # germination peaks at the species' best temperature (a bump), soaking helps with
    # diminishing returns, old seed declines fast after a year, too much or too
    # little water hurts
    z = (2.8 - ((temp - best_t) / 5.5) ** 2 + 0.9 * np.tanh(soak / 6) - 0.0015 * age ** 2
         - ((water - 110) / 70) ** 2 + light_eff
         + (substrate == "coir") * 0.25 + rng.normal(0, 0.35, n))
    p = _sigmoid(z)
    germinated = rng.binomial(sown, p)
    df = pd.DataFrame({
        "tray_id": [f"T{i:04d}-{s}" for i, s in zip(range(1, n + 1), species)],
        "species": species, "substrate": substrate, "light": light,
        "temp_c": temp.round(1), "soak_hours": soak.round(1),
        "seed_age_months": age.round(1), "water_ml_per_day": water.round(0),
        "seeds_sown": sown,
        "germinated_share": (germinated / sown).round(4),
    })
    _holes(rng, df, ["soak_hours", "water_ml_per_day", "substrate"], 0.04)
    return df


def trap_catches(rng, n=2000) -> pd.DataFrame:
    """How many codling moths a pheromone trap catches in a week (a count)."""
    week = rng.integers(14, 40, n)
    orchard = rng.choice(["hillside", "riverside", "old_grove", "new_grove"], n)
    lure = rng.choice(["standard", "long_life"], n)
    hedge = rng.choice(["none", "partial", "full"], n)
    temp = 10 + 9 * np.sin(np.pi * (week - 14) / 26) + rng.normal(0, 2.5, n)
    wind = rng.gamma(2.0, 2.0, n)
    lure_age = rng.uniform(0, 8, n)  # weeks since the lure was changed
    height = rng.uniform(1.0, 3.5, n)
    base = pd.Series(orchard).map({"hillside": 0.0, "riverside": 0.6, "old_grove": 0.9,
                                   "new_grove": -0.5}).to_numpy()
    fade = np.where(lure == "long_life", 0.08, 0.25) * lure_age
    # flights take off above ~12 C (a threshold), peak twice in the season, wind
    # suppresses catches, the lure fades, traps catch best near canopy height
    log_rate = (base + 1.8 * _sigmoid((temp - 13) / 1.5) + 0.7 * np.cos(2 * np.pi * week / 13)
                - 0.15 * wind - fade - 0.4 * (height - 2.3) ** 2
                - 0.3 * (hedge == "full") + rng.normal(0, 0.25, n))
    catches = rng.poisson(np.exp(log_rate))
    df = pd.DataFrame({
        "trap_reading_id": np.arange(5001, 5001 + n),
        "orchard": orchard, "lure": lure, "hedge": hedge,
        "week_of_year": week, "mean_temp_c": temp.round(1), "mean_wind_m_s": wind.round(2),
        "lure_age_weeks": lure_age.round(1), "trap_height_m": height.round(2),
        "moths_caught": catches,
    })
    _holes(rng, df, ["mean_temp_c", "mean_wind_m_s", "hedge"], 0.04)
    return df


TABLES = {
    "orchard_water.csv": orchard_water,
    "greenhouse_temp.csv": greenhouse_temp,
    "kiln_batches.csv": kiln_batches,
    "coffee_roast.csv": coffee_roast,
    "seed_germination.csv": seed_germination,
    "trap_catches.csv": trap_catches,
}


def make_all(folder: Path = HERE) -> list[Path]:
    """Write every table into ``folder``; each table has its own seeded generator."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for i, (name, fn) in enumerate(TABLES.items()):
        rng = np.random.default_rng([SEED, i])
        df = fn(rng)
        path = folder / name
        df.to_csv(path, index=False, lineterminator="\n")
        paths.append(path)
    return paths


def check_nonlinearity(folder: Path = HERE) -> list[tuple[str, str, float, float]]:
    """Linear model vs a small MLP on each table, same leak-free preprocessing.

    3-fold cross-validation (shuffled, seed 0): ``Ridge`` / ``LogisticRegression`` against
    ``MLPRegressor`` / ``MLPClassifier`` with one layer of 32 relu units (400 epochs);
    r2 for regression, accuracy for classification. Returns (file, metric, linear, mlp).
    """
    import warnings

    from sklearn.linear_model import LogisticRegression, Ridge
    from sklearn.model_selection import KFold, cross_val_score
    from sklearn.neural_network import MLPClassifier, MLPRegressor
    from sklearn.pipeline import Pipeline

    from workbench.data.intake import load_table
    from workbench.data.preprocessing import build_pipeline, build_preprocessor
    from workbench.data.profiling import advise, analyse_target, profile_table, split_xy

    rows = []
    for name in TABLES:
        df, _ = load_table(Path(folder) / name)
        prof = profile_table(df)
        t = analyse_target(df, prof.suggested_target)
        X, y = split_xy(df, t)
        cv = KFold(3, shuffle=True, random_state=0)
        if t.task == "classification":
            linear = Pipeline([("prep", build_preprocessor(prof, t)),
                               ("model", LogisticRegression(max_iter=1000))])
            mlp = build_pipeline(prof, t, MLPClassifier((32,), max_iter=400, random_state=0),
                                 advise(t).output_head)
            metric = "accuracy"
        else:
            linear = Pipeline([("prep", build_preprocessor(prof, t)), ("model", Ridge())])
            head = "exp" if advise(t).output_head == "exp" else "identity"
            mlp = build_pipeline(prof, t, MLPRegressor((32,), max_iter=400, random_state=0), head)
            metric = "r2"
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            lin = cross_val_score(linear, X, y, cv=cv, scoring=metric).mean()
            net = cross_val_score(mlp, X, y, cv=cv, scoring=metric).mean()
        rows.append((name, metric, float(lin), float(net)))
    return rows


if __name__ == "__main__":
    if "--check" in sys.argv:
        for name, metric, lin, net in check_nonlinearity():
            print(f"{name:22s} {metric:8s} linear {lin:.3f}  mlp {net:.3f}")
        sys.exit(0)
    out = Path(sys.argv[1]) if len(sys.argv) > 1 else HERE
    for p in make_all(out):
        print(p)
