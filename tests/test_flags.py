"""Flags on tiny constructed data sets: each must fire where the evidence is and stay off where it is not.

Every flag is also checked, row by row, against an independent computation on the same prepared matrix:
* scikit-learn's ``SVC`` (Pedregosa et al. 2011, "Scikit-learn: Machine Learning in Python", JMLR 12)
  fitted directly: training predictions (wrong side), dual coefficients at C (bounded; Cortes & Vapnik
  1995, "Support-vector networks", Machine Learning 20), refits without each row (flip counts);
* scikit-learn's ``LeaveOneOut`` with ``cross_val_predict`` (LOO miss);
* scikit-learn's ``NearestNeighbors`` (neighbour dissent: the k-NN vote of Cover & Hart 1967, "Nearest
  neighbor pattern classification", IEEE Trans. Information Theory 13(1)).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.neighbors import NearestNeighbors
from sklearn.svm import SVC

from holdfast.data.prepare import prepare
from holdfast.data.spec import spec_from_text
from holdfast.engine.scan import analyse
from holdfast.insight.flags import (
    DISSENT_SHARE,
    FLAG_REASONS,
    HEAVY_FLIP_MIN,
    compute_flags,
    heavy_flip_threshold,
)


def _scan(frame: pd.DataFrame, learner: str = "", k: int = 5, split: bool = False, scale: str = "standard"):
    text = '[data]\nlabel = "label"\n' + ('split = "held"\n' if split else "")
    text += f'[prepare]\nscale = "{scale}"\n'
    text += f'[learner]\nfamily = "svm"\n{learner}\n[insight]\nk = {k}\n'
    spec = spec_from_text(text)
    prepared = prepare(frame, spec)
    findings, _, _ = analyse(prepared, spec)
    return findings.rows, prepared


def _clusters(n: int = 10) -> pd.DataFrame:
    """Two tight, well separated clusters: 'a' around (0, 0), 'b' around (6, 0)."""
    angle = np.linspace(0, 2 * np.pi, n, endpoint=False)
    ring = np.column_stack([np.cos(angle), np.sin(angle)]) * 0.6
    X = np.vstack([ring, ring + np.array([6.0, 0.0])])
    return pd.DataFrame({"x1": X[:, 0], "x2": X[:, 1], "label": ["a"] * n + ["b"] * n})


def _with(frame: pd.DataFrame, x1: float, x2: float, label: str, **extra) -> pd.DataFrame:
    row = pd.DataFrame({"x1": [x1], "x2": [x2], "label": [label], **{k: [v] for k, v in extra.items()}})
    return pd.concat([frame, row], ignore_index=True)


def _flagged(rows: pd.DataFrame, name: str) -> set[int]:
    return set(np.flatnonzero(rows[f"flag_{name}"].to_numpy()).tolist())


@pytest.fixture(scope="module")
def slip():
    """The clusters plus one row labelled 'a' in the middle of cluster 'b' (row 20)."""
    frame = _with(_clusters(), 6.0, 0.05, "a")
    rows, prepared = _scan(frame, 'kernel = "linear"\nC = 1.0')
    return frame, rows, prepared


def test_slip_raises_loo_miss_wrong_side_bounded_and_dissent(slip):
    _, rows, _ = slip
    for name in ("loo_miss", "wrong_side", "bounded", "neighbour_dissent"):
        assert rows.loc[20, f"flag_{name}"], name
    raised = set(rows.loc[20, "flag_names"].split(","))
    assert raised >= {"loo_miss", "wrong_side", "bounded", "neighbour_dissent"}
    # rows of cluster 'a' are far from the boundary and agree with their neighbours: no flag at all
    assert (rows.loc[:9, "flag_names"] == "").all()
    assert not rows["flag_twin_conflict"].any()


def test_flags_agree_with_scikit_learn(slip):
    _, rows, prepared = slip
    X, y = prepared.X, prepared.y
    svc = SVC(kernel="linear", C=1.0, tol=1e-6).fit(X, y)
    assert _flagged(rows, "wrong_side") == set(np.flatnonzero(svc.predict(X) != y).tolist())
    at_c = svc.support_[np.isclose(np.abs(svc.dual_coef_[0]), 1.0, rtol=1e-6)]
    assert _flagged(rows, "bounded") == set(at_c.tolist())
    loo = cross_val_predict(SVC(kernel="linear", C=1.0, tol=1e-6), X, y, cv=LeaveOneOut())
    assert _flagged(rows, "loo_miss") == set(np.flatnonzero(loo != y).tolist())
    _, idx = NearestNeighbors(n_neighbors=6).fit(X).kneighbors(X)
    share = (y[idx[:, 1:]] != y[:, None]).mean(axis=1)  # the row itself comes first (distance 0)
    assert _flagged(rows, "neighbour_dissent") == set(np.flatnonzero(share > DISSENT_SHARE).tolist())


def test_neighbour_dissent_needs_most_neighbours():
    """'Most of the k neighbours' means more than half: 2 of 4 does not fire, 3 of 4 does."""
    x = np.array([0.0, 1.0, -1.5, 2.0, -2.5, 10.0, 11.0, 12.0, 13.0, 20.0, 21.0, 22.0, 23.0])
    labels = ["a", "b", "a", "b", "a", "a", "a", "a", "a", "b", "b", "b", "b"]
    frame = pd.DataFrame({"x1": x, "x2": 0.0, "label": labels})
    rows, _ = _scan(frame, k=4)
    assert rows.loc[0, "neighbour_dissent"] == pytest.approx(0.5)  # neighbours 1(b), 2(a), 3(b), 4(a)
    assert not rows.loc[0, "flag_neighbour_dissent"]
    frame.loc[4, "label"] = "b"
    rows, _ = _scan(frame, k=4)
    assert rows.loc[0, "neighbour_dissent"] == pytest.approx(0.75)
    assert rows.loc[0, "flag_neighbour_dissent"]


def test_twin_conflict_exact_and_near_duplicates():
    frame = _clusters()
    frame = _with(frame, 3.0, 3.0, "a")  # 20 \ exact duplicates, different labels
    frame = _with(frame, 3.0, 3.0, "b")  # 21 /
    frame = _with(frame, 3.0, -3.0, "a")  # 22 \ near-identical (1e-9 apart), different labels
    frame = _with(frame, 3.0, -3.0 + 1e-9, "b")  # 23 /
    frame = _with(frame, 0.0, 3.0, "a")  # 24 \ exact duplicates, same label
    frame = _with(frame, 0.0, 3.0, "a")  # 25 /
    frame = _with(frame, 6.0, 3.0, "b")  # 26: alone, near nothing
    rows, _ = _scan(frame)
    assert _flagged(rows, "twin_conflict") == {20, 21, 22, 23}
    assert rows.loc[[20, 21, 22, 23], "twin_conflicts"].tolist() == [1, 1, 1, 1]
    assert rows.loc[[24, 25, 26], "twin_conflicts"].tolist() == [0, 0, 0]


def test_twin_conflict_not_raised_for_close_but_distinct_rows():
    frame = _with(_with(_clusters(), 3.0, 3.0, "a"), 3.0, 3.05, "b")
    rows, _ = _scan(frame)
    assert not rows["flag_twin_conflict"].any()


def _flip_reference(X: np.ndarray, y: np.ndarray, C: float, gamma: float) -> np.ndarray:
    """Flip count of every row from a full scikit-learn refit without it."""
    params = {"kernel": "rbf", "C": C, "gamma": gamma, "tol": 1e-6}
    full = SVC(**params).fit(X, y).predict(X)
    out = np.zeros(len(y), dtype=np.int64)
    for r in range(len(y)):
        keep = np.delete(np.arange(len(y)), r)
        changed = SVC(**params).fit(X[keep], y[keep]).predict(X) != full
        changed[r] = False
        out[r] = int(changed.sum())
    return out


def test_heavy_flip_fires_from_the_threshold_on():
    # 24 rows of two overlapping classes (fixed seed): removing some rows flips 1, 2 or 4 others
    rng = np.random.default_rng(5)
    X = rng.normal(size=(24, 2))
    y = (X[:, 0] + 0.8 * rng.normal(size=24) > 0).astype(int)
    frame = pd.DataFrame({"x1": X[:, 0], "x2": X[:, 1], "label": np.where(y == 1, "b", "a")})
    rows, prepared = _scan(frame, 'kernel = "rbf"\nC = 10.0\ngamma = 1.0', scale="none")
    ref = _flip_reference(prepared.X, prepared.y, 10.0, 1.0)
    assert rows["flip_count"].tolist() == ref.tolist()
    assert _flagged(rows, "heavy_flip") == set(np.flatnonzero(ref >= HEAVY_FLIP_MIN).tolist())
    # the case has rows on both sides of the threshold, and rows that flip some but too few others
    assert (ref >= HEAVY_FLIP_MIN).any()
    assert ((ref > 0) & (ref < HEAVY_FLIP_MIN)).any()


def test_heavy_flip_in_a_dense_boundary_marks_only_rows_flipping_three_times_the_usual():
    """Where every support row flips several others (a dense boundary region), heavy_flip needs three times
    the median support row's flip count: here the median is 5, so 15 flips and more. A row off the support
    set (flip count 0) does not count towards the median."""
    flips = np.array([1, 2, 3, 4, 5, 5, 5, 6, 7, 9, 14, 15, 40, 0])  # the last row is off the support set
    n = len(flips)
    frame = pd.DataFrame(
        {
            "label": ["a"] * n,
            "prediction": ["a"] * n,
            "loo_miss": False,
            "bounded": True,
            "support": [True] * (n - 1) + [False],
            "flip_count": flips,
            "held_out": False,
        }
    )
    assert heavy_flip_threshold(flips[:-1]) == 15
    out = compute_flags(frame)
    assert np.flatnonzero(out["flag_heavy_flip"].to_numpy()).tolist() == [11, 12]
    # where the median support row flips 0 or 1 the threshold is the fixed one
    assert heavy_flip_threshold(np.array([0, 0, 0, 1, 1, 4])) == HEAVY_FLIP_MIN
    assert heavy_flip_threshold(np.array([1, 1, 1, 2, 6])) == HEAVY_FLIP_MIN
    assert heavy_flip_threshold(np.array([], dtype=np.int64)) == HEAVY_FLIP_MIN
    # a half-integer median rounds the threshold up: 3 x 1.5 = 4.5 -> 5
    assert heavy_flip_threshold(np.array([1, 1, 2, 2])) == 5


def test_held_out_rows_get_no_flags():
    """The same slip once as a training row and once held out: only the training row is flagged."""
    frame = _clusters()
    frame["held"] = False
    frame = _with(frame, 6.0, 0.05, "a", held=False)  # 20: a training slip
    frame = _with(frame, 6.1, -0.05, "a", held=True)  # 21: a held-out slip
    frame = _with(frame, 3.0, 3.0, "a", held=True)  # 22: held out, duplicate of 23 with another label
    frame = _with(frame, 3.0, 3.0, "b", held=False)  # 23
    rows, _ = _scan(frame, 'kernel = "linear"\nC = 1.0', split=True)
    assert rows.loc[20, "flag_loo_miss"] and rows.loc[20, "flag_neighbour_dissent"]
    assert rows.loc[21, "loo_miss"]  # held-out: predicted as the other class, yet
    held = rows["held_out"].to_numpy()
    assert not rows.loc[held, [f"flag_{n}" for n in FLAG_REASONS]].to_numpy().any()
    assert (rows.loc[held, "flag_names"] == "").all()
    assert not rows.loc[23, "flag_twin_conflict"]  # its twin is held out: not a training conflict


def test_flags_text_lists_raised_flags_in_order():
    frame = pd.DataFrame(
        {
            "label": ["a", "b", "a"],
            "prediction": ["b", "b", "a"],
            "loo_miss": [True, False, False],
            "bounded": [True, False, False],
            "flip_count": [HEAVY_FLIP_MIN, HEAVY_FLIP_MIN - 1, 0],
            "held_out": [False, False, True],
            "neighbour_dissent": [0.9, np.nan, 1.0],
            "twin_conflicts": [0, 2, 1],
        }
    )
    out = compute_flags(frame)
    assert out["flag_names"].tolist() == [
        "loo_miss,wrong_side,bounded,neighbour_dissent,heavy_flip",
        "twin_conflict",
        "",
    ]
    # one boolean column per flag; ``flag_names`` is the text list, so no flag may be called "names"
    assert "names" not in FLAG_REASONS
    bools = {c.removeprefix("flag_") for c in out.columns if c.startswith("flag_") and c != "flag_names"}
    assert set(FLAG_REASONS) == bools
