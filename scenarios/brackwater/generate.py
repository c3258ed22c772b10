"""Regenerate the Brackwater Point demo data: samples.csv and lab-export.csv.

Brackwater Point is an invented coastal power and desalination site; every
unit, lab and value here is made up. The data exist to show the engine at work
on one year (2026) of samples with a few stories in them (see README.md), so
the generator is deterministic: a fixed numpy seed, and new-oil values read
from the rule sets themselves so the data and the limits cannot drift apart.

Run with the project venv from anywhere:  python scenarios/brackwater/generate.py
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

HERE = Path(__file__).resolve().parent
SEED = 20260101
YEAR_START = pd.Timestamp("2026-01-01")

COLUMNS = ["sample_id", "unit_id", "class", "lubricant", "sampled_on", "oil_hours", "kv40", "kv100",
           "an", "bn", "oxidation", "nitration", "water", "rpvot", "method", "lab", "oil_changed"]
# Wear metals and cleanliness came later; they are drawn from their own seed, after everything
# else, so the columns above keep the values they had.
LATER_COLUMNS = ["iron", "iso4406", "particles_4um", "particles_6um", "particles_14um"]
LATER_SEED = SEED + 4406


@dataclass(frozen=True)
class UnitPlan:
    """How one unit is sampled and how its oil ages, before any story is laid on top."""

    unit_id: str
    equipment_class: str
    lubricant: str
    first_sample: str            # ISO date of the first routine sample
    every_days: int
    start_oil_hours: float       # oil hours on 1 January
    hours_per_day: float
    kv40_pct_per_1000h: float
    an_per_1000h: float
    oxidation_per_1000h: float
    water_ppm: float
    kv100_ratio: float = 0.8     # kv100 change as a share of the kv40 change
    tests_rpvot: bool = False    # turbines: RPVOT (ASTM D2272) on every fourth sample
    rpvot_life_h: float = np.inf  # e-folding oil hours of RPVOT
    tests_bn: bool = False       # engines: base number
    oil_change: str | None = None  # ISO date of an oil change, if any
    extra_samples: tuple = ()    # ISO dates of resamples
    kv100_always: bool = False   # else kv100 (and RPVOT) only on every fourth sample
    oxidation_noise: float = 0.3


PLANS = (
    UnitPlan("ST-1", "steam-turbine", "TURB-46-M", "2026-01-05", 14, 38000, 22.5, 0, 0, 0, 55,
             tests_rpvot=True, extra_samples=("2026-11-25",)),
    UnitPlan("ST-2", "steam-turbine", "TURB-46-M", "2026-01-06", 14, 12000, 22.8, 0.10, 0.004, 0.25, 50,
             tests_rpvot=True, rpvot_life_h=80000, oil_change="2026-07-18",
             extra_samples=("2026-06-25", "2026-06-30", "2026-07-14")),
    UnitPlan("GT-1", "gas-turbine", "TURB-32-GT", "2026-01-07", 14, 20000, 22.0, 0.08, 0.0022, 0.25, 60,
             tests_rpvot=True, rpvot_life_h=61000),
    UnitPlan("HPU-1", "hydraulic", "HYD-46-M", "2026-01-08", 14, 6000, 24.0, 0.10, 0.008, 0.5, 110),
    UnitPlan("HPU-2", "hydraulic", "HYD-46-HV", "2026-01-09", 14, 9000, 24.0, -0.30, 0.006, 0.4, 90,
             kv100_ratio=1.8, kv100_always=True),
    UnitPlan("HPU-3", "hydraulic", "HYD-46-E", "2026-01-12", 14, 3000, 24.0, 0.05, 0.010, 1.7, 110,
             oxidation_noise=1.5),
    UnitPlan("SWP-1", "gearbox", "GEAR-320-PAO", "2026-01-13", 14, 15000, 21.6, 0.05, 0.010, 0.2, 180,
             kv100_always=True),
    UnitPlan("SWP-2", "gearbox", "GEAR-320-PAO", "2026-01-14", 14, 11000, 21.6, 0.06, 0.012, 0.25, 150,
             kv100_always=True),
    UnitPlan("SWP-3", "gearbox", "GEAR-220-M", "2026-01-15", 14, 9000, 21.6, 0.15, 0.020, 0.6, 200,
             kv100_always=True),
    UnitPlan("AC-1", "screw-compressor", "COMP-46-M", "2026-01-16", 14, 2100, 16.0, 0.40, 0.030, 1.2, 110,
             oil_change="2026-05-02"),
    UnitPlan("AC-2", "screw-compressor", "COMP-46-PAO", "2026-01-19", 14, 3000, 16.0, 0.15, 0.010, 0.5, 120),
    UnitPlan("AC-3", "screw-compressor", "COMP-46-PE", "2026-01-20", 14, 900, 17.0, 0.10, 0.015, 5.5, 150,
             extra_samples=("2026-03-12", "2026-06-18", "2026-10-15"), oxidation_noise=1.5),
    UnitPlan("DG-1", "diesel-engine", "ENG-15W40-M", "2026-01-21", 28, 140, 0.2, 0, 0, 0, 250,
             tests_bn=True, kv100_always=True),
)

# AC-3's resamples went to a second lab that reports FTIR oxidation by spectral subtraction.
SUBTRACTION_DATES = {"AC-3": ("2026-03-12", "2026-06-18", "2026-10-15")}

# ST-2's seawater cooler leak: water (ppm) at the dates the site logged; the oil was changed on 18 July.
ST2_WATER_EPISODE = (("2026-06-12", 70), ("2026-06-23", 620), ("2026-06-25", 780), ("2026-06-30", 1450),
                     ("2026-07-07", 900), ("2026-07-14", 520))


def lubricant_table(site_file: Path) -> dict:
    """New-oil values by lubricant code: the shipped tables in `extends` order, then the site's own."""
    site = yaml.safe_load(site_file.read_text(encoding="utf-8"))
    table: dict = {}
    for parent in site.get("extends", []):
        table.update(yaml.safe_load((site_file.parent / parent).read_text(encoding="utf-8")).get("lubricants", {}))
    table.update(site.get("lubricants", {}))
    return table


