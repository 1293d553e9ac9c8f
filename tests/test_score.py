"""The suspicion score: its LOO ingredient checked against full refits, its ranking rules, and its recall
of label flips planted in scikit-learn's bundled data sets, beside a notebook baseline.

Sources:
* scikit-learn (Pedregosa et al. 2011, "Scikit-learn: Machine Learning in Python", JMLR 12): ``SVC``
  refitted without each row is the reference for the LOO margin; ``LogisticRegression`` with
  ``cross_val_predict`` (5 folds, defaults, standardized features) is the baseline ranking.
* Data bundled with scikit-learn: breast cancer (Wolberg, Street & Mangasarian 1995, UCI), wine (Forina
  et al., UCI; class 0 against the rest), digits (Alpaydin & Kaynak 1998, UCI; 3 against 8), iris
  (Fisher 1936).

Planted flips (protocol fixed before measuring; seeds 0, 1, 2; the score's weights were chosen on other
seeds, 10-21):
* 5% of the rows (rounded) get the other label, either (a) drawn at random, or (b) drawn at random among
  the 20% of rows with the smallest |decision value| of the SVM fitted on the clean data with the same
  spec (RBF, C=1, gamma="scale"): near-boundary slips.
* Natural suspects: rows whose clean label the clean data already rejects (exact LOO miss of the clean
  SVM, or a miss of the out-of-fold logistic regression). Their true label is uncertain, so they are
  never planted on (flipping one may correct it). They stay in the ranking for ``recall@k``; for
  ``recall@k trusted`` they are set aside (for the score and the baseline alike) so that a natural error
  found is not counted against the ranking. Breast cancer has 16 of them.
* recall@k = share of the planted rows among the k top-ranked training rows, k = number planted.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_digits, load_iris, load_wine
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import cross_val_predict
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from holdfast.data.prepare import prepare
from holdfast.data.spec import spec_from_text
from holdfast.engine.scan import analyse
from holdfast.insight.score import (
    LINEAR_CLIP,
    MARGIN_CLIP,
    W_DISSENT,
    W_LINEAR,
    rank_rows,
    suspicion_score,
)

SEEDS = (0, 1, 2)
FLIP_SHARE = 0.05
BOUNDARY_POOL = 0.20
#: goals of the issue: recall@k on breast cancer
GOAL = 0.85


def _frame(X: np.ndarray, y: np.ndarray) -> pd.DataFrame:
    frame = pd.DataFrame(X, columns=[f"f{i}" for i in range(X.shape[1])])
    frame["label"] = y
    return frame


def _scan(X: np.ndarray, y: np.ndarray, learner: str = "") -> tuple[pd.DataFrame, object]:
    spec = spec_from_text(f'[data]\nlabel = "label"\n[learner]\nfamily = "svm"\n{learner}\n')
    prepared = prepare(_frame(X, y), spec)
    findings, _, _ = analyse(prepared, spec)
    return findings.rows, prepared


# -- the LOO margin the score rests on ----------------------------------------------------------------


def test_loo_margin_equals_a_full_refit_without_the_row():
    X, y = load_breast_cancer(return_X_y=True)
    idx = np.random.default_rng(11).choice(len(y), size=160, replace=False)
    rows, prepared = _scan(X[idx], y[idx])
    Xp, yp = prepared.X, prepared.y
    gamma = 1.0 / (Xp.shape[1] * Xp.var())  # gamma="scale", frozen on the full training matrix
    lm = rows["loo_margin"].to_numpy()
    sign = np.where(yp == 1, 1.0, -1.0)
    support = rows["support"].to_numpy()
    for r in np.flatnonzero(support):
        keep = np.delete(np.arange(len(yp)), r)
        ref = SVC(C=1.0, gamma=gamma, tol=1e-6).fit(Xp[keep], yp[keep]).decision_function(Xp[r : r + 1])[0]
        assert lm[r] == pytest.approx(sign[r] * ref, abs=1e-3)
    # outside the support set the model does not change: the LOO margin is the training margin
    assert np.allclose(lm[~support], rows["margin"].to_numpy()[~support])
    # its sign is the LOO prediction
    assert np.array_equal(lm < 0, rows["loo_miss"].to_numpy())


def test_loo_margin_three_classes_is_own_minus_best_other():
    X, y = load_iris(return_X_y=True)
    rows, prepared = _scan(X, y)
    Xp, yp = prepared.X, prepared.y
    gamma = 1.0 / (Xp.shape[1] * Xp.var())
    lm = rows["loo_margin"].to_numpy()
    for r in np.flatnonzero(rows["support"].to_numpy())[:25]:
        keep = np.delete(np.arange(len(yp)), r)
        dec = SVC(C=1.0, gamma=gamma, tol=1e-6).fit(Xp[keep], yp[keep]).decision_function(Xp[r : r + 1])[0]
        assert lm[r] == pytest.approx(dec[yp[r]] - np.delete(dec, yp[r]).max(), abs=1e-3)


def test_loo_margin_survives_the_refit_cache(tmp_path):
    """A scan resumed from the refit store gives the same LOO margins as one computed afresh."""
    from holdfast.engine.cache import RefitStore
    from holdfast.engine.loo import exact_loo, support_key
    from holdfast.learners.svm import SVMLearner

    X, y = load_iris(return_X_y=True)
    X, y = StandardScaler().fit_transform(X[50:]), y[50:] - 1  # versicolor against virginica
    learner = SVMLearner()
    model = learner.fit(X, y)
    store = RefitStore(tmp_path / "refits.sqlite", support_key(model))
    fresh = exact_loo(model, learner.refit_problem(), store=store)
    store.close()
    store = RefitStore(tmp_path / "refits.sqlite", support_key(model))
    resumed = exact_loo(model, learner.refit_problem(), store=store)
    store.close()
    assert resumed.resumed == int(model.support.sum()) > 0
    assert np.array_equal(resumed.loo_margin, fresh.loo_margin)
    assert np.array_equal(fresh.loo_margin < 0, fresh.loo_code != y)


# -- ranking rules --------------------------------------------------------------------------------------


def _rows(**cols) -> pd.DataFrame:
    n = len(next(iter(cols.values())))
    base = {"loo_miss": np.zeros(n, bool), "held_out": np.zeros(n, bool)}
    return pd.DataFrame({**base, **cols})


def test_score_orders_by_loo_margin_then_dissent():
    rows = _rows(
        loo_margin=[1.5, -0.2, 0.1, -0.2, -0.9],
        neighbour_dissent_avg=[0.0, 0.1, 0.9, 0.8, 0.0],
        loo_miss=np.array([False, True, False, True, True]),
    )
    score = suspicion_score(rows)
    # a more negative LOO margin ranks higher at equal dissent; more dissent at equal LOO margin
    assert score[4] > score[1] > score[0]
    assert score[3] > score[1]
    # dissent can lift a row its LOO model barely keeps above one barely missed whose neighbours agree
    assert score[2] > score[1]


def test_score_caps_extreme_margins_and_skips_held_out_rows():
    rows = _rows(
        loo_margin=[-5.0, -50.0, 40.0, 6.0, -1.0],
        neighbour_dissent_avg=[0.5, 0.5, 0.0, 0.0, np.nan],
        held_out=np.array([False, False, False, False, True]),
    )
    score = suspicion_score(rows)
    assert score[0] == score[1]  # beyond MARGIN_CLIP the size no longer matters
    assert score[2] == score[3]
    assert score[0] - score[2] == pytest.approx(2 * MARGIN_CLIP + W_DISSENT * 0.5)
    assert np.isnan(score[4])
    assert rank_rows(score)[4] == 5


def test_linear_log_odds_enter_with_their_weight_and_clip():
    rows = _rows(
        loo_margin=[-0.5, -0.5, -0.5, -0.5, -0.5],
        neighbour_dissent_avg=[0.5] * 5,
        linear_logit=[2.0, -2.0, 40.0, -40.0, np.nan],
    )
    score = suspicion_score(rows)
    # the linear model rejecting the label raises the score, agreeing lowers it; missing counts as 0
    assert score[1] > score[4] > score[0]
    assert score[1] - score[0] == pytest.approx(W_LINEAR * 4.0)
    assert score[3] - score[2] == pytest.approx(2 * W_LINEAR * LINEAR_CLIP)


def test_missing_loo_margin_falls_back_to_the_loo_prediction():
    rows = _rows(
        loo_margin=[np.nan, np.nan, 0.5],
        neighbour_dissent_avg=[0.0, 0.0, 0.0],
        loo_miss=np.array([True, False, False]),
    )
    score = suspicion_score(rows)
    assert score[0] > score[2] > score[1]


def test_rank_breaks_ties_by_row_position():
    score = np.array([0.5, 2.0, 0.5, np.nan, 2.0, 0.5])
    assert rank_rows(score).tolist() == [3, 1, 4, 6, 2, 5]


# -- recall of planted flips ----------------------------------------------------------------------------


def _dataset(name: str) -> tuple[np.ndarray, np.ndarray]:
    if name == "breast_cancer":
        return load_breast_cancer(return_X_y=True)
    if name == "wine_0_vs_rest":
        X, y = load_wine(return_X_y=True)
        return X, (y == 0).astype(int)
    X, y = load_digits(return_X_y=True)
    keep = (y == 3) | (y == 8)
    return X[keep], (y[keep] == 8).astype(int)


def _oof_proba_of_label(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The notebook baseline: out-of-fold probability of the given label, 5-fold logistic regression."""
    model = make_pipeline(StandardScaler(), LogisticRegression())
    proba = cross_val_predict(model, X, y, cv=5, method="predict_proba")
    return proba[np.arange(len(y)), y]


