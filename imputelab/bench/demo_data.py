"""Built-in demo table: a refrigerated-freight company's trip log.

The table is invented and generated in code, one row per trip over the first half of 2026.
Every column carries a planted missingness mechanism (see :data:`PLANTED`), so a survey of the
file has something real to find and a method comparison has hidden truth to score against.

The public function returns the table as it would sit in a CSV file: every column is of pandas
``str`` dtype and a blank cell is the empty string.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from imputelab.errors import OptionError, TableIOError

__all__ = ["DEMO_COLUMNS", "PLANTED", "make_trip_log", "write_trip_log"]

DEFAULT_SEED = 20261201

DEMO_COLUMNS: tuple[str, ...] = (
    "trip_id",
    "depot",
    "departed_at",
    "arrived_at",
    "distance_km",
    "payload_kg",
    "cargo_class",
    "setpoint_c",
    "ambient_c",
    "door_open_min",
    "fuel_l",
    "driver_rating",
    "remark",
    "customs_ref",
    "spoiled",
)

PLANTED: dict[str, str] = {
    "trip_id": "Identifier, unique and never blank.",
    "depot": "About 1% blank completely at random (MCAR).",
    "departed_at": "About 1.5% blank completely at random (MCAR).",
    "arrived_at": (
        "About 2% blank completely at random (MCAR); the true value is the departure time plus a "
        "driving time that grows with distance and stops."
    ),
    "distance_km": "About 3% blank completely at random (MCAR); right-skewed, depends on depot.",
    "payload_kg": (
        "About 4% blank completely at random (MCAR), and about 0.8% of cells (about 40 in 5000) "
        "hold disguised-missing text instead of a number: mostly 'not weighed', a few 'n/a' "
        "and '?'."
    ),
    "cargo_class": "About 1% blank completely at random (MCAR).",
    "setpoint_c": (
        "Structural blank: empty exactly when the cargo is 'dry' (no refrigeration, so no "
        "setpoint applies), plus about 1% extra MCAR blanks on refrigerated trips. Where "
        "cargo_class is blank, the setpoint still follows the hidden true class."
    ),
    "ambient_c": (
        "Missing at random (MAR) on the departure hour: the sensor drops out on about 30% of "
        "night departures (22:00-05:59) and about 4% of day departures."
    ),
    "door_open_min": (
        "Blank means zero: about 35% of trips never opened the door and the file writes those "
        "as blanks, so the column holds no zeros at all."
    ),
    "fuel_l": (
        "Missing not at random (MNAR): high readings are lost; the chance of a blank rises "
        "steeply (logistic) with the true value itself, about 15% overall and mostly in the "
        "top quartile."
    ),
    "driver_rating": (
        "Sentinel code: about 3% of trips hold 99, meaning 'no rating given', at the far end "
        "of the 1-5 scale; never blank."
    ),
    "remark": "Free text, high cardinality; about 50% blank because the driver wrote nothing.",
    "customs_ref": (
        "Present only on cross-border trips (about 30%, more often on long trips); blank on "
        "the rest because no customs reference exists."
    ),
    "spoiled": "About 0.5% blank completely at random (MCAR).",
}

_DEPOTS = ("Gullhaven", "Ashcombe Yard", "Fernley Cross", "Tidewell", "Brackenmoor")
_DEPOT_SHARE = np.array([0.31, 0.25, 0.19, 0.15, 0.10])
# Median trip length per depot: the inland depots serve longer routes.
_DEPOT_MEDIAN_KM = np.array([170.0, 240.0, 120.0, 330.0, 210.0])
# Coastal depots are milder, the upland one colder.
_DEPOT_TEMP_OFFSET = np.array([0.8, 0.0, -0.4, 0.3, -1.3])

_CLASSES = ("frozen", "chilled", "pharma", "produce", "dry")
_DRY = 4
# Cargo mix per depot (rows follow _DEPOTS, columns follow _CLASSES); dry is about 20% overall.
_CLASS_MIX = np.array(
    [
        [0.30, 0.25, 0.06, 0.19, 0.20],
        [0.22, 0.28, 0.10, 0.20, 0.20],
        [0.18, 0.22, 0.18, 0.22, 0.20],
        [0.25, 0.20, 0.05, 0.25, 0.25],
        [0.20, 0.25, 0.15, 0.28, 0.12],
    ]
)
_CLASS_MEDIAN_KG = np.array([13000.0, 10000.0, 3500.0, 11000.0, 14000.0])
# Refrigeration unit draw in litres per hour of trip; dry trailers have no unit.
_REEFER_L_PER_H = np.array([2.6, 1.8, 1.6, 1.5, 0.0])

# Departures per hour of day; the night (22:00-05:59) keeps a good share because chilled
# goods are moved while roads are empty.
_HOUR_WEIGHT = np.array(
    [1.2, 1.0, 0.9, 1.1, 1.6, 2.2, 2.6, 2.4, 2.0, 1.7, 1.5, 1.4,
     1.3, 1.4, 1.5, 1.6, 1.6, 1.5, 1.4, 1.3, 1.3, 1.4, 1.5, 1.3]
)  # fmt: skip
_FIRST_DAY = np.datetime64("2026-01-01", "D")
_N_DAYS = 181  # 2026-01-01 .. 2026-06-30

_TOKENS_SHARE = 0.008
_PLACES = np.array(
    ["Corran Bridge", "Hollin End", "Marrowby", "Pellow Cross", "Tarnside", "Ousel Junction",
     "Brindle Hill", "Saltmere", "Quarry Lane", "Nethercot", "Wyke Moor", "Elderford"]
)  # fmt: skip
# Remark templates that only make sense with a refrigeration unit.
_REEFER_TEMPLATES = (1, 7)
_N_TEMPLATES = 12


def _sigmoid(x: np.ndarray) -> np.ndarray:
    return 1.0 / (1.0 + np.exp(-x))


def _calibrate(lin: np.ndarray, target: float) -> np.ndarray:
    """Shift a linear predictor so the mean logistic probability equals ``target``.

    Bisection keeps the planted rate on target whatever the sample, so small and large tables
    carry the same share of blanks.
    """
    lo, hi = -30.0, 30.0
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if _sigmoid(lin + mid).mean() < target:
            lo = mid
        else:
            hi = mid
    return _sigmoid(lin + 0.5 * (lo + hi))


def _cat(*parts: np.ndarray | str) -> np.ndarray:
    out = parts[0]
    for part in parts[1:]:
        out = np.strings.add(out, part)
    return np.asarray(out)


def _fmt1(values: np.ndarray) -> np.ndarray:
    """Format with exactly one decimal, via integer tenths so "-0.0" cannot appear."""
    tenths = np.rint(np.asarray(values, dtype=float) * 10.0).astype(np.int64)
    mag = np.abs(tenths)
    sign = np.where(tenths < 0, "-", "")
    return _cat(sign, (mag // 10).astype(str), ".", (mag % 10).astype(str))


def _fmt_minutes(stamps: np.ndarray) -> np.ndarray:
    text = np.datetime_as_string(stamps.astype("datetime64[m]"), unit="m")
    return np.asarray(np.strings.replace(text, "T", " "))


def _blank(text: np.ndarray, mask: np.ndarray) -> np.ndarray:
    out = text.astype(object)
    out[mask] = ""
    return out


def _remarks(
    rng: np.random.Generator, refrigerated: np.ndarray, distance: np.ndarray
) -> np.ndarray:
    """Driver remarks built from templates with numbers, places and times, one per row."""
    n = len(refrigerated)
    tpl = rng.integers(0, _N_TEMPLATES, n)
    # A dry trailer has no reefer alarm or probe; give those rows a general template instead.
    swap = ~refrigerated & np.isin(tpl, _REEFER_TEMPLATES)
    tpl[swap] = rng.choice([0, 2, 3, 4, 5, 8], size=int(swap.sum()))

    out = np.empty(n, dtype=object)
    for t in range(_N_TEMPLATES):
        rows = np.flatnonzero(tpl == t)
        m = len(rows)
        if m == 0:  # numpy's zfill cannot take an empty array
            continue

        def num(low: int, high: int, m: int = m) -> np.ndarray:
            return rng.integers(low, high + 1, m).astype(str)

        def clock(m: int = m) -> np.ndarray:
            hh = np.strings.zfill(rng.integers(0, 24, m).astype(str), 2)
            mm = np.strings.zfill(rng.integers(0, 60, m).astype(str), 2)
            return _cat(hh, ":", mm)

        def place(m: int = m) -> np.ndarray:
            return _PLACES[rng.integers(0, len(_PLACES), m)]

        def waited(m: int = m) -> np.ndarray:
            return (5 * rng.integers(1, 25, m)).astype(str)

        if t == 0:
            text = _cat("waited ", waited(), " min at gate ", num(1, 14))
        elif t == 1:
            text = _cat("reefer alarm reset at ", clock())
        elif t == 2:
            text = _cat("pallet ", num(1, 33), " re-strapped")
        elif t == 3:
            text = _cat("detour via ", place(), ", road closed")
        elif t == 4:
            text = _cat("fuel stop at ", place())
        elif t == 5:
            text = _cat("unloaded at dock ", num(1, 20), ", took ", waited(), " min")
        elif t == 6:
            text = _cat("seal ", num(100000, 999999), " checked at ", place())
        elif t == 7:
            text = _cat("temp probe ", num(1, 4), " swapped at ", clock())
        elif t == 8:
            text = _cat("traffic near ", place(), ", lost ", waited(), " min")
        elif t == 9:
            text = _cat("customer asked for redelivery at ", clock())
        elif t == 10:
            text = _cat(num(1, 6), " pallets refused, damaged wrap")
        else:
            km = np.maximum(1, np.floor(distance[rows] * rng.random(m))).astype(np.int64)
            text = _cat("tyre pressure checked at km ", km.astype(str))
        out[rows] = text
    return out


def _check_args(n_trips: int, seed: int) -> None:
    if isinstance(n_trips, bool) or not isinstance(n_trips, int | np.integer):
        raise OptionError(f"n_trips must be an integer, got {n_trips!r}")
    if not 1 <= n_trips <= 999_999:
        raise OptionError(f"n_trips must be between 1 and 999999, got {n_trips}")
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer):
        raise OptionError(f"seed must be an integer, got {seed!r}")
    if seed < 0:
        raise OptionError(f"seed must be non-negative, got {seed}")


def _make_trip_log_with_truth(
    n_trips: int = 5000, seed: int = DEFAULT_SEED
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Build the demo table together with the hidden true values behind it.

    Returns
    -------
    frame : pandas.DataFrame
        The table as written to CSV (all ``str``, blanks as ``""``).
    truth : pandas.DataFrame
        Same columns, typed: the values before any blanking, tokens or sentinels. Cells with
        no true value hold NA: setpoint on dry trips and driver_rating where no rating was
        given. door_open_min holds the real 0.0 where the file shows a blank; remark and
        customs_ref hold ``""`` where nothing exists.
    """
    _check_args(n_trips, seed)
    n = int(n_trips)
    rng = np.random.default_rng(seed)
    # One generator, drawn from in a fixed order: departures, trips, conditions, the words,
    # then the blanks (after all true values, so the truth does not depend on the masks).
    v = _departures(rng, n)
    v.update(_trips(rng, n, v))
    v.update(_conditions(rng, n, v))
    v.update(_words(rng, n, v))
    frame = _blanked(rng, n, v)
    return frame, _truth(v)


