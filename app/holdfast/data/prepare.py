"""Feature preparation: column checks, one-hot encoding and standard scaling.

Preparation is unsupervised and fitted once on the training rows (split column false or absent); every
LOO refit reuses the same prepared matrix, so only the learner is refitted.

Refused with one line naming the column (common-practice limits, ours):

* a label with more than ``MAX_CLASSES`` (50) classes, or a float label with more than ``MAX_FLOAT_CLASSES``
  (20) distinct values of which some are not whole numbers: that is a measurement, not a class (holdfast
  classifies; bin it first). A one-vs-one SVM fits k(k-1)/2 pairs, and every class needs support rows;
* a text feature with at least ``ID_LIKE_MIN`` (20) distinct values that are more than half the training
  rows: free text or an id, which one-hot encoding turns into one column per row (list the features in
  ``data.features`` without it);
* a text feature whose values are numbers but for a few cells: the first cell that is not a number;
* with ``prepare.scale = "none"``, feature values beyond +-1e150 (their squares overflow float64).

Warned (``Prepared.warnings``): label classes that differ only in spaces or upper/lower case.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from holdfast.data.spec import Spec
from holdfast.errors import DataError
from holdfast.textsafe import clip

MISSING_CATEGORY = "(missing)"
#: Most classes a label may have (common practice for a classifier's review, see the module docstring).
MAX_CLASSES = 50
#: Most distinct values of a float label with fractional values before it counts as continuous.
MAX_FLOAT_CLASSES = 20
#: Fewest distinct text values for a feature to count as an id / free text (with > half the rows).
ID_LIKE_MIN = 20
#: Share of a text feature's cells that are numbers from which it counts as a numeric column with strays.
MOSTLY_NUMBERS = 0.9
#: Largest feature magnitude used without scaling (squares stay below float64's 1.8e308).
HUGE = 1e150


@dataclass
class Prepared:
    """The data set ready for the learner. Arrays cover all input rows; ``train`` marks training rows."""

    frame: pd.DataFrame
    X: np.ndarray
    feature_names: list[str]
    features: list[str]
    numeric: list[str]
    categorical: list[str]
    y: np.ndarray
    classes: list
    ids: np.ndarray
    train: np.ndarray
    label_column: str
    id_column: str | None
    split_column: str | None
    categories: dict[str, list[str]] = field(default_factory=dict)
    #: one line each: what looks wrong but does not stop the scan (e.g. labels differing only in case)
    warnings: list[str] = field(default_factory=list)

    @property
    def train_index(self) -> np.ndarray:
        """Input positions of the training rows."""
        return np.flatnonzero(self.train)

    @property
    def labels(self) -> pd.Series:
        """The label column as given."""
        return self.frame[self.label_column]


def _missing_column(name: str, role: str, frame: pd.DataFrame, source: str) -> DataError:
    near = difflib.get_close_matches(name, [str(c) for c in frame.columns], n=1, cutoff=0.5)
    hint = (
        f"; did you mean '{clip(near[0])}'?"
        if near
        else f"; columns are: {', '.join(clip(c, 60) for c in frame.columns[:12])}"
    )
    return DataError(f"{source}: no column '{clip(name)}' ({role}){hint}")


def _is_numeric(s: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s)


def row_ids(data: pd.DataFrame, id_column: str | None) -> list[str]:
    """Row ids as text: the id column's values (``str(v)``), or the 0-based row position when
    ``id_column`` is None. The one rule for ids: findings, journal and exports all use it."""
    if id_column is None:
        return [str(i) for i in range(len(data))]
    if id_column not in data.columns:
        raise DataError(f"id column '{id_column}' is not in the data")
    return [str(v) for v in data[id_column].tolist()]


def prepare(frame: pd.DataFrame, spec: Spec, source: str = "<data>") -> Prepared:
    """Check the columns the spec names, split train/held-out, encode and scale the features."""
    d = spec.data
    for name, role in ((d.label, "label"), (d.id, "id"), (d.split, "split")):
        if name is not None and name not in frame.columns:
            raise _missing_column(name, role, frame, source)
    n = len(frame)

    # split
    if d.split is not None:
        s = frame[d.split]
        if pd.api.types.is_bool_dtype(s) and not s.isna().any():
            held = s.to_numpy(dtype=bool)
        elif pd.api.types.is_integer_dtype(s) and set(pd.unique(s)) <= {0, 1}:
            held = s.to_numpy() == 1
        else:
            raise DataError(
                f"{source}: split column '{d.split}' must be boolean (true = held out), got {s.dtype}"
            )
        train = ~held
    else:
        train = np.ones(n, dtype=bool)
    if train.sum() < 2:
        raise DataError(f"{source}: fewer than 2 training rows (split column '{d.split}' holds out the rest)")

    # ids
    if d.id is not None:
        id_s = frame[d.id]
        if id_s.isna().any():
            first = int(np.flatnonzero(id_s.isna().to_numpy())[0])
            raise DataError(f"{source}: id column '{d.id}' is empty at row {first}")
        ids = np.array(row_ids(frame, d.id), dtype=object)
        dup = pd.Series(ids).duplicated()
        if dup.any():
            first = int(np.flatnonzero(dup.to_numpy())[0])
            raise DataError(
                f"{source}: id column '{d.id}' repeats id '{ids[first]}' (row {first}); ids must be unique"
            )
    else:
        ids = np.array(row_ids(frame, None), dtype=object)

    # label
    lab = frame[d.label]
    if lab.isna().any():
        first = int(np.flatnonzero(lab.isna().to_numpy())[0])
        raise DataError(f"{source}: label column '{d.label}' is empty at row {first} (id {ids[first]})")
    train_labels = lab[train]
    classes = sorted(pd.unique(train_labels).tolist(), key=lambda v: (str(type(v)), v))
    if len(classes) < 2:
        only = classes[0] if classes else "none"
        raise DataError(
            f"{source}: label column '{d.label}' has one class only ({only!r}) in the training rows"
        )
    _check_label(lab, classes, d.label, source)
    warnings = _near_duplicate_labels(classes, d.label, source)
    code_of = {c: i for i, c in enumerate(classes)}
    y = np.array([code_of.get(v, -1) for v in lab.tolist()], dtype=np.int64)

    # features
    if d.features is not None:
        features = list(d.features)
        for f in features:
            if f not in frame.columns:
                raise _missing_column(f, "feature", frame, source)
    else:
        features = [c for c in frame.columns if c not in (d.label, d.id, d.split)]
        if not features:
            raise DataError(f"{source}: no feature columns (every column is the label, id or split)")
    numeric: list[str] = []
    categorical: list[str] = []
    for f in features:
        s = frame[f]
        if _is_numeric(s):
            numeric.append(f)
        elif pd.api.types.is_datetime64_any_dtype(s) or pd.api.types.is_timedelta64_dtype(s):
            raise DataError(
                f"{source}: feature column '{f}' holds dates/times; convert it to numbers or leave it out"
            )
        else:
            _refuse_stray_text(s, f, ids, source)
            if spec.prepare.categorical == "error":
                raise DataError(
                    f"{source}: feature column '{f}' is not numeric and prepare.categorical = \"error\""
                )
            categorical.append(f)

    blocks: list[np.ndarray] = []
    names: list[str] = []
    if numeric:
        num = frame[numeric].astype("float64").to_numpy(copy=True)
        bad = ~np.isfinite(num)
        if bad.any():
            r, c = np.argwhere(bad)[0]
            what = "NaN (missing)" if np.isnan(num[r, c]) else "infinite"
            count = int(bad[:, c].sum())
            raise DataError(
                f"{source}: feature column '{numeric[c]}' has {count} {what} value(s), first at row {r} "
                f"(id {ids[r]}); fill or drop them first"
            )
        big = np.abs(num).max(axis=0) if len(num) else np.zeros(len(numeric))
        if spec.prepare.scale == "standard":
            if (big > HUGE).any():  # divide by the largest magnitude first: no overflow in the squares
                num = num / np.where(big > HUGE, big, 1.0)
            mean = num[train].mean(axis=0)
            std = num[train].std(axis=0)
            std[std == 0] = 1.0
            num = (num - mean) / std
        elif (big > HUGE).any():
            c = int(np.flatnonzero(big > HUGE)[0])
            raise DataError(
                f"{source}: feature column '{clip(numeric[c])}' has values as large as {big[c]:.3g}; with "
                f'prepare.scale = "none" values beyond +-{HUGE:.0e} overflow the kernel; use '
                f'prepare.scale = "standard" or rescale the column'
            )
        blocks.append(num)
        names.extend(numeric)
    categories: dict[str, list[str]] = {}
    for f in categorical:
        s = frame[f]
        text = np.array([MISSING_CATEGORY if pd.isna(v) else str(v) for v in s.tolist()], dtype=object)
        levels = sorted(set(text[train].tolist()))
        if len(levels) >= ID_LIKE_MIN and len(levels) > 0.5 * int(train.sum()):
            raise DataError(
                f"{source}: feature column '{clip(f)}' has {len(levels)} distinct text values in "
                f"{int(train.sum())} training rows and looks like free text or an id; list the feature "
                f"columns in the spec without it (data.features = [...]) or name it as data.id"
            )
        categories[f] = levels
        onehot = (text[:, None] == np.array(levels, dtype=object)[None, :]).astype(np.float64)
        blocks.append(onehot)
        names.extend(f"{f}={lv}" for lv in levels)
    X = np.hstack(blocks) if blocks else np.zeros((n, 0))
    if X.shape[1] == 0:
        raise DataError(f"{source}: no usable feature columns")
    return Prepared(
        frame=frame,
        X=np.ascontiguousarray(X),
        feature_names=names,
        features=features,
        numeric=numeric,
        categorical=categorical,
        y=y,
        classes=classes,
        ids=ids,
        train=train,
        label_column=d.label,
        id_column=d.id,
        split_column=d.split,
        categories=categories,
        warnings=warnings,
    )


def _check_label(lab: pd.Series, classes: list, name: str, source: str) -> None:
    """Refuse a continuous label or one with too many classes (limits in the module docstring)."""
    k = len(classes)
    if pd.api.types.is_float_dtype(lab.dtype) and k > MAX_FLOAT_CLASSES:
        values = np.asarray(classes, dtype=float)
        fractional = values[values != np.round(values)]
        if len(fractional):
            raise DataError(
                f"{source}: label column '{clip(name)}' holds {k} distinct numbers such as "
                f"{fractional[0]:g}: a measurement, not classes; holdfast checks class labels, so bin it "
                f"into classes first (at most {MAX_FLOAT_CLASSES} distinct fractional values are accepted)"
            )
    if k > MAX_CLASSES:
        raise DataError(
            f"{source}: label column '{clip(name)}' has {k} classes; at most {MAX_CLASSES} are accepted "
            f"(each class needs its own support rows and the SVM fits one model per pair of classes); "
            f"is it the right column?"
        )


def _near_duplicate_labels(classes: list, name: str, source: str) -> list[str]:
    """One warning per group of label classes whose texts differ only in spaces or upper/lower case."""
    groups: dict[str, list[str]] = {}
    for c in classes:
        if isinstance(c, str):
            groups.setdefault(" ".join(c.split()).casefold(), []).append(c)
    return [
        f"{source}: label column '{clip(name)}' has classes that differ only in spaces or case: "
        + ", ".join(repr(clip(v, 60)) for v in group[:5])
        + "; they count as different classes (clean the labels if they mean the same)"
        for group in groups.values()
        if len(group) > 1
    ]


def _refuse_stray_text(s: pd.Series, name: str, ids: np.ndarray, source: str) -> None:
    """A text column whose cells are numbers but for a few: name the first cell that is not a number."""
    present = s.dropna()
    if len(present) == 0:
        return
    values = pd.to_numeric(present.astype(str).str.strip(), errors="coerce")
    bad = values.isna().to_numpy()
    if 0 < bad.sum() <= (1 - MOSTLY_NUMBERS) * len(present):
        first = int(np.flatnonzero(bad)[0])
        row = s.index.get_loc(present.index[first])
        raise DataError(
            f"{source}: feature column '{clip(name)}' holds numbers, but row {row} (id {clip(ids[row], 60)}) "
            f"is not a number: {clip(present.iloc[first], 60)!r} ({int(bad.sum())} such cell(s)); fix them "
            f"or leave the column out (data.features)"
        )