def _recall(order: np.ndarray, planted: np.ndarray, skip: np.ndarray) -> float:
    """Share of ``planted`` among the first k rows of ``order`` not in ``skip`` (k = len(planted))."""
    kept = order[~np.isin(order, skip)]
    return float(np.isin(kept[: len(planted)], planted).mean())


@dataclass
class Case:
    dataset: str
    kind: str
    seed: int
    planted: int
    score_all: float
    score_trusted: float
    base_all: float
    base_trusted: float


def _plant(X: np.ndarray, y: np.ndarray) -> list[Case]:
    name_rows, _ = _scan(X, y)
    m = len(y)
    clean_lr = _oof_proba_of_label(X, y) < 0.5
    natural = np.flatnonzero(name_rows["loo_miss"].to_numpy() | clean_lr)
    trusted = np.setdiff1d(np.arange(m), natural)
    # rounded to 1e-4 so the pool's order (and with it the planted rows) does not hang on solver noise: with
    # raw margins a change of 1e-7 in one margin reordered the pool and planted other rows
    closeness = np.round(np.abs(name_rows["margin"].to_numpy())[trusted], 4)
    near = trusted[np.argsort(closeness, kind="stable")[: round(BOUNDARY_POOL * m)]]
    n = round(FLIP_SHARE * m)
    out = []
    for kind, pool in (("random", trusted), ("near-boundary", near)):
        for seed in SEEDS:
            planted = np.sort(np.random.default_rng(seed).choice(pool, size=n, replace=False))
            noisy = y.copy()
            noisy[planted] = 1 - noisy[planted]
            rows, _ = _scan(X, noisy)
            ours = np.argsort(rows["rank"].to_numpy(), kind="stable")
            p = _oof_proba_of_label(X, noisy)
            base = np.lexsort((np.arange(m), p))  # lowest probability of the given label first
            out.append(
                Case(
                    dataset="",
                    kind=kind,
                    seed=seed,
                    planted=n,
                    score_all=_recall(ours, planted, np.empty(0, int)),
                    score_trusted=_recall(ours, planted, natural),
                    base_all=_recall(base, planted, np.empty(0, int)),
                    base_trusted=_recall(base, planted, natural),
                )
            )
    return out


