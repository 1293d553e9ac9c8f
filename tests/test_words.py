"""Words and numbers the faces show: labels rather than class codes, percentages that do not round a
nonzero count to 0%, hints judged against the number of classes, and bounds shown once when equal.

Outside references named beside each check: scikit-learn's ``NearestNeighbors`` and
``compute_class_weight`` (Pedregosa et al. 2011, "Scikit-learn: Machine Learning in Python", JMLR 12) on
data sets bundled with scikit-learn: iris (Fisher 1936, "The use of multiple measurements in taxonomic
problems", Annals of Eugenics 7), digits (Alpaydin & Kaynak 1998, UCI "Optical Recognition of
Handwritten Digits") and breast cancer (Wolberg, Street & Mangasarian 1995, UCI).
"""

from __future__ import annotations

from collections import Counter

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_digits, load_iris
from sklearn.neighbors import NearestNeighbors
from sklearn.preprocessing import StandardScaler
from sklearn.utils.class_weight import compute_class_weight

from holdfast.data.spec import spec_from_text
from holdfast.engine.scan import run_scan
from holdfast.insight.explain import explain, percent
from holdfast.output.report import CAUTIONS
from holdfast.output.terminal import summary_text

NAMES = np.array(["setosa", "versicolor", "virginica"])


@pytest.fixture(scope="module")
def iris(tmp_path_factory):
    """Iris with text labels, balanced class weights, k = 5; every 10th row held out."""
    X, y = load_iris(return_X_y=True)
    frame = pd.DataFrame(X, columns=["sl", "sw", "pl", "pw"])
    frame["species"] = NAMES[y]
    frame["held"] = np.arange(len(y)) % 10 == 9
    # drop rows so the classes differ in size (balanced weights then differ by class)
    frame = frame.drop(index=np.flatnonzero(y == 2)[:20]).reset_index(drop=True)
    tmp = tmp_path_factory.mktemp("words")
    path = tmp / "iris.parquet"
    frame.to_parquet(path, index=False)
    spec = spec_from_text(
        '[data]\nlabel = "species"\nsplit = "held"\n[learner]\nkernel = "rbf"\nC = 1.0\n'
        'class_weight = "balanced"\n[insight]\nk = 5\n'
    )
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("HOLDFAST_CACHE_DIR", str(tmp / "cache"))
        return frame, run_scan(path, spec)


def test_neighbour_majority_is_the_most_common_label_of_the_k_nearest(iris):
    frame, scan = iris
    rows = scan.findings.rows
    train = ~frame["held"].to_numpy()
    Xs = StandardScaler().fit_transform(frame.loc[train, ["sl", "sw", "pl", "pw"]].to_numpy())
    labels = frame.loc[train, "species"].to_numpy()
    # reference: scikit-learn NearestNeighbors, the row itself left out, k = 5
    _, idx = NearestNeighbors(n_neighbors=6).fit(Xs).kneighbors(Xs)
    got = rows.loc[train, "neighbour_majority"].to_numpy(dtype=object)
    assert set(got) <= set(NAMES)  # labels, not class codes
    agree = 0
    for i, nb in enumerate(idx):
        others = [j for j in nb if j != i][:5]
        counts = Counter(labels[others]).most_common()
        top = {lab for lab, c in counts if c == counts[0][1]}  # ties: any of the most common
        agree += got[i] in top
    assert agree >= 0.98 * len(idx)  # equidistant neighbours may be ordered differently
    assert rows.loc[~train, "neighbour_majority"].isna().all()


def test_class_weights_are_keyed_by_label(iris):
    frame, scan = iris
    weights = scan.findings.summary["learner"]["class_weight_resolved"]
    train = ~frame["held"].to_numpy()
    y = frame.loc[train, "species"].to_numpy()
    ref = compute_class_weight("balanced", classes=NAMES, y=y)  # scikit-learn's "balanced" formula
    assert set(weights) == set(NAMES)
    for name, w in zip(NAMES, ref, strict=True):
        assert weights[name] == pytest.approx(w)


def test_three_classes_say_why_xi_alpha_and_span_are_absent(iris):
    _, scan = iris
    s = scan.findings.summary
    assert "xi_alpha" not in s["bounds"] and "span" not in s["bounds"]
    hint = next(h for h in s["explanation"]["hints"] if h["kind"] == "multiclass_estimates")
    assert "two-class" in hint["text"] and "3 classes" in hint["text"]


