"""Fuzzing the inputs a user controls: the spec parser with random TOML, and the loaders plus preparation
with random small tables (odd dtypes, missing and extreme values, unicode column names), in Parquet and CSV.

Property: every input gives a result or a clean :class:`holdfast.errors.UserError` that the CLI prints as
one line; nothing else (no KeyError, TypeError, numpy warning or traceback).
"""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from holdfast.cli import MAX_LINE, _one_line
from holdfast.data.load import read_table
from holdfast.data.prepare import prepare
from holdfast.data.spec import (
    DATA_KEYS,
    INSIGHT_KEYS,
    LEARNER_KEYS,
    PREPARE_KEYS,
    RUN_KEYS,
    parse_spec,
    spec_from_text,
)
from holdfast.errors import UserError

KEYS = {
    "data": DATA_KEYS,
    "prepare": PREPARE_KEYS,
    "learner": LEARNER_KEYS["svm"],
    "run": RUN_KEYS,
    "insight": INSIGHT_KEYS,
}
WORDS = ["grade", "lot", "rbf", "poly", "linear", "scale", "auto", "standard", "none", "onehot", "error",
         "balanced", "svm", "dask", "joblib", "tcp://127.0.0.1:1", "", "Zoë", "é\u202e"]  # fmt: skip


def _toml_value(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    return json.dumps(value, ensure_ascii=False)  # a TOML basic string (\uXXXX escapes only in the BMP)


def _toml_key(key: str) -> str:
    return key if key.replace("_", "").isalnum() and key.isascii() else json.dumps(key, ensure_ascii=False)


scalars = st.one_of(
    st.booleans(),
    st.integers(min_value=-(2**63), max_value=2**63 - 1),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from(WORDS),
    st.text(max_size=8),
)
values = st.one_of(scalars, st.lists(scalars, max_size=4))


@st.composite
def toml_documents(draw: st.DrawFn) -> str:
    lines: list[str] = []
    sections = draw(st.lists(st.sampled_from([*KEYS, "extra", "Data"]), unique=True, max_size=6))
    if draw(st.integers(0, 4)):  # mostly a valid label, so that the later sections are reached
        sections = ["data", *[s for s in sections if s != "data"]]
    for n, section in enumerate(sections):
        lines.append(f"[{_toml_key(section)}]")
        if section == "data" and n == 0 and sections[0] == "data":
            lines.append('label = "grade"')
        valid = KEYS.get(section, ("x",))
        keys = draw(st.lists(st.one_of(st.sampled_from(valid), st.text(min_size=1, max_size=6)), max_size=6))
        for key in dict.fromkeys(k for k in keys if not (section == "data" and k == "label")):
            lines.append(f"{_toml_key(key)} = {_toml_value(draw(values))}")
    if draw(st.booleans()):
        lines.insert(0, 'data = "not a table"' if draw(st.booleans()) else "[[data]]")
    return "\n".join(lines) + "\n"


def _clean_error(exc: UserError) -> None:
    """A message the CLI prints as one literal line (data text such as a column name may hold a line
    break; the CLI escapes it) of bounded length."""
    text = str(exc)
    assert text and "Traceback" not in text
    line = _one_line(text)
    assert "\n" not in line and len(line) <= MAX_LINE + 60


@settings(max_examples=300, deadline=None)
@given(toml_documents())
def test_random_toml_gives_a_spec_or_a_clean_user_error(text: str) -> None:
    try:
        spec = spec_from_text(text, source="fuzz.toml")
    except UserError as exc:
        _clean_error(exc)
        return
    assert spec.data.label and spec_from_text(spec.to_toml()).fingerprint() == spec.fingerprint()


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=200))
def test_random_text_gives_a_spec_or_a_clean_user_error(text: str) -> None:
    try:
        spec_from_text(text, source="fuzz.toml")
    except UserError as exc:
        _clean_error(exc)


# ------------------------------------------------------------------------------------- loaders
names = st.text(min_size=1, max_size=12).filter(lambda s: s.strip() != "")


