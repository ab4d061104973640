"""Invented demo data set: the firing line of a ceramic-tile plant.

Each row is one fired batch of floor tiles. The plant, its numbers and its problems are
made up for this program; the point of the table is to give every audit check something
real to find before a principal component analysis.

How the table is built
----------------------
Four hidden process factors drive most columns, each a standard normal per batch:

* ``thermal``  -- how hot the kiln runs (zone temperatures, fuel, oxygen);
* ``press``    -- how hard the body is pressed (pressure, thickness, moisture);
* ``glaze``    -- the glaze recipe as mixed that shift (density, viscosity, spray rate);
* ``air``      -- dryer and cooling-air settings (dryer temperature, cooling air, belt).

Every measured column is a plausible base value plus a few factor loadings plus its own
noise, so a PCA sees a clear but not trivial structure. A few columns are nearly pure
noise. Values are rounded per column (1 to 3 decimals, counts as integers) when the frame
is built, so :func:`kiln_line` and the CSV written by :func:`write_kiln_csv` hold the same
numbers, and the file is byte-for-byte reproducible for a given seed and numpy version.
Only ``numpy.random.default_rng(seed)`` is used for randomness.

Columns and the check each one is meant to exercise
---------------------------------------------------
``batch_id``
    Text ids ``B-0001`` ... all distinct: identifier detection; names the rows.
``shift``
    Text label ``early``/``late``/``night``: a non-numeric column that is excluded.
``zone1_temp_c`` ... ``zone5_temp_c``
    Kiln zone temperatures, deg C, roughly 870-1210 (zone 1 coolest). Each zone is the previous zone plus a
    fixed offset plus a few degrees of noise: strong collinearity between neighbours
    (correlation > 0.95), a near-singular block, and the dominant first component.
``belt_speed_m_min``
    Belt speed, m/min, about 2-4; loads on ``air`` and slightly against ``thermal``.
``glaze_density_g_l``
    Glaze density, g/L, about 1400-1600 (``glaze`` factor). Has missing readings.
``press_pressure_bar``
    Press pressure, bar, about 250-400 (``press`` factor).
``body_moisture_pct``
    Moisture of the pressed body, %, about 4-7 (against ``press``). Has missing readings.
``glaze_viscosity_s``
    Flow-cup time, s, about 25-45 (``glaze`` factor, raised for reground glaze). Has
    missing readings.
``spray_rate_l_h``
    Glaze spray rate, L/h, about 300-500 (``glaze`` factor).
``dryer_temp_c``
    Dryer temperature, deg C, about 180-240 (``air`` factor).
``cooling_air_m3_h``
    Cooling air flow, m3/h, about 10000-20000: a column whose scale dwarfs the others,
    so the covariance-versus-correlation choice matters.
``tile_thickness_mm``
    Fired tile thickness, mm, about 8-10 (against ``press``).
``kiln_o2_pct``
    Flue-gas oxygen, %, about 2-6 (against ``thermal``). Has missing readings.
``fuel_rate_nm3_h``
    Gas consumption, Nm3/h, about 250-400 (``thermal`` factor).
``zone_a_load_kg``, ``zone_b_load_kg``
    Load carried on the two halves of the kiln car, kg; mostly noise.
``batch_load_kg``
    Exactly ``zone_a_load_kg + zone_b_load_kg`` (computed from the rounded parts in
    integer tenths, so the CSV values add up exactly): an exact linear dependency.
``ambient_humidity_pct``
    Hall humidity, %, 35-65, unrelated to the process: no component represents it, so the
    per-feature check of what is discarded names it as poorly represented.
``defect_count``
    Tiles rejected in the batch, an integer >= 1 drawn from a lognormal rate: strongly
    right-skewed (skewness > 2), so a log transform is suggested.
``reground_glaze``
    0/1 flag, 1 when reground glaze was blended in: a binary column that stays in the
    analysis with a caution.
``calibration_offset``
    The same value on every row: a constant column that is excluded.
``flexural_strength_mpa``
    The target, MPa, about 37-57: a linear function of ``thermal``, ``press`` and body
    moisture plus noise, and also driven by the zone-3-minus-zone-2 step, a direction of
    very small variance inside the collinear zone block, so the target check finds that a
    low-variance component matters for the outcome.

Planted problems (row positions are 0-based)
--------------------------------------------
* :data:`KILN_MISSING_CELLS` -- eight single empty cells in four feature columns.
* :data:`KILN_OUTLIER_ROWS` -- five outlier batches: three kiln upsets (zone temperatures
  off their usual profile, oxygen up, many defects, weaker tiles), one press fault (low
  pressure, yet thin, light and wet tiles) and one cooling-air fault (air flow and dryer far off).
  These positions apply when ``n`` covers them; positions beyond ``n`` are skipped.
"""
from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pandas as pd

