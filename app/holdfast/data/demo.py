"""Generate the fruit-packhouse demo data set: apples graded "premium" or "processing" from line sensors.

Run ``python sample_data/make_packhouse.py [OUT_DIR]`` to (re)write ``packhouse.parquet``,
``packhouse_planted.csv`` and ``packhouse.toml`` into ``OUT_DIR`` (default: sample_data/). The generator
lives in the package so that ``holdfast demo`` works from an installed copy.
The output is fully determined by ``SEED``; the same numpy/pyarrow versions give the same bytes.

Import it and call :func:`make_packhouse` to get the frames without writing anything.

The scenario is invented. Sensor ranges are plausible for dessert apples on a grading line (from
memory, common practice: diameter in mm, firmness in N from a penetrometer-style reading, soluble solids
in degrees Brix, blush as % of the skin with red colour, surface defects as a count, weight in g).
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

SEED = 20260417
N_ROWS = 3000
HOLDOUT_SHARE = 0.15
PLANTED_SHARE = 0.03
#: The shift where most grading slips happen, and the share of slips that fall in it.
SLIP_SHIFT = "late"
SLIP_SHIFT_SHARE = 0.75
#: Share of slips picked near the grading threshold; the rest are clear cases (|score| >= CLEAR_SCORE).
NEAR_THRESHOLD_SHARE = 0.75
CLEAR_SCORE = 0.5

PREMIUM = "premium"
PROCESSING = "processing"
SHIFTS = ("early", "day", "late")
SHIFT_SHARES = (0.3, 0.4, 0.3)
LOTS_PER_DAY = 150
BLOCKS = tuple(f"B{i:02d}" for i in range(1, 13))


class Variety(NamedTuple):
    """Typical readings of one apple variety and its premium requirements (brix, blush)."""

    diameter_mm: float
    diameter_sd: float
    firmness_n: float
    brix: float
    blush_pct: float
    blush_sd: float
    brix_min: float
    #: Red varieties need at least this much blush; for a green variety blush is a fault (see blush_max).
    blush_min: float | None = None
    blush_max: float | None = None


VARIETIES: dict[str, Variety] = {
    "Gala": Variety(69.0, 5.0, 68.0, 13.2, 68.0, 16.0, brix_min=11.8, blush_min=50.0),
    "Fuji": Variety(75.0, 5.5, 74.0, 14.6, 52.0, 18.0, brix_min=12.8, blush_min=40.0),
    "Braeburn": Variety(72.0, 5.0, 80.0, 12.6, 58.0, 16.0, brix_min=11.3, blush_min=45.0),
    "Granny Smith": Variety(74.0, 5.0, 84.0, 11.4, 4.0, 5.0, brix_min=10.8, blush_max=15.0),
    "Jonagold": Variety(78.0, 6.0, 64.0, 13.6, 55.0, 17.0, brix_min=11.8, blush_min=40.0),
    "Elstar": Variety(68.0, 4.5, 66.0, 13.0, 50.0, 17.0, brix_min=11.6, blush_min=40.0),
}
PREMIUM_MIN_DIAMETER = 64.0  # mm
PREMIUM_MIN_FIRMNESS = 58.0  # N
PREMIUM_MAX_DEFECTS = 1
#: Softness of the "every requirement met" rule (soft minimum temperature, in tolerance units).
SOFTMIN_T = 1.0
#: Constant subtracted from the soft minimum; sets the premium share near 60%.
SCORE_BAR = 1.1
#: Sd of the grading noise added to the score (natural ambiguity of borderline fruit).
GRADE_NOISE = 0.08
#: Weight of the lot's growing quality in each reading (the rest is the reading's own variation).
QUALITY_WEIGHT = 0.8
#: Sd of the orchard blocks' quality offsets (in units of the lot-to-lot quality sd).
BLOCK_QUALITY_SD = 1.0

SENSOR_COLUMNS = ("diameter_mm", "firmness_n", "brix", "blush_pct", "defects", "weight_g")
COLUMNS = ("lot_id", *SENSOR_COLUMNS, "variety", "orchard_block", "shift", "holdout", "grade")
PLANTED_COLUMNS = ("lot_id", "row", "given_grade", "true_grade", "shift", "holdout")

SPEC_TOML = """\
# Demo spec for the fruit-packhouse data set (written by holdfast.data.demo / sample_data/make_packhouse.py).
# Apples graded "premium" or "processing" from line-sensor readings; about 3% of the grades
# are planted grader slips, listed in packhouse_planted.csv.