@st.composite
def columns(draw: st.DrawFn, n: int) -> pd.Series:
    kind = draw(
        st.sampled_from(["float", "int", "bool", "text", "category", "date", "mixed", "Int64", "label"])
    )
    if kind == "float":
        pool = st.one_of(
            st.floats(allow_nan=True, allow_infinity=True), st.sampled_from([1e300, -1e300, 0.0])
        )
        return pd.Series(draw(st.lists(pool, min_size=n, max_size=n)), dtype="float64")
    if kind == "int":
        return pd.Series(draw(st.lists(st.integers(-(2**62), 2**62), min_size=n, max_size=n)), dtype="int64")
    if kind == "bool":
        return pd.Series(draw(st.lists(st.booleans(), min_size=n, max_size=n)), dtype=bool)
    if kind in ("text", "category"):
        pool = st.one_of(st.sampled_from(["a", "a ", "A", "-1", "=1+1", "1.5", ""]), st.text(max_size=5))
        s = pd.Series(draw(st.lists(pool, min_size=n, max_size=n)), dtype=object)
        return s.astype("category") if kind == "category" else s
    if kind == "date":
        return pd.Series(pd.date_range("2024-01-01", periods=n, freq="D"))
    if kind == "Int64":
        pool = st.one_of(st.none(), st.integers(-5, 5))
        return pd.Series(draw(st.lists(pool, min_size=n, max_size=n)), dtype="Int64")
    if kind == "label":
        return pd.Series(draw(st.lists(st.sampled_from(["apple", "pear"]), min_size=n, max_size=n)))
    pool = st.one_of(st.integers(-3, 3).map(str), st.sampled_from(["x", "1e5", "nan"]))
    return pd.Series(draw(st.lists(pool, min_size=n, max_size=n)), dtype=object)


@st.composite
def tables(draw: st.DrawFn) -> pd.DataFrame:
    n = draw(st.integers(min_value=1, max_value=12))
    cols = draw(st.lists(names, min_size=1, max_size=5, unique=True))
    return pd.DataFrame({c: draw(columns(n)).to_numpy() for c in cols})


@pytest.mark.filterwarnings("error")
@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(frame=tables(), suffix=st.sampled_from([".parquet", ".csv"]), data=st.data())
def test_random_tables_load_and_prepare_or_fail_cleanly(
    tmp_path: Path, frame: pd.DataFrame, suffix: str, data: st.DataObject
) -> None:
    path = tmp_path / f"fuzz{suffix}"
    try:
        frame.to_parquet(path, index=False) if suffix == ".parquet" else frame.to_csv(path, index=False)
    except (ValueError, TypeError, OverflowError, UnicodeEncodeError) as exc:  # pandas/pyarrow refuse it
        pytest.skip(f"not writable by pandas: {exc}")
    cols = [str(c) for c in frame.columns]
    label = data.draw(st.sampled_from([*cols, "missing"]), label="label")
    id_col = data.draw(st.sampled_from([None, *cols]), label="id")
    table = {"label": label} if id_col in (None, label) else {"label": label, "id": id_col}
    scale = data.draw(st.sampled_from(["standard", "none"]), label="scale")
    spec = parse_spec({"data": table, "prepare": {"scale": scale}}, source="fuzz spec")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        try:
            loaded = read_table(path)
            prepared = prepare(loaded, spec, source=str(path))
        except UserError as exc:
            _clean_error(exc)
            return
    assert np.isfinite(prepared.X).all()
    assert len(prepared.y) == len(loaded) and len(prepared.classes) >= 2


# ------------------------------------------------------------------------------ cases found by the fuzz
@pytest.mark.parametrize(
    "text",
    [
        '[data]\nlabel = "grade"\n[learner]\nfamily = [1]\n',  # was a TypeError (unhashable list)
        '[data]\nlabel = "grade"\nid = "\U00010000"\n',  # to_toml wrote a surrogate pair TOML refuses
        '[data]\nlabel = "g\\u007f\\"\\\\"\n',  # DEL, quote and backslash in a column name
    ],
)
def test_fuzz_found_cases(text: str) -> None:
    try:
        spec = spec_from_text(text, source="fuzz.toml")
    except UserError as exc:
        _clean_error(exc)
        assert "learner.family" in str(exc)
        return
    again = spec_from_text(spec.to_toml())
    assert again.data == spec.data