def day_of_year(dates) -> np.ndarray:
    return ((pd.to_datetime(pd.Series(dates)) - YEAR_START).dt.days).to_numpy()


def sample_dates(plan: UnitPlan) -> pd.DatetimeIndex:
    routine = pd.date_range(plan.first_sample, "2026-12-31", freq=f"{plan.every_days}D")
    return routine.union(pd.to_datetime(list(plan.extra_samples)))


def oil_hours(plan: UnitPlan, days: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Hours on the oil at each sample day, and which sample is the first after the oil change."""
    hours = plan.start_oil_hours + days * plan.hours_per_day
    changed = np.zeros(len(days), dtype=bool)
    if plan.oil_change:
        change_day = day_of_year([plan.oil_change])[0]
        after = days >= change_day
        hours = np.where(after, (days - change_day) * plan.hours_per_day, hours)
        if after.any():
            changed[np.argmax(after)] = True
    return np.round(hours), changed


def routine_ageing(plan: UnitPlan, new: dict, hours: np.ndarray, rng: np.random.Generator) -> dict:
    """Slow, steady ageing with oil hours plus test noise: the backdrop every story sits on."""
    n = len(hours)
    kv_pct = plan.kv40_pct_per_1000h * hours / 1000
    values = {
        "kv40": new["kv40"] * (1 + kv_pct / 100) * (1 + rng.normal(0, 0.003, n)),
        "kv100": new["kv100"] * (1 + plan.kv100_ratio * kv_pct / 100) * (1 + rng.normal(0, 0.003, n)),
        "an": np.clip(new["an"] + plan.an_per_1000h * hours / 1000 + rng.normal(0, 0.012, n), 0.01, None),
        "oxidation": new.get("oxidation", np.nan) + plan.oxidation_per_1000h * hours / 1000
        + rng.normal(0, plan.oxidation_noise, n),
        "water": plan.water_ppm * rng.lognormal(0, 0.25, n),
    }
    if plan.tests_rpvot:
        values["rpvot"] = new["rpvot"] * np.exp(-hours / plan.rpvot_life_h) * (1 + rng.normal(0, 0.04, n))
    if plan.tests_bn:
        values["bn"] = np.full(n, new["bn"])
    return values


def st1_degrading(values: dict, new: dict, year: np.ndarray, rng: np.random.Generator) -> dict:
    """ST-1: an old charge whose antioxidant runs out this year; acids, carbonyl and viscosity climb."""
    n = len(year)
    return values | {
        "an": new["an"] + 0.07 + 0.45 * year ** 2.2 + rng.normal(0, 0.012, n),
        "rpvot": new["rpvot"] * (0.62 - 0.44 * year ** 1.5) * (1 + rng.normal(0, 0.04, n)),
        "oxidation": new["oxidation"] + 4 + 16 * year ** 2 + rng.normal(0, 0.3, n),
        "kv40": new["kv40"] * (1 + (1.5 + 5.0 * year ** 2) / 100) * (1 + rng.normal(0, 0.003, n)),
        "kv100": new["kv100"] * (1 + (1.2 + 4.0 * year ** 2) / 100) * (1 + rng.normal(0, 0.003, n)),
    }


def st2_cooler_leak(values: dict, days: np.ndarray, changed_on: int) -> dict:
    """ST-2: seawater leaks in through the lube oil cooler in June; the oil is changed on 18 July."""
    episode_days = day_of_year([d for d, _ in ST2_WATER_EPISODE])
    episode_ppm = np.array([ppm for _, ppm in ST2_WATER_EPISODE], dtype=float)
    in_episode = (days >= episode_days[0]) & (days < changed_on)
    water = np.where(in_episode, np.interp(days, episode_days, episode_ppm), values["water"])
    water = np.where(days >= changed_on, values["water"] * 0.8, water)
    return values | {"water": water}


def ac3_ester(values: dict, new: dict, days: np.ndarray, hours: np.ndarray, rng: np.random.Generator) -> dict:
    """AC-3 (polyol ester): carbonyl climbs all year; the acid number holds until late September."""
    n = len(days)
    late_rise = 0.003 * np.clip(days - 243, 0, None)
    return values | {
        "an": new["an"] + 0.04 + 0.015 * hours / 1000 + late_rise + rng.normal(0, 0.01, n),
        "oxidation": new["oxidation"] + 9 + 5.5 * hours / 1000 + rng.normal(0, 1.5, n),
    }


def ac2_condensate(values: dict, days: np.ndarray) -> dict:
    """AC-2: humid summer air; condensate builds up in late July."""
    return values | {"water": values["water"] + 280 * np.exp(-(((days - 205) / 25.0) ** 2))}


def swp2_seal_wear(values: dict, year: np.ndarray) -> dict:
    """SWP-2: a wearing shaft seal lets more sea air and spray in as the year goes on."""
    return values | {"water": values["water"] * (1 + 1.8 * year)}


def dg1_standby(values: dict, new: dict, year: np.ndarray, days: np.ndarray, rng: np.random.Generator) -> dict:
    """DG-1: few hours but calendar ageing; one wet sample after a cold February spell."""
    n = len(year)
    water = values["water"].copy()
    water[np.argmax(days >= 31)] = 1300.0
    return values | {
        "bn": new["bn"] * (1 - 0.28 * year) + rng.normal(0, 0.1, n),
        "an": new["an"] + 0.5 * year + rng.normal(0, 0.03, n),
        "oxidation": new["oxidation"] + 1 + 3 * year + rng.normal(0, 0.3, n),
        "nitration": 3 + 3 * year + rng.normal(0, 0.2, n),
        "kv100": new["kv100"] * (1 + 0.015 * year) * (1 + rng.normal(0, 0.003, n)),
        "water": water,
    }


def unit_samples(plan: UnitPlan, new: dict, rng: np.random.Generator) -> pd.DataFrame:
    """Every sample of one unit for the year, in canonical units, before rounding."""
    dates = sample_dates(plan)
    days = day_of_year(dates)
    year = days / 365.0
    hours, changed = oil_hours(plan, days)
    values = routine_ageing(plan, new, hours, rng)
    if plan.unit_id == "ST-1":
        values = st1_degrading(values, new, year, rng)
    elif plan.unit_id == "ST-2":
        values = st2_cooler_leak(values, days, day_of_year([plan.oil_change])[0])
    elif plan.unit_id == "AC-3":
        values = ac3_ester(values, new, days, hours, rng)
    elif plan.unit_id == "AC-2":
        values = ac2_condensate(values, days)
    elif plan.unit_id == "SWP-2":
        values = swp2_seal_wear(values, year)
    elif plan.unit_id == "DG-1":
        values = dg1_standby(values, new, year, days, rng)

    frame = pd.DataFrame(values)
    frame.insert(0, "unit_id", plan.unit_id)
    frame.insert(1, "class", plan.equipment_class)
    frame.insert(2, "lubricant", plan.lubricant)
    frame.insert(3, "sampled_on", dates.strftime("%Y-%m-%d"))
    frame.insert(4, "oil_hours", hours)
    frame["oil_changed"] = np.where(changed, "true", "false")
    frame["lab"] = "lab-a"
    frame["method"] = "direct"

    subtraction = frame["sampled_on"].isin(SUBTRACTION_DATES.get(plan.unit_id, ()))
    frame.loc[subtraction, "oxidation"] -= new.get("oxidation", 0.0)
    frame.loc[subtraction, ["lab", "method"]] = ["lab-b", "subtraction"]

    extended_test = np.arange(len(frame)) % 4 == 0
    if not plan.kv100_always:
        frame.loc[~extended_test, "kv100"] = np.nan
    if "rpvot" in frame:
        frame.loc[~extended_test, "rpvot"] = np.nan
    no_ftir = (rng.random(len(frame)) < 0.04) & ~subtraction.to_numpy()
    frame.loc[no_ftir, [c for c in ("oxidation", "nitration") if c in frame]] = np.nan
    return frame


def rounded(frame: pd.DataFrame) -> pd.DataFrame:
    """Round as a lab reports: kinematic viscosity to four significant figures (ISO 3104), the rest sensibly."""
    out = frame.copy()
    for column in ("kv40", "kv100"):
        values = out[column].to_numpy(dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            decimals = 3 - np.floor(np.log10(np.abs(values)))
        scale = np.power(10.0, np.nan_to_num(decimals))
        out[column] = np.round(values * scale) / scale
    decimals = {"an": 2, "bn": 2, "oxidation": 1, "nitration": 1, "water": 0, "rpvot": 0, "oil_hours": 0}
    out = out.round({k: v for k, v in decimals.items() if k in out})
    for column in ("water", "rpvot", "oil_hours"):
        out[column] = out[column].astype("Int64")
    return out


def iron_ppm(unit: str, hours: np.ndarray, year: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Iron (ASTM D5185, ppm) on the gear drives: steady on SWP-1 and SWP-2; on SWP-3 a gear
    pitting from the spring on, climbing faster as the year goes on."""
    base = {"SWP-1": 14.0, "SWP-2": 18.0, "SWP-3": 22.0}[unit]
    wear = 75.0 * np.clip(year - 0.25, 0, None) ** 1.6 if unit == "SWP-3" else 0.0
    return base + wear + 0.0004 * hours + rng.normal(0, 1.5, len(hours))


def cleanliness(unit: str, days: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """ISO 4406 scale numbers (>= 4, 6, 14 um(c)) on the hydraulics, around the site's 17/15/12
    target; HPU-2's return filter goes into bypass in September until its element is changed
    on 3 November."""
    codes = np.array([16, 14, 11]) + rng.integers(-1, 2, size=(len(days), 1))
    if unit == "HPU-2":
        bypass = (days >= 245) & (days < 307)
        codes = codes + np.where(bypass, np.minimum(1 + (days - 245) // 14, 3), 0)[:, None]
    return codes


def counts_for(codes: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Particle counts per mL inside each code's range (ISO 4406:1999 Table 1: code N holds more
    than 0.01 x 2^(N-1) up to 0.01 x 2^N, the table rounding aside)."""
    return np.round(0.01 * 2.0 ** (codes - 1 + rng.uniform(0.15, 0.85, codes.shape)), 1)


def later_columns(samples: pd.DataFrame) -> pd.DataFrame:
    """Iron on the gear drives; cleanliness on the hydraulics: HPU-2 and HPU-3 as codes (HPU-3's
    lab writes the two-number form, -/15/12), HPU-1 as particle counts per mL from which the
    engine computes the code."""
    rng = np.random.default_rng(LATER_SEED)
    out = samples.copy()
    for column in LATER_COLUMNS:
        out[column] = np.nan if column != "iso4406" else None
    days = day_of_year(out["sampled_on"])
    for unit in ("SWP-1", "SWP-2", "SWP-3"):
        rows = (out["unit_id"] == unit).to_numpy()
        hours = out.loc[rows, "oil_hours"].to_numpy(dtype=float)
        out.loc[rows, "iron"] = np.round(iron_ppm(unit, hours, days[rows] / 365.0, rng))
    for unit in ("HPU-1", "HPU-2", "HPU-3"):
        rows = (out["unit_id"] == unit).to_numpy()
        codes = cleanliness(unit, days[rows], rng)
        if unit == "HPU-1":
            counts = counts_for(codes, rng)
            for k, size in enumerate(("4um", "6um", "14um")):
                out.loc[rows, f"particles_{size}"] = counts[:, k]
        elif unit == "HPU-2":
            out.loc[rows, "iso4406"] = [f"{a}/{b}/{c}" for a, b, c in codes]
        else:
            out.loc[rows, "iso4406"] = [f"-/{b}/{c}" for _, b, c in codes]
    return out


def unrated_sample() -> pd.DataFrame:
    """One sample from a class no Brackwater rule set knows: it must come out `unrated`."""
    return pd.DataFrame([{"unit_id": "HPP-1", "class": "ro-high-pressure-pump", "lubricant": "TURB-68-M",
                          "sampled_on": "2026-09-08", "oil_hours": 4100, "kv40": 68.9, "an": 0.12,
                          "oxidation": 3.1, "water": 140, "method": "direct", "lab": "lab-a",
                          "oil_changed": "false"}])


def with_bad_rows(frame: pd.DataFrame) -> tuple[pd.DataFrame, list[str]]:
    """Spoil a few rows the way real files get spoiled; return the frame and what was done, by data row."""
    frame = frame.astype({"kv40": object, "sample_id": object}).copy()
    notes = []

    def nth(unit: str, n: int) -> int:
        return frame.index[frame["unit_id"] == unit][n]

    pending = nth("HPU-1", 9)
    frame.loc[pending, "kv40"] = "pending"
    negative = nth("SWP-1", 5)
    frame.loc[negative, "kv40"] = -frame.loc[negative, "kv40"]
    no_id = nth("AC-1", 14)
    frame.loc[no_id, "sample_id"] = ""
    clash_with = nth("HPU-2", 11)
    source = nth("GT-1", 19)
    duplicate = frame.loc[[source]].assign(sample_id=frame.loc[clash_with, "sample_id"])
    frame = pd.concat([frame.loc[:source], duplicate, frame.loc[source + 1:]], ignore_index=True)

    def row_of(index: int) -> int:  # 1-based data row, after the duplicate was inserted
        return index + 1 + (1 if index > source else 0)

    notes.append(f"row {row_of(pending)}: kv40 is 'pending' (not a number)")
    notes.append(f"row {row_of(negative)}: kv40 is negative")
    notes.append(f"row {row_of(no_id)}: sample_id is empty")
    notes.append(f"row {source + 2}: sample_id {frame.loc[source + 1, 'sample_id']} repeats row "
                 f"{row_of(clash_with)} (a GT-1 result filed under an HPU-2 id)")
    return frame, notes


def lab_export(plans: tuple, table: dict, rng: np.random.Generator) -> pd.DataFrame:
    """A second lab's December trial on the intake pump gear drives, in that lab's own columns and units."""
    rows = []
    for plan in (p for p in plans if p.equipment_class == "gearbox"):
        trial = replace(plan, first_sample="2026-12-02", every_days=14, extra_samples=())
        frame = rounded(unit_samples(trial, table[plan.lubricant], rng).reindex(columns=COLUMNS[1:]))
        rows.append(frame)
    frame = pd.concat(rows, ignore_index=True)
    return pd.DataFrame({
        "Sample No": [f"LC-26-{900 + i}" for i in range(len(frame))],
        "Asset": frame["unit_id"],
        "Equipment type": frame["class"],
        "Oil": frame["lubricant"],
        "Date sampled": frame["sampled_on"],
        "Hrs on oil": frame["oil_hours"],
        "Visc 40C cSt": frame["kv40"],
        "Visc 100C cSt": frame["kv100"],
        "TAN mgKOH/g": frame["an"],
        "Oxid A/0.1mm": (frame["oxidation"] / 100).round(3),
        "H2O %": (frame["water"].astype(float) / 10_000).round(4),
        "Lab": "lab-c",
    })


def build(site_file: Path) -> tuple[pd.DataFrame, pd.DataFrame, list[str]]:
    table = lubricant_table(site_file)
    rng = np.random.default_rng(SEED)
    frames = [unit_samples(plan, table[plan.lubricant], rng) for plan in PLANS]
    samples = pd.concat(frames + [unrated_sample()], ignore_index=True)
    samples = samples.sort_values(["sampled_on", "unit_id"], kind="stable", ignore_index=True)
    samples.insert(0, "sample_id", [f"BP-{i:04d}" for i in range(1, len(samples) + 1)])
    samples = later_columns(rounded(samples.reindex(columns=COLUMNS)))
    samples, notes = with_bad_rows(samples)
    return samples, lab_export(PLANS, table, rng), notes


def main() -> None:
    samples, export, notes = build(HERE / "site.yaml")
    samples.to_csv(HERE / "samples.csv", index=False, na_rep="")
    export.to_csv(HERE / "lab-export.csv", index=False, na_rep="")
    print(f"samples.csv: {len(samples)} rows; lab-export.csv: {len(export)} rows")
    for note in notes:
        print("bad", note)


if __name__ == "__main__":
    main()