[data]
label = "grade"
id = "lot_id"
# Six sensor readings plus two categoricals. "shift" is in the file but is not a feature.
features = [
    "diameter_mm", "firmness_n", "brix", "blush_pct", "defects", "weight_g",
    "variety", "orchard_block",
]
# Rows with holdout = true are never trained on.
split = "holdout"

[prepare]
scale = "standard"
categorical = "onehot"

[learner]
family = "svm"
kernel = "rbf"
# C = 10: the grading rule is nearly deterministic, so the clean rows are close to separable. With
# C = 1 the boundary is too smooth for the rule and over a quarter of the training rows become support
# rows; with C = 10 about a fifth do (fewer refits for the exact leave-one-out scan), and nearly every
# planted slip is still a bounded support row (alpha = C).
C = 10.0
gamma = "scale"

[run]
# -1: refit on all cores.
jobs = -1
"""


def make_packhouse(n_rows: int = N_ROWS, seed: int = SEED) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Build the packhouse table and the ground truth of its planted grading slips.

    Parameters
    ----------
    n_rows : int
        Number of lots (rows); at least 100.
    seed : int
        Seed for ``numpy.random.default_rng``.

    Returns
    -------
    data : pandas.DataFrame
        One row per lot, columns ``COLUMNS``, in processing order; ``grade`` holds the given grades
        (with the planted slips).
    planted : pandas.DataFrame
        One row per planted slip, columns ``PLANTED_COLUMNS``; ``row`` is the 0-based row in ``data``.
    """
    if n_rows < 100:
        raise ValueError(f"n_rows must be at least 100, got {n_rows}")
    rng = np.random.default_rng(seed)
    shift = _draw_shifts(rng, n_rows)
    lot_id = _draw_lot_ids(rng, n_rows)
    block = rng.choice(np.array(BLOCKS), size=n_rows)
    variety = _draw_varieties(rng, block)
    sensors = _draw_sensors(rng, variety, block)
    score = premium_score(sensors, variety) + rng.normal(0.0, GRADE_NOISE, n_rows)
    true_grade = np.where(score > 0.0, PREMIUM, PROCESSING)
    holdout = np.zeros(n_rows, dtype=bool)
    holdout[rng.choice(n_rows, size=round(HOLDOUT_SHARE * n_rows), replace=False)] = True
    planted_rows = _pick_slips(rng, score, shift)
    given = true_grade.copy()
    given[planted_rows] = np.where(true_grade[planted_rows] == PREMIUM, PROCESSING, PREMIUM)

    data = pd.DataFrame({"lot_id": lot_id})
    for name in SENSOR_COLUMNS:
        data[name] = sensors[name]
    data["variety"] = variety
    data["orchard_block"] = block
    data["shift"] = shift
    data["holdout"] = holdout
    data["grade"] = given
    planted = pd.DataFrame(
        {
            "lot_id": lot_id[planted_rows],
            "row": planted_rows.astype(np.int64),
            "given_grade": given[planted_rows],
            "true_grade": true_grade[planted_rows],
            "shift": shift[planted_rows],
            "holdout": holdout[planted_rows],
        }
    )
    return data, planted


def premium_score(sensors: dict[str, np.ndarray], variety: np.ndarray) -> np.ndarray:
    """Noise-free grading score: positive means premium.

    Each requirement (size, firmness, brix, colour, defects) gives a margin ``m_k`` in units of its
    tolerance; the score is the soft minimum ``-t * log(mean_k exp(-m_k / t)) - SCORE_BAR`` with
    ``t = SOFTMIN_T``: close to the smallest margin when one requirement fails badly, smooth near the
    corners where two requirements are borderline.
    """
    unknown = set(np.unique(variety).tolist()) - set(VARIETIES)
    if unknown:
        raise ValueError(f"unknown varieties: {sorted(unknown)}")
    blush = np.asarray(sensors["blush_pct"], dtype=np.float64)
    blush_margin = np.empty_like(blush)
    brix_min = np.empty_like(blush)
    for name, v in VARIETIES.items():
        is_v = variety == name
        brix_min[is_v] = v.brix_min
        if v.blush_min is not None:
            blush_margin[is_v] = (blush[is_v] - v.blush_min) / 10.0
        else:
            blush_margin[is_v] = (v.blush_max - blush[is_v]) / 5.0
    margins = np.stack(
        [
            (np.asarray(sensors["diameter_mm"]) - PREMIUM_MIN_DIAMETER) / 3.0,
            (np.asarray(sensors["firmness_n"]) - PREMIUM_MIN_FIRMNESS) / 6.0,
            (np.asarray(sensors["brix"]) - brix_min) / 0.8,
            blush_margin,
            (PREMIUM_MAX_DEFECTS + 0.5 - np.asarray(sensors["defects"])) / 0.8,
        ]
    )
    t = SOFTMIN_T
    low = margins.min(axis=0)
    return low - t * np.log(np.exp(-(margins - low) / t).mean(axis=0)) - SCORE_BAR