#: Default seed of the demo table.
KILN_SEED = 20261202

#: Outlier batches (0-based row positions) and the kind of upset planted there.
KILN_OUTLIER_ROWS: dict[int, str] = {
    23: "kiln_upset",
    71: "press_fault",
    118: "kiln_upset",
    164: "cooling_fault",
    209: "kiln_upset",
}

#: Missing readings as (0-based row position, column) pairs.
KILN_MISSING_CELLS: tuple[tuple[int, str], ...] = (
    (12, "glaze_viscosity_s"),
    (147, "glaze_viscosity_s"),
    (40, "body_moisture_pct"),
    (191, "body_moisture_pct"),
    (58, "kiln_o2_pct"),
    (133, "kiln_o2_pct"),
    (95, "glaze_density_g_l"),
    (228, "glaze_density_g_l"),
)

#: Value of the constant column.
CALIBRATION_OFFSET = 0.25

#: Column order and the number of decimals each float column is rounded to
#: (None marks a text column, 0 an integer column).
COLUMN_DECIMALS: dict[str, int | None] = {
    "batch_id": None,
    "shift": None,
    "zone1_temp_c": 1,
    "zone2_temp_c": 1,
    "zone3_temp_c": 1,
    "zone4_temp_c": 1,
    "zone5_temp_c": 1,
    "belt_speed_m_min": 2,
    "glaze_density_g_l": 1,
    "press_pressure_bar": 1,
    "body_moisture_pct": 2,
    "glaze_viscosity_s": 1,
    "spray_rate_l_h": 1,
    "dryer_temp_c": 1,
    "cooling_air_m3_h": 0,
    "tile_thickness_mm": 2,
    "kiln_o2_pct": 2,
    "fuel_rate_nm3_h": 1,
    "zone_a_load_kg": 1,
    "zone_b_load_kg": 1,
    "batch_load_kg": 1,
    "ambient_humidity_pct": 1,
    "defect_count": 0,
    "reground_glaze": 0,
    "calibration_offset": 2,
    "flexural_strength_mpa": 2,
}

_SHIFTS = np.array(["early", "late", "night"])


def _round(values: np.ndarray, decimals: int) -> np.ndarray:
    """Round to ``decimals`` so every value is the double nearest its printed decimal."""
    return np.array([float(f"{v:.{decimals}f}") if np.isfinite(v) else np.nan for v in values])