def _departures(rng: np.random.Generator, n: int) -> dict[str, np.ndarray]:
    """Departure times (weekdays busier than weekends, early mornings busiest), in order."""
    days = np.arange(_N_DAYS)
    weekday = (days + (_FIRST_DAY.astype(np.int64) + 3)) % 7  # 1970-01-01 was a Thursday
    day_w = np.select([weekday == 5, weekday == 6], [0.7, 0.4], 1.0)
    day = rng.choice(_N_DAYS, size=n, p=day_w / day_w.sum())
    hour = rng.choice(24, size=n, p=_HOUR_WEIGHT / _HOUR_WEIGHT.sum())
    minute = rng.integers(0, 60, n)
    offset_min = np.sort(day * 1440 + hour * 60 + minute)  # the log runs in departure order
    day, rest = np.divmod(offset_min, 1440)
    hour, minute = np.divmod(rest, 60)
    departed = _FIRST_DAY.astype("datetime64[m]") + offset_min.astype("timedelta64[m]")
    return {"day": day, "hour": hour, "minute": minute, "departed": departed,
            "night": (hour >= 22) | (hour < 6)}


def _trips(rng: np.random.Generator, n: int, v: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Depot, distance, cargo, payload, stops and the trip's duration and arrival."""
    depot = rng.choice(len(_DEPOTS), size=n, p=_DEPOT_SHARE)
    distance = _DEPOT_MEDIAN_KM[depot] * np.exp(rng.normal(0.0, 0.6, n))
    # Redraw out-of-range trips rather than clip them, so no spike builds up at the limits.
    for _ in range(20):
        out = (distance < 20.0) | (distance > 900.0)
        if not out.any():
            break
        distance[out] = _DEPOT_MEDIAN_KM[depot[out]] * np.exp(rng.normal(0.0, 0.6, out.sum()))
    distance = np.round(np.clip(distance, 20.0, 900.0), 1)

    cum = np.cumsum(_CLASS_MIX, axis=1)
    cargo = (rng.random(n)[:, None] > cum[depot]).sum(axis=1)
    cargo = np.minimum(cargo, len(_CLASSES) - 1)

    payload = _CLASS_MEDIAN_KG[cargo] * (distance / 200.0) ** 0.15 * np.exp(rng.normal(0, 0.4, n))
    payload = (np.round(np.clip(payload, 200.0, 24000.0) / 10.0) * 10).astype(np.int64)

    stops = 1 + rng.poisson(distance / 300.0)
    speed = rng.uniform(60.0, 75.0, n)
    drive_h = distance / speed
    breaks_h = 0.75 * np.floor(drive_h / 4.5)  # statutory-style rest after each 4.5 h
    stop_h = stops * rng.uniform(0.25, 0.5, n)
    trip_h = (drive_h + breaks_h + stop_h) * np.exp(rng.normal(0.0, 0.08, n))
    trip_min = np.maximum(10, np.rint(trip_h * 60.0)).astype(np.int64)
    return {"depot": depot, "distance": distance, "cargo": cargo, "refrigerated": cargo != _DRY,
            "payload": payload, "stops": stops, "trip_h": trip_h,
            "planned_h": drive_h + breaks_h + stop_h,
            "arrived": v["departed"] + trip_min.astype("timedelta64[m]")}


def _conditions(rng: np.random.Generator, n: int,
                v: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Setpoint, outside temperature, door minutes, fuel, spoilage and the driver's rating."""
    cargo, depot, day, hour, minute = v["cargo"], v["depot"], v["day"], v["hour"], v["minute"]
    distance, payload, stops, trip_h = v["distance"], v["payload"], v["stops"], v["trip_h"]
    setpoint = np.full(n, np.nan)
    bounds = {0: (-25.0, -18.0), 1: (2.0, 4.0), 2: (2.0, 8.0), 3: (4.0, 12.0)}
    for cls, (low, high) in bounds.items():
        rows = cargo == cls
        continuous = rng.uniform(low, high, rows.sum())
        # Most units are left on a round figure; the rest are tuned per customer.
        rounded = np.clip(np.round(continuous), low, high)
        setpoint[rows] = np.where(rng.random(rows.sum()) < 0.6, rounded, continuous)

    doy = day.astype(float) + (hour + minute / 60.0) / 24.0
    season = 9.5 - 7.5 * np.cos(2.0 * np.pi * (doy - 20.0) / 365.0)
    diurnal = 4.0 * np.cos(2.0 * np.pi * (hour + minute / 60.0 - 15.0) / 24.0)
    weather = rng.normal(0.0, 2.5, _N_DAYS)[day]  # trips on the same day share the weather
    ambient = season + diurnal + _DEPOT_TEMP_OFFSET[depot] + weather + rng.normal(0.0, 1.5, n)
    ambient = np.round(ambient, 1)

    zero_door = rng.random(n) < _calibrate(-0.6 * (stops - 1) - payload / 20000.0, 0.35)
    door = 0.1 + rng.gamma(1.4, 2.0 + 1.5 * stops + payload / 4000.0)
    door = np.where(zero_door, 0.0, np.round(door, 1))

    fuel = (
        distance * rng.uniform(0.28, 0.40, n)
        + distance * payload / 1000.0 * 0.004
        + trip_h * _REEFER_L_PER_H[cargo]
        + 0.8 * stops
    ) * np.exp(rng.normal(0.0, 0.04, n))
    fuel = np.round(np.maximum(fuel, 1.0), 1)

    lin = 0.04 * door + 0.15 * (ambient - 10.0) + 1.2 * distance / 500.0
    lin = np.where(v["refrigerated"], lin, -4.0)  # dry goods rarely spoil
    spoiled = rng.random(n) < _calibrate(lin, 0.04)

    late_h = np.maximum(0.0, trip_h - v["planned_h"])
    score = 4.2 + rng.normal(0.0, 0.9, n) - 1.8 * spoiled - 0.8 * late_h
    rating = np.clip(np.rint(score), 1, 5).astype(np.int64)
    return {"setpoint": np.round(setpoint, 1), "ambient": ambient, "zero_door": zero_door,
            "door": door, "fuel": fuel, "spoiled": spoiled, "rating": rating,
            "no_rating": rng.random(n) < 0.03}


def _words(rng: np.random.Generator, n: int, v: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Free-text remarks, customs references of cross-border trips, and trip ids."""
    has_remark = rng.random(n) < 0.5
    remark = np.full(n, "", dtype=object)
    remark[has_remark] = _remarks(rng, v["refrigerated"][has_remark], v["distance"][has_remark])

    cross_border = rng.random(n) < _calibrate(1.5 * np.log(v["distance"] / 200.0), 0.30)
    hexdigits = np.array(list("0123456789ABCDEF"))[rng.integers(0, 16, (n, 6))]
    customs = _cat("CX-", np.ascontiguousarray(hexdigits).view("<U6").ravel())
    customs = np.where(cross_border, customs, "").astype(object)

    trip_id = _cat("RF-26-", np.strings.zfill(np.arange(1, n + 1).astype(str), 6))
    return {"remark": remark, "customs": customs, "trip_id": trip_id}


def _blanked(rng: np.random.Generator, n: int, v: dict[str, np.ndarray]) -> pd.DataFrame:
    """The table as written to CSV: every planted blank, token and code, all ``str``."""
    def mcar(rate: float) -> np.ndarray:
        return rng.random(n) < rate

    fuel, payload = v["fuel"], v["payload"]
    blank_payload = mcar(0.04)
    z_fuel = (fuel - fuel.mean()) / (fuel.std() or 1.0)
    blank_fuel = rng.random(n) < _calibrate(4.0 * z_fuel, 0.15)
    blank_ambient = rng.random(n) < np.where(v["night"], 0.30, 0.04)

    payload_text = _blank(payload.astype(str), blank_payload)
    open_rows = np.flatnonzero(~blank_payload)
    n_tokens = min(len(open_rows), int(round(_TOKENS_SHARE * n)))
    token_rows = rng.choice(open_rows, size=n_tokens, replace=False)
    n_odd = max(1, round(0.1 * n_tokens)) if n_tokens >= 3 else 0
    tokens = ["n/a"] * n_odd + ["?"] * n_odd + ["not weighed"] * (n_tokens - 2 * n_odd)
    payload_text[token_rows] = tokens

    setpoint_text = _blank(_fmt1(np.nan_to_num(v["setpoint"])), ~v["refrigerated"] | mcar(0.01))
    rating_text = np.where(v["no_rating"], "99", v["rating"].astype(str))

    columns = {
        "trip_id": v["trip_id"].astype(object),
        "depot": _blank(np.array(_DEPOTS)[v["depot"]], mcar(0.01)),
        "departed_at": _blank(_fmt_minutes(v["departed"]), mcar(0.015)),
        "arrived_at": _blank(_fmt_minutes(v["arrived"]), mcar(0.02)),
        "distance_km": _blank(_fmt1(v["distance"]), mcar(0.03)),
        "payload_kg": payload_text,
        "cargo_class": _blank(np.array(_CLASSES)[v["cargo"]], mcar(0.01)),
        "setpoint_c": setpoint_text,
        "ambient_c": _blank(_fmt1(v["ambient"]), blank_ambient),
        "door_open_min": _blank(_fmt1(v["door"]), v["zero_door"]),
        "fuel_l": _blank(_fmt1(fuel), blank_fuel),
        "driver_rating": rating_text.astype(object),
        "remark": v["remark"],
        "customs_ref": v["customs"],
        "spoiled": _blank(np.where(v["spoiled"], "yes", "no"), mcar(0.005)),
    }
    return pd.DataFrame({name: pd.array(columns[name], dtype="str") for name in DEMO_COLUMNS})


def _truth(v: dict[str, np.ndarray]) -> pd.DataFrame:
    """The true values, typed, before any blank, token or code."""
    return pd.DataFrame(
        {
            "trip_id": pd.array(v["trip_id"], dtype="str"),
            "depot": pd.array(np.array(_DEPOTS)[v["depot"]], dtype="str"),
            "departed_at": v["departed"].astype("datetime64[s]"),
            "arrived_at": v["arrived"].astype("datetime64[s]"),
            "distance_km": v["distance"],
            "payload_kg": v["payload"],
            "cargo_class": pd.array(np.array(_CLASSES)[v["cargo"]], dtype="str"),
            "setpoint_c": v["setpoint"],
            "ambient_c": v["ambient"],
            "door_open_min": v["door"],
            "fuel_l": v["fuel"],
            "driver_rating": pd.array(np.where(v["no_rating"], None, v["rating"]), dtype="Int64"),
            "remark": pd.array(v["remark"], dtype="str"),
            "customs_ref": pd.array(v["customs"], dtype="str"),
            "spoiled": v["spoiled"],
        }
    )


def make_trip_log(n_trips: int = 5000, seed: int = DEFAULT_SEED) -> pd.DataFrame:
    """Generate the demo trip log as it would sit in a CSV file.

    Parameters
    ----------
    n_trips : int, default 5000
        Number of rows (trips), from 1 to 999999.
    seed : int, default 20261201
        Seed for :func:`numpy.random.default_rng`; the same arguments give an identical frame.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`DEMO_COLUMNS` in order, every one of ``str`` dtype; a blank cell is the
        empty string. :data:`PLANTED` describes the missingness planted in each column.

    Raises
    ------
    OptionError
        If ``n_trips`` or ``seed`` is not an integer in range.
    """
    frame, _ = _make_trip_log_with_truth(n_trips, seed)
    return frame


def write_trip_log(
    path: str | Path, n_trips: int = 5000, seed: int = DEFAULT_SEED
) -> Path:
    """Write the demo trip log to a CSV file (UTF-8, comma-separated, no index).

    Parameters
    ----------
    path : str or pathlib.Path
        Destination file; its folder must exist.
    n_trips : int, default 5000
        Number of rows (trips).
    seed : int, default 20261201
        Seed for the generator.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    OptionError
        If ``n_trips`` or ``seed`` is out of range.
    TableIOError
        If the file cannot be written.
    """
    target = Path(path)
    frame = make_trip_log(n_trips, seed)
    try:
        frame.to_csv(target, index=False, encoding="utf-8")
    except OSError as exc:
        raise TableIOError(f"cannot write demo table to {target}: {exc}") from exc
    return target