def _draw_shifts(rng: np.random.Generator, n: int) -> np.ndarray:
    """Shifts in processing order: days of early/day/late runs of lots."""
    counts = rng.multinomial(n, SHIFT_SHARES)
    n_days = -(-n // LOTS_PER_DAY)
    day = np.concatenate([np.sort(rng.integers(0, n_days, c)) for c in counts])
    shift_idx = np.repeat(np.arange(len(SHIFTS)), counts)
    order = np.lexsort((shift_idx, day))
    return np.array(SHIFTS, dtype=object)[shift_idx[order]]


def _draw_lot_ids(rng: np.random.Generator, n: int) -> np.ndarray:
    """Increasing lot numbers with small gaps (lots sent elsewhere), as ``LOT-2026-000123``."""
    numbers = 100 + np.cumsum(rng.integers(1, 4, n))
    return np.array([f"LOT-2026-{k:06d}" for k in numbers], dtype=object)


def _draw_varieties(rng: np.random.Generator, block: np.ndarray) -> np.ndarray:
    """Each block is mostly planted with one main variety (80% of its lots), the rest mixed."""
    names = np.array(list(VARIETIES), dtype=object)
    main = {b: names[i % len(names)] for i, b in enumerate(BLOCKS)}
    mixed = rng.choice(names, size=block.size)
    use_main = rng.random(block.size) < 0.8
    return np.where(use_main, np.array([main[b] for b in block], dtype=object), mixed)


def _draw_sensors(rng: np.random.Generator, variety: np.ndarray, block: np.ndarray) -> dict[str, np.ndarray]:
    """Readings with variety and block effects and the usual correlations, rounded to sensor precision."""
    n = variety.size
    # Block effects: evenly spread levels (mean 0, sd 1) dealt to the blocks in random order, so the
    # class balance does not hinge on a lucky draw of twelve blocks.
    levels = np.linspace(-1.0, 1.0, len(BLOCKS)) * np.sqrt(3.0 * (len(BLOCKS) - 1) / (len(BLOCKS) + 1))
    per_block = np.stack([rng.permutation(levels) for _ in range(3)])
    block_pos = np.searchsorted(np.array(BLOCKS), block)
    block_size = 1.5 * per_block[0, block_pos]  # mm
    block_defects = np.exp(0.5 * per_block[1, block_pos])  # defect-rate multiplier
    block_quality = BLOCK_QUALITY_SD * per_block[2, block_pos]
    v = [VARIETIES[name] for name in variety]
    d_mean, d_sd, f_mean, b_mean, bl_mean, bl_sd = (
        np.array([getattr(x, k) for x in v])
        for k in ("diameter_mm", "diameter_sd", "firmness_n", "brix", "blush_pct", "blush_sd")
    )
    # Growing quality of the lot (block and season): good lots are larger, firmer, sweeter, better
    # coloured and cleaner. Each reading mixes it with its own variation.
    qw, rw = QUALITY_WEIGHT, float(np.sqrt(1.0 - QUALITY_WEIGHT**2))
    quality = (block_quality + rng.standard_normal(n)) / np.sqrt(1.0 + BLOCK_QUALITY_SD**2)
    size_z = rng.standard_normal(n)
    diameter = d_mean + block_size + d_sd * (qw * quality + rw * size_z)
    # Larger fruit from the same conditions tends to be a little softer.
    firmness = f_mean + 7.0 * (qw * quality + rw * rng.standard_normal(n)) - 0.3 * d_sd * size_z
    sun = rng.standard_normal(n)  # sun exposure: more blush and more sugar
    blush = bl_mean + bl_sd * (qw * quality + rw * (0.7 * sun + 0.71 * rng.standard_normal(n)))
    brix = b_mean + 0.9 * (qw * quality + rw * (0.55 * sun + 0.83 * rng.standard_normal(n)))
    defects = rng.poisson(0.5 * block_defects * np.exp(-0.5 * qw * quality))
    # Weight of a near-sphere of density ~0.85 g/cm^3; shape and density vary by a few percent.
    weight = 0.85 * np.pi / 6.0 * (diameter / 10.0) ** 3 * np.exp(rng.normal(0.0, 0.04, n))
    return {
        "diameter_mm": np.round(diameter, 1),
        "firmness_n": np.round(np.clip(firmness, 25.0, None), 1),
        "brix": np.round(np.clip(brix, 8.0, None), 1),
        "blush_pct": np.round(np.clip(blush, 0.0, 100.0), 0),
        "defects": defects.astype(np.int64),
        "weight_g": np.round(weight, 1),
    }


def _pick_slips(rng: np.random.Generator, score: np.ndarray, shift: np.ndarray) -> np.ndarray:
    """Rows whose grade a grader got wrong: mostly in ``SLIP_SHIFT``, mostly near the threshold."""
    n_slips = round(PLANTED_SHARE * score.size)
    n_in_shift = round(SLIP_SHIFT_SHARE * n_slips)
    chosen: list[np.ndarray] = []
    for in_shift, count in ((True, n_in_shift), (False, n_slips - n_in_shift)):
        pool = np.flatnonzero((shift == SLIP_SHIFT) == in_shift)
        n_near = round(NEAR_THRESHOLD_SHARE * count)
        weight = np.exp(-np.abs(score[pool]) / 0.3)
        near = rng.choice(pool, size=n_near, replace=False, p=weight / weight.sum())
        clear = np.setdiff1d(pool[np.abs(score[pool]) >= CLEAR_SCORE], near)
        chosen += [near, rng.choice(clear, size=count - n_near, replace=False)]
    return np.sort(np.concatenate(chosen)).astype(np.int64)


def to_arrow(frame: pd.DataFrame) -> pa.Table:
    """Arrow table with explicit column types and no pandas metadata (the bytes name no pandas version)."""
    fields = []
    for name in frame.columns:
        dtype = frame[name].dtype
        if pd.api.types.is_bool_dtype(dtype):
            typ = pa.bool_()
        elif pd.api.types.is_integer_dtype(dtype):
            typ = pa.int64()
        elif pd.api.types.is_float_dtype(dtype):
            typ = pa.float64()
        else:
            typ = pa.string()
        fields.append(pa.field(name, typ, nullable=False))
    schema = pa.schema(fields)
    arrays = [pa.array(frame[f.name].tolist(), type=f.type) for f in fields]
    return pa.Table.from_arrays(arrays, schema=schema)


def write_packhouse(out_dir: str | Path, n_rows: int = N_ROWS, seed: int = SEED) -> dict[str, Path]:
    """Write ``packhouse.parquet``, ``packhouse_planted.csv`` and ``packhouse.toml`` into ``out_dir``."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    data, planted = make_packhouse(n_rows, seed)
    paths = {
        "data": out / "packhouse.parquet",
        "planted": out / "packhouse_planted.csv",
        "spec": out / "packhouse.toml",
    }
    pq.write_table(
        to_arrow(data), paths["data"], compression="zstd", compression_level=9, use_dictionary=True
    )
    csv = planted.assign(holdout=planted["holdout"].map({True: "true", False: "false"}))
    paths["planted"].write_text(csv.to_csv(index=False, lineterminator="\n"), encoding="utf-8")
    paths["spec"].write_text(SPEC_TOML, encoding="utf-8")
    return paths


def main(argv: list[str] | None = None, default_dir: Path | None = None) -> int:
    """Command line: ``make_packhouse.py [OUT_DIR]``."""
    args = sys.argv[1:] if argv is None else argv
    if len(args) > 1:
        print("usage: make_packhouse.py [OUT_DIR]", file=sys.stderr)
        return 2
    out_dir = Path(args[0]) if args else (default_dir or Path.cwd())
    for path in write_packhouse(out_dir).values():
        print(path, file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())


def write_demo(folder: Path) -> tuple[Path, Path]:
    """Write the demo data, spec and planted-error ground truth into ``folder`` unless already there.

    Existing files are kept (with the session journal beside them, reopening the demo restores its
    decisions). Returns (data path, spec path).
    """
    data, spec = folder / "packhouse.parquet", folder / "packhouse.toml"
    if not (data.exists() and spec.exists()):
        write_packhouse(folder)
    return data, spec