def _rows(labels: np.ndarray, support: np.ndarray, wrong: np.ndarray, dissent: np.ndarray) -> pd.DataFrame:
    """A per-row frame with what :func:`explain` reads (bounded = support, as for a tight C)."""
    other = np.roll(np.unique(labels), 1)
    lookup = dict(zip(np.unique(labels), other, strict=True))
    pred = np.array([lookup[v] if w else v for v, w in zip(labels, wrong, strict=True)], dtype=object)
    return pd.DataFrame(
        {
            "label": labels.astype(object),
            "prediction": pred,
            "support": support,
            "bounded": support,
            "held_out": np.zeros(len(labels), dtype=bool),
            "twin_conflicts": np.zeros(len(labels), dtype=np.int64),
            "flag_loo_miss": wrong,
            "flag_wrong_side": wrong,
            "flag_neighbour_dissent": dissent,
            "flag_twin_conflict": np.zeros(len(labels), dtype=bool),
        }
    )


def test_imbalance_is_judged_against_an_even_split():
    X, y = load_digits(return_X_y=True)  # ten classes of about 10% each: balanced
    n = len(y)
    none = np.zeros(n, dtype=bool)
    params = {"family": "svm", "kernel": "rbf", "C": 1.0, "gamma": 0.001}
    hints = explain(_rows(y.astype(str), none, none, none), X, params)["hints"]
    assert "class_imbalance" not in [h["kind"] for h in hints]
    # two of the ten digits cut to 3% of the rows: imbalanced against an even 10%
    keep = np.ones(n, dtype=bool)
    for digit in (3, 8):
        keep[np.flatnonzero(y == digit)[45:]] = False
    yk = y[keep].astype(str)
    kept = int(keep.sum())
    hints = explain(_rows(yk, none[keep], none[keep], none[keep]), X[keep], params)["hints"]
    hint = next(h for h in hints if h["kind"] == "class_imbalance")
    assert "10 classes 10%" in hint["text"]
    assert f"45 of {kept} rows" in hint["text"]


def test_dissent_hint_grammar_and_what_else_dissent_can_mean():
    X, y = load_breast_cancer(return_X_y=True)
    labels = np.where(y == 1, "benign", "malignant")
    n = len(y)
    support = np.zeros(n, dtype=bool)
    support[:60] = True
    wrong = np.zeros(n, dtype=bool)
    wrong[:5] = True
    params = {"family": "svm", "kernel": "rbf", "C": 10.0, "gamma": 0.03}
    for with_dissent, phrase in (
        (1, "1 of them also has most of its"),
        (3, "3 of them also have most of their"),
    ):
        dissent = np.zeros(n, dtype=bool)
        dissent[:with_dissent] = True
        hints = explain(_rows(labels, support, wrong, dissent), X, params)["hints"]
        text = next(h["text"] for h in hints if h["kind"] == "bounded_misclassified")
        assert phrase in text
        assert "overlap" in text and "larger class" in text
        assert "points to the label rather than" not in text


def test_percentages_do_not_round_a_count_to_zero():
    assert percent(1, 231) == "0.4%"
    assert percent(0, 231) == "0%"
    assert percent(1, 5000) == "<0.1%"
    assert percent(230, 231) == "99.6%"
    assert percent(231, 231) == "100%"
    assert percent(50, 200) == "25%"


def test_support_fraction_and_loo_bound_are_one_line_when_equal(iris):
    _, scan = iris
    s = scan.findings.summary
    b = s["bounds"]
    # for an SVM no row outside the support set is a LOO miss (Vapnik 1995): the two values coincide
    assert b["loo_bound"]["misses_outside"] == 0
    assert b["loo_bound"]["value"] == b["support_fraction"]["value"]
    text = summary_text(s)
    assert text.count("support fraction d/m = LOO bound") == 1
    assert not any(line.startswith("LOO bound") for line in text.splitlines())
    assert "no LOO miss outside the support set" in b["support_fraction"]["note"]


def test_report_cautions_cite_sources_not_memory():
    text = " ".join(CAUTIONS)
    assert "memory" not in text
    assert "Joachims 2000" in text and "Vapnik & Chapelle 2000" in text