def kiln_line(seed: int = KILN_SEED, n: int = 240) -> pd.DataFrame:
    """Build the demo table of ``n`` fired batches, deterministic for a given ``seed``.

    Returns a DataFrame with the columns of :data:`COLUMN_DECIMALS` in that order, values
    already rounded as they are written to CSV, and missing readings as NaN.
    """
    if n < 1:
        raise ValueError("n must be at least 1")
    rng = np.random.default_rng(seed)

    # Hidden process factors.
    thermal = rng.standard_normal(n)
    press = rng.standard_normal(n)
    glaze = rng.standard_normal(n)
    air = rng.standard_normal(n)

    shift = _SHIFTS[rng.integers(0, 3, size=n)]
    reground = (rng.random(n) < 0.25).astype(np.int64)

    # Kiln zones: a rising firing profile, each zone tied to the one before it.
    zone1 = 925.0 + 22.0 * thermal + rng.normal(0.0, 2.5, n)
    steps = (60.0, 65.0, 50.0, 30.0)
    zones = [zone1]
    for step in steps:
        zones.append(zones[-1] + step + 2.0 * thermal + rng.normal(0.0, 4.0, n))
    # Step from zone 2 to zone 3 beyond its usual size: a low-variance direction.
    step23 = zones[2] - zones[1] - steps[1]

    belt_speed = 3.0 + 0.25 * air - 0.12 * thermal + rng.normal(0.0, 0.18, n)
    glaze_density = 1500.0 + 30.0 * glaze + rng.normal(0.0, 14.0, n)
    press_pressure = 325.0 + 26.0 * press + rng.normal(0.0, 11.0, n)
    body_moisture = 5.5 - 0.45 * press + 0.15 * air + rng.normal(0.0, 0.3, n)
    glaze_viscosity = 34.0 + 2.8 * glaze + 2.5 * reground + rng.normal(0.0, 1.4, n)
    spray_rate = 400.0 - 22.0 * glaze + 8.0 * air + rng.normal(0.0, 16.0, n)
    dryer_temp = 210.0 + 11.0 * air + rng.normal(0.0, 5.0, n)
    cooling_air = 15000.0 + 1300.0 * air + 400.0 * thermal + rng.normal(0.0, 600.0, n)
    tile_thickness = 9.0 - 0.28 * press + rng.normal(0.0, 0.12, n)
    kiln_o2 = 4.0 - 0.55 * thermal + rng.normal(0.0, 0.35, n)
    fuel_rate = 320.0 + 22.0 * thermal + 6.0 * air + rng.normal(0.0, 9.0, n)
    load_a = 610.0 + 8.0 * press + rng.normal(0.0, 22.0, n)
    load_b = 595.0 + 8.0 * press + rng.normal(0.0, 22.0, n)

    log_rate = 1.3 + 0.2 * thermal - 0.15 * press + 0.3 * reground + rng.normal(0.0, 0.75, n)
    defects = 1.0 + np.floor(np.exp(log_rate))

    strength = (
        45.0
        + 2.0 * thermal
        + 1.6 * press
        - 1.2 * (body_moisture - 5.5) / 0.5
        - 0.5 * step23
        + rng.normal(0.0, 1.0, n)
    )

    # Planted outlier batches, at fixed positions.
    z = [zz.copy() for zz in zones]
    for row, kind in KILN_OUTLIER_ROWS.items():
        if row >= n:
            continue
        if kind == "kiln_upset":
            z[1][row] += 15.0
            z[2][row] += 45.0
            z[3][row] -= 15.0
            z[4][row] -= 10.0
            kiln_o2[row] += 2.2
            fuel_rate[row] += 45.0
            defects[row] = defects[row] * 6.0 + 40.0
            strength[row] -= 7.0
        elif kind == "press_fault":
            # Worn die: pressure drops, yet the tiles come out thin, light and wet.
            press_pressure[row] -= 95.0
            tile_thickness[row] -= 0.8
            body_moisture[row] += 1.3
            load_a[row] -= 70.0
            load_b[row] -= 70.0
            defects[row] = defects[row] * 3.0 + 15.0
            strength[row] -= 5.0
        elif kind == "cooling_fault":
            cooling_air[row] += 4200.0
            dryer_temp[row] -= 38.0
            belt_speed[row] += 0.7
            defects[row] = defects[row] * 2.0 + 10.0

    # Ambient humidity in the hall: logged with every batch, unrelated to the process.
    # No component represents it well: the per-feature check must name it.
    ambient_humidity = np.random.default_rng([seed, 7]).uniform(35.0, 65.0, n)

    values: dict[str, np.ndarray] = {
        "zone1_temp_c": z[0],
        "zone2_temp_c": z[1],
        "zone3_temp_c": z[2],
        "zone4_temp_c": z[3],
        "zone5_temp_c": z[4],
        "belt_speed_m_min": belt_speed,
        "glaze_density_g_l": glaze_density,
        "press_pressure_bar": press_pressure,
        "body_moisture_pct": body_moisture,
        "glaze_viscosity_s": glaze_viscosity,
        "spray_rate_l_h": spray_rate,
        "dryer_temp_c": dryer_temp,
        "cooling_air_m3_h": cooling_air,
        "tile_thickness_mm": tile_thickness,
        "kiln_o2_pct": kiln_o2,
        "ambient_humidity_pct": ambient_humidity,
        "fuel_rate_nm3_h": fuel_rate,
        "flexural_strength_mpa": strength,
    }
    rounded = {name: _round(v, COLUMN_DECIMALS[name]) for name, v in values.items()}

    # The exact dependency, summed in integer tenths of a kilogram.
    tenths_a = np.rint(load_a * 10.0).astype(np.int64)
    tenths_b = np.rint(load_b * 10.0).astype(np.int64)
    rounded["zone_a_load_kg"] = tenths_a / 10.0
    rounded["zone_b_load_kg"] = tenths_b / 10.0
    rounded["batch_load_kg"] = (tenths_a + tenths_b) / 10.0

    for row, col in KILN_MISSING_CELLS:
        if row < n:
            rounded[col][row] = np.nan

    rounded["batch_id"] = np.array([f"B-{i + 1:04d}" for i in range(n)])
    rounded["shift"] = shift
    rounded["defect_count"] = defects.astype(np.int64)
    rounded["reground_glaze"] = reground
    rounded["calibration_offset"] = np.full(n, CALIBRATION_OFFSET)
    return pd.DataFrame({name: rounded[name] for name in COLUMN_DECIMALS})


def _cell(value, decimals: int | None) -> str:
    if decimals is None:
        return str(value)
    if pd.isna(value):
        return ""
    if decimals == 0:
        return str(int(value))
    return f"{float(value):.{decimals}f}"


def write_kiln_csv(path, seed: int = KILN_SEED, n: int = 240) -> None:
    """Write :func:`kiln_line` as CSV: comma, '.' decimals, header, empty missing cells."""
    frame = kiln_line(seed=seed, n=n)
    text = pd.DataFrame(
        {c: [_cell(v, COLUMN_DECIMALS[c]) for v in frame[c]] for c in frame.columns}
    )
    text.to_csv(
        Path(path), index=False, sep=",", lineterminator="\n", quoting=csv.QUOTE_MINIMAL, encoding="utf-8"
    )
