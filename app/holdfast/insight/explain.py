"""Why the bound is what it is: what the d support rows are made of, and hints drawn from the data.

The support fraction d/m bounds the expected LOO error (Vapnik 1995, *The Nature of Statistical Learning
Theory*). :func:`explain` splits the d support rows of a soft-margin SVM into three parts that add up to d
exactly:

* **bounded and misclassified**: dual weight at C and the training prediction differs from the label
  (slack > 1): the usual signature of a mislabelled row or of overlapping classes;
* **bounded but correct**: dual weight at C, classified correctly but inside the margin (0 < slack <= 1);
* **free**: 0 < alpha < C, on the margin (slack 0).

(The three cases follow from the Karush-Kuhn-Tucker conditions of the soft-margin SVM: Cortes & Vapnik
1995, "Support-vector networks", Machine Learning 20:273-297.)

It then says how much of d the flagged rows account for, counts twin conflicts and class imbalance, and
adds plain-language hints whose every number is computed from the data and the fitted model. The hint
thresholds are rules of thumb of our own (named constants below), not published values.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

if TYPE_CHECKING:
    from holdfast.insight.view import ScanView

#: d/m above which the support set counts as "large" for the kernel-width hints (rule of thumb).
LARGE_FRACTION = 0.5
#: Kernel value between a typical row and its nearest neighbour below which rows are "islands":
#: exp(-gamma * median nearest-neighbour squared distance) < this (rule of thumb).
ISLAND_KERNEL = 0.05
#: gamma * median pairwise squared distance below which the RBF kernel is "too wide": every kernel value
#: between two typical rows exceeds exp(-0.01) = 0.99 (rule of thumb).
WIDE_EXPONENT = 0.01
#: Share of d that is bounded, and share of m that is bounded-but-correct, for the "C too small" hint.
C_SMALL_BOUNDED_SHARE = 0.9
C_SMALL_INSIDE_SHARE = 0.25
#: Class imbalance is reported when the smallest class holds less than this share of an even split, 1/k
#: for k classes: below 20% of the rows for two classes, 4% for ten (rule of thumb, our own; two classes
#: match the common-practice 1 in 5).
IMBALANCE_OF_EVEN = 0.4
#: Flags that are evidence about the label (not about the row's place in the model).
LABEL_FLAGS = ("loo_miss", "wrong_side", "neighbour_dissent", "twin_conflict")
#: Rows sampled for the distance statistics (deterministic sample, seed 0).
DISTANCE_SAMPLE = 1000


def percent(part: float, whole: float) -> str:
    """``part`` as a share of ``whole`` in percent, never rounded to 0% or 100% when it is neither:
    1 of 231 is "0.4%", 1 of 5,000 "<0.1%", 230 of 231 "99.6%"."""
    if not whole:
        return "0%"
    p = 100.0 * part / whole
    if part == 0 or part == whole or 1.0 <= p <= 99.0:
        return f"{p:.0f}%"
    if p < 0.05:
        return "<0.1%"
    if p > 99.95:
        return ">99.9%"
    return f"{p:.1f}%"


_pct = percent


def _flag(rows: pd.DataFrame, name: str) -> np.ndarray:
    col = f"flag_{name}"
    return rows[col].to_numpy(dtype=bool) if col in rows else np.zeros(len(rows), dtype=bool)


def distance_stats(X: np.ndarray, *, sample: int = DISTANCE_SAMPLE, seed: int = 0) -> dict[str, float]:
    """Median pairwise and median nearest-neighbour squared Euclidean distance of the prepared rows.

    Computed on a deterministic sample of at most ``sample`` rows (nearest neighbours searched among all
    rows). ``1 / median pairwise squared distance`` is the "median heuristic" for the RBF width (common
    practice; e.g. Gretton et al. 2012, "A kernel two-sample test", JMLR 13).
    """
    from sklearn.neighbors import NearestNeighbors

    X = np.asarray(X, dtype=float)
    n = X.shape[0]
    if n < 2:
        return {"median_sq_distance": float("nan"), "median_nn_sq_distance": float("nan")}
    idx = np.arange(n)
    if n > sample:
        idx = np.sort(np.random.default_rng(seed).choice(n, size=sample, replace=False))
    S = X[idx]
    sq = np.sum(S * S, axis=1)
    D2 = np.maximum(sq[:, None] + sq[None, :] - 2.0 * S @ S.T, 0.0)
    median_pair = float(np.median(D2[np.triu_indices(len(idx), 1)]))
    nn = NearestNeighbors(n_neighbors=2).fit(X)
    dist, nb = nn.kneighbors(S)
    # the first neighbour is normally the row itself; take the nearest *other* row
    other = np.where(nb[:, 0] == idx, dist[:, 1], dist[:, 0])
    return {"median_sq_distance": median_pair, "median_nn_sq_distance": float(np.median(other**2))}


def composition(rows: pd.DataFrame) -> dict[str, int]:
    """Counts of the support rows by kind (training rows only); the three kinds add up to d exactly."""
    train = ~rows["held_out"].to_numpy(dtype=bool)
    sup = rows["support"].to_numpy(dtype=bool) & train
    bounded = rows["bounded"].to_numpy(dtype=bool) & sup
    wrong = (rows["prediction"].astype(object) != rows["label"].astype(object)).to_numpy() & train
    return {
        "d": int(sup.sum()),
        "bounded_misclassified": int((bounded & wrong).sum()),
        "bounded_correct": int((bounded & ~wrong).sum()),
        "free": int((sup & ~bounded).sum()),
        "free_misclassified": int((sup & ~bounded & wrong).sum()),
        "misclassified_outside_support": int((~sup & wrong & train).sum()),
    }


def explain(
    rows: pd.DataFrame,
    X_train: np.ndarray,
    params: Mapping[str, Any],
    *,
    distances: dict[str, float] | None = None,
) -> dict[str, Any]:
    """The ``explanation`` object of the summary.

    Parameters
    ----------
    rows : DataFrame
        The per-row frame (``holdfast.engine.findings``): support, bounded, prediction, label, held_out,
        flag_*
        columns, twin_conflicts.
    X_train : array of shape (m, p)
        The prepared matrix of the training rows (for the distance statistics of the hints).
    params : mapping
        The learner's resolved parameters (family, kernel, C, gamma as a number).
    distances : dict, optional
        :func:`distance_stats` of ``X_train`` when already computed.

    Returns
    -------
    dict
        ``composition`` (bounded_misclassified + bounded_correct + free == d), ``flagged`` (how much of d
        the label-evidence flags cover), ``twins``, ``classes`` (imbalance), ``distances`` and ``hints``
        (a list of {kind, text, evidence}).
    """
    train = ~rows["held_out"].to_numpy(dtype=bool)
    tr = rows[train]
    m = int(train.sum())
    comp = composition(rows)
    d = comp["d"]
    sup = tr["support"].to_numpy(dtype=bool)

    per_flag = {name: int((_flag(tr, name) & sup).sum()) for name in LABEL_FLAGS}
    any_label_flag = np.zeros(m, dtype=bool)
    for name in LABEL_FLAGS:
        any_label_flag |= _flag(tr, name)
    flagged_support = int((any_label_flag & sup).sum())
    flagged = {
        "flags": list(LABEL_FLAGS),
        "support_rows_flagged": flagged_support,
        "share_of_d": flagged_support / d if d else 0.0,
        "by_flag": per_flag,
        "rows_flagged": int(any_label_flag.sum()),
    }

    twins_col = tr["twin_conflicts"].to_numpy() if "twin_conflicts" in tr else np.zeros(m)
    twin_rows = twins_col > 0
    twins = {"rows": int(twin_rows.sum()), "support_rows": int((twin_rows & sup).sum())}

    labels = tr["label"].astype(object).map(str)
    counts = labels.value_counts()
    sup_counts = labels[sup].value_counts()
    classes = {
        "counts": {str(c): int(n) for c, n in counts.sort_index().items()},
        "support_counts": {str(c): int(sup_counts.get(c, 0)) for c in counts.sort_index().index},
        "smallest_share": float(counts.min() / m) if m else 0.0,
        "even_share": 1.0 / len(counts) if len(counts) else 1.0,
        "ratio_largest_to_smallest": float(counts.max() / counts.min()) if len(counts) else 1.0,
    }

    dist = distances
    if dist is None:
        dist = distance_stats(X_train) if m >= 2 else {}
    wrong = (tr["prediction"].astype(object) != tr["label"].astype(object)).to_numpy()
    bounded_wrong = tr["bounded"].to_numpy(dtype=bool) & wrong
    context = {
        "m": m,
        "d": d,
        "comp": comp,
        "params": dict(params),
        "dist": dist,
        "training_errors": int(wrong.sum()),
        "pred_counts": tr["prediction"].astype(object).map(str).value_counts(),
        "counts": counts,
        "dissent_bm": int((_flag(tr, "neighbour_dissent") & bounded_wrong).sum()),
        "twins": twins,
        "classes": classes,
        "sup_counts": sup_counts,
    }
    return {
        "m": m,
        "d": d,
        "support_fraction": d / m if m else 0.0,
        "composition": comp,
        "flagged": flagged,
        "twins": twins,
        "classes": classes,
        "distances": dist,
        "hints": _hints(context),
        "source": "Cortes & Vapnik 1995, Support-vector networks, Machine Learning 20 (KKT cases of the "
        "soft-margin SVM); hint thresholds are rules of thumb (holdfast.insight.explain)",
    }


def explain_scan(scan: ScanView) -> dict[str, Any]:
    """:func:`explain` of a finished scan (also one read from the cache)."""
    p = scan.prepared
    return explain(scan.findings.rows, p.X[p.train_index], scan.findings.summary.get("learner", {}))


# ---------------------------------------------------------------------------------------------- hints
def _hints(c: dict[str, Any]) -> list[dict[str, Any]]:
    out: list[dict[str, Any]] = []
    for rule in (_hint_kernel, _hint_c_small, _hint_mislabel, _hint_twins, _hint_imbalance, _hint_multiclass):
        hint = rule(c)
        if hint is not None:
            out.append(hint)
    return out


def _gamma(params: Mapping[str, Any]) -> float | None:
    g = params.get("gamma")
    return float(g) if isinstance(g, int | float) and not isinstance(g, bool) and g > 0 else None


def _hint_kernel(c: dict[str, Any]) -> dict[str, Any] | None:
    """RBF width far off: too narrow (rows are islands) or too wide (kernel nearly constant)."""
    params, dist, m, d, comp = c["params"], c["dist"], c["m"], c["d"], c["comp"]
    gamma = _gamma(params)
    if params.get("kernel") != "rbf" or gamma is None or not dist or not m or d / m <= LARGE_FRACTION:
        return None
    d2 = dist["median_sq_distance"]
    nn2 = dist["median_nn_sq_distance"]
    if not (np.isfinite(d2) and d2 > 0 and np.isfinite(nn2)):
        return None
    suggest = 1.0 / d2
    nn_kernel = math.exp(-gamma * nn2)
    evidence = {
        "gamma": gamma,
        "median_sq_distance": d2,
        "median_nn_sq_distance": nn2,
        "nn_kernel_value": nn_kernel,
        "gamma_times_median_sq_distance": gamma * d2,
        "suggested_gamma": suggest,
        "free_share_of_d": comp["free"] / d if d else 0.0,
        "training_errors": c["training_errors"],
    }
    if nn_kernel < ISLAND_KERNEL:
        text = (
            f"gamma is too large (the kernel is too narrow): {d} of {m} rows are support rows. At "
            f"gamma={gamma:.4g} the kernel value between a typical row and its nearest neighbour is "
            f"exp(-{gamma:.4g} x {nn2:.3g}) = {nn_kernel:.2g}, so each row is its own island; "
            f"{comp['free']} support rows are free and the training error is {c['training_errors']} of {m}. "
            f"The median squared distance between rows is {d2:.3g}: try gamma near 1/{d2:.3g} = "
            f"{suggest:.3g} (the median heuristic, common practice) and search around it."
        )
        return {"kind": "gamma_too_large", "text": text, "evidence": evidence}
    if gamma * d2 < WIDE_EXPONENT:
        text = (
            f"gamma is too small (the kernel is too wide): {d} of {m} rows are support rows, "
            f"{comp['bounded_misclassified'] + comp['bounded_correct']} of them at the limit C. At "
            f"gamma={gamma:.4g} the kernel value between two typical rows is exp(-{gamma * d2:.2g}) "
            f"= {math.exp(-gamma * d2):.4f}, nearly constant, so the model can hardly bend. The median "
            f"squared distance between rows is {d2:.3g}: try gamma near 1/{d2:.3g} = {suggest:.3g} "
            f"(the median heuristic, common practice)."
        )
        return {"kind": "gamma_too_small", "text": text, "evidence": evidence}
    return None


def _c_small_signature(c: dict[str, Any]) -> bool:
    """Nearly all support rows at C and a large share of all rows correct but inside the margin."""
    m, d, comp = c["m"], c["d"], c["comp"]
    bounded = comp["bounded_misclassified"] + comp["bounded_correct"]
    if not d or not m:
        return False
    return bounded / d >= C_SMALL_BOUNDED_SHARE and comp["bounded_correct"] / m >= C_SMALL_INSIDE_SHARE


def _hint_c_small(c: dict[str, Any]) -> dict[str, Any] | None:
    """Nearly all support rows at C and many correct rows inside the margin: C too small."""
    m, d, comp, params = c["m"], c["d"], c["comp"], c["params"]
    bounded = comp["bounded_misclassified"] + comp["bounded_correct"]
    if not _c_small_signature(c):
        return None
    gamma = _gamma(params)
    dist = c["dist"]
    wide = gamma is not None and dist and gamma * dist["median_sq_distance"] < WIDE_EXPONENT
    if params.get("kernel") == "rbf" and wide:
        return None  # the kernel-width hint explains it
    C = params.get("C")
    pred_counts: pd.Series = c["pred_counts"]
    top_pred, top_n = (str(pred_counts.index[0]), int(pred_counts.iloc[0])) if len(pred_counts) else ("", 0)
    label_share = int(c["counts"].get(top_pred, 0))
    majority = ""
    if top_n >= 0.95 * m and label_share < 0.9 * m:
        majority = (
            f" The model predicts '{top_pred}' for {top_n} of {m} rows although {label_share} carry that "
            f"label: it barely separates the classes."
        )
    c_text = f" (C={C:.4g})" if isinstance(C, int | float) else ""
    inside = comp["bounded_correct"]
    text = (
        f"C is too small{c_text}: {bounded} of the {d} support rows sit at the limit C and {inside} of "
        f"them ({_pct(inside, m)} of all rows) are classified correctly but lie inside the margin; the "
        f"training error is {c['training_errors']} of {m}.{majority} The margin is wider than the data "
        f"allow: try a larger C (steps of 10)."
    )
    evidence = {
        "C": C,
        "bounded": bounded,
        "bounded_correct": comp["bounded_correct"],
        "training_errors": c["training_errors"],
        "most_predicted": top_pred,
        "most_predicted_rows": top_n,
    }
    return {"kind": "C_too_small", "text": text, "evidence": evidence}


def _hint_mislabel(c: dict[str, Any]) -> dict[str, Any] | None:
    """Bounded misclassified rows: mislabels or overlapping classes; how many have dissenting neighbours."""
    d, comp = c["d"], c["comp"]
    bm = comp["bounded_misclassified"]
    if not bm or not d:
        return None
    if _c_small_signature(c):
        return None  # C too small (or a too wide kernel) explains the bounded rows better
    dissent = c["dissent_bm"]
    if dissent:
        one = dissent == 1
        has, its = ("1 of them also has", "its") if one else (f"{dissent} of them also have", "their")
        nb = (
            f" {has} most of {its} nearest neighbours carrying another label: a sign of a wrong label "
            f"where the classes are otherwise well separated; but where the classes overlap, or beside a "
            f"much larger class, correctly labelled rows have such neighbours too. Look at those first; "
            f"it is not a verdict."
        )
    else:
        nb = " None of them has most of its nearest neighbours carrying another label."
    text = (
        f"{bm} of the {d} support rows ({_pct(bm, d)}) are at the limit C and misclassified by the model "
        f"trained on all rows: the usual signature of mislabelled rows or of overlapping classes.{nb}"
    )
    return {
        "kind": "bounded_misclassified",
        "text": text,
        "evidence": {"bounded_misclassified": bm, "with_neighbour_dissent": dissent},
    }


def _hint_twins(c: dict[str, Any]) -> dict[str, Any] | None:
    twins = c["twins"]
    if not twins["rows"]:
        return None
    text = (
        f"{twins['rows']} rows have an identical or near-identical twin with another label "
        f"({twins['support_rows']} of them are support rows): no model can fit both rows of a pair, so each "
        f"pair adds support rows and errors. Decide which label is right, or exclude one row."
    )
    return {"kind": "twin_conflicts", "text": text, "evidence": dict(twins)}


def _hint_imbalance(c: dict[str, Any]) -> dict[str, Any] | None:
    cls = c["classes"]
    m = c["m"]
    if cls["smallest_share"] >= IMBALANCE_OF_EVEN * cls["even_share"] or not m:
        return None
    counts: pd.Series = c["counts"]
    small = str(counts.idxmin())
    n_small = int(counts.min())
    sup_small = int(c["sup_counts"].get(small, 0))
    d = c["d"]
    k = len(counts)
    even = f"an even split would give each of the {k} classes {_pct(1, k)}"
    text = (
        f"The classes are imbalanced ({even}): '{small}' has {n_small} of {m} rows ({_pct(n_small, m)}) but "
        f"{sup_small} of the {d} support rows ({_pct(sup_small, d)}). Errors on the small class weigh little "
        f'in the error rate; class_weight = "balanced" gives its rows a larger C.'
    )
    return {
        "kind": "class_imbalance",
        "text": text,
        "evidence": {"class": small, "rows": n_small, "support_rows": sup_small},
    }


def _hint_multiclass(c: dict[str, Any]) -> dict[str, Any] | None:
    """Three or more classes: why the xi-alpha and span estimates are not in the bounds."""
    k = len(c["counts"])
    if c["params"].get("family") != "svm" or k < 3:
        return None
    text = (
        f"No xi-alpha or span estimate: both are stated for a two-class SVM (Joachims 2000; Vapnik & "
        f"Chapelle 2000), and with {k} classes the model is {k * (k - 1) // 2} two-class SVMs (one per pair "
        f"of classes) voting, with no single margin or dual weight per row for them to use. The exact LOO "
        f"error and the other bounds hold for any number of classes."
    )
    return {"kind": "multiclass_estimates", "text": text, "evidence": {"classes": k}}