@pytest.fixture(scope="module")
def planted_cases() -> pd.DataFrame:
    cases = []
    for name in ("breast_cancer", "wine_0_vs_rest", "digits_3_vs_8"):
        X, y = _dataset(name)
        for case in _plant(X, y):
            case.dataset = name
            cases.append(case)
    table = pd.DataFrame([c.__dict__ for c in cases])
    summary = table.groupby(["dataset", "kind"])[["score_all", "base_all", "score_trusted", "base_trusted"]]
    print("\nrecall@k of planted flips, mean over seeds", SEEDS, "(min in brackets)")
    mean, low = summary.mean(), summary.min()
    print((mean.round(3).astype(str) + " (" + low.round(2).astype(str) + ")").to_string())
    return table


def test_score_beats_the_baseline_on_every_case(planted_cases, record_property):
    t = planted_cases
    record_property("planted_cases", t.round(4).to_dict(orient="records"))
    mean = t.groupby(["dataset", "kind"]).mean(numeric_only=True)
    # ahead of the baseline in every data set and kind of flip (mean over the seeds), unless both found
    # every planted row, once the natural suspects are set aside ...
    ahead = (mean["score_trusted"] > mean["base_trusted"]) | (mean["base_trusted"] == 1.0)
    assert ahead.all(), mean
    # ... and ahead with them counted as false alarms too
    assert ((mean["score_all"] > mean["base_all"]) | (mean["base_all"] == 1.0)).all(), mean


def test_breast_cancer_recall_goals(planted_cases):
    bc = planted_cases[planted_cases["dataset"] == "breast_cancer"].groupby("kind").mean(numeric_only=True)
    # 5% random flips: the goal holds on the plain recall@k
    assert bc.loc["random", "score_all"] >= GOAL, bc
    assert bc.loc["random", "score_trusted"] >= GOAL, bc
    # near-boundary flips: the goal holds once the data set's own 16 natural suspects are set aside
    assert bc.loc["near-boundary", "score_trusted"] >= GOAL, bc
    # NOT MET on the plain count (0.786 on seeds 0-2; 0.821 was measured while the planting pool's order
    # hung on the last digits of the margins, see _plant): 4-6 natural suspects per seed carry stronger
    # evidence than the 24th-best planted row under every ranking tried (see holdfast.insight.score);
    # still far ahead of the baseline
    assert bc.loc["near-boundary", "score_all"] >= 0.77, bc
