"""Assemble the findings: the per-row frame (evidence, flags, score, rank) and the summary (counts,
bounds with their sources, explanation)."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from holdfast import __version__
from holdfast.data.prepare import Prepared
from holdfast.data.spec import Spec
from holdfast.engine.findings import ROW_COLUMNS, Findings
from holdfast.engine.loo import LooResult
from holdfast.engine.summary_model import bounds_summary, family_summary, loo_exact_mask
from holdfast.insight.consensus import linear_label_logit
from holdfast.insight.explain import explain
from holdfast.insight.flags import FLAG_REASONS, TWIN_TOL, compute_flags, flip_reference, heavy_flip_threshold
from holdfast.insight.score import dissent_width, multiscale_dissent, rank_rows, suspicion_score
from holdfast.learners.base import FittedModel, signed_margins


def _class_values(prepared: Prepared, codes: np.ndarray) -> pd.Series:
    classes = prepared.classes
    labels = prepared.labels
    values = [classes[c] if c >= 0 else None for c in codes]
    missing = bool((np.asarray(codes) < 0).any())
    return pd.Series(values, dtype=object if missing or labels.dtype == object else labels.dtype)


def neighbour_evidence(prepared: Prepared, k: int, n_jobs: int | None = None) -> pd.DataFrame:
    """Neighbour evidence for every training row (NaN/-1/0 for held-out rows).

    ``neighbour_dissent`` and ``neighbour_majority``: share of the k nearest training rows with another
    label, and their most common label (a label value, as in ``label``; missing for held-out rows);
    ``neighbour_dissent_avg``: the dissent averaged over
    ``DISSENT_SCALES`` times k neighbours (k/2, k, 2k: less noisy than one k, used by the suspicion
    score); ``twin_conflicts``: other rows within ``TWIN_TOL`` (near-identical) carrying another label.
    """
    from holdfast.insight.neighbours import neighbour_dissents, twin_conflicts

    n = len(prepared.frame)
    tr = prepared.train_index
    X = prepared.X[tr]
    y = prepared.y[tr]
    dissent = np.full(n, np.nan)
    dissent_avg = np.full(n, np.nan)
    majority = np.full(n, -1, dtype=np.int64)
    twins = np.zeros(n, dtype=np.int64)
    if len(tr) > 1:
        widest = dissent_width(len(tr), k)
        found = neighbour_dissents(X, y, (k, widest), n_jobs=n_jobs)  # one search for both
        dissent[tr] = found[k].dissent
        majority[tr] = found[k].majority
        dissent_avg[tr] = multiscale_dissent(X, y, k, neighbours=found[widest].indices)
        twins[tr] = twin_conflicts(X, y, tol=TWIN_TOL)
    return pd.DataFrame(
        {
            "neighbour_dissent": dissent,
            "neighbour_dissent_avg": dissent_avg,
            "neighbour_majority": _class_values(prepared, majority),
            "twin_conflicts": twins,
        }
    )


def quick_evidence(prepared: Prepared, k: int, n_jobs: int | None = None) -> pd.DataFrame:
    """The evidence that needs no refit, over all input rows: :func:`neighbour_evidence` plus
    ``linear_logit`` (out-of-fold logistic log-odds of the label; NaN for held-out rows). ``n_jobs``:
    parallel jobs of the neighbour search."""
    tr = prepared.train_index
    evidence = neighbour_evidence(prepared, k, n_jobs)
    logit = np.full(len(prepared.frame), np.nan)
    logit[tr] = linear_label_logit(prepared.X[tr], prepared.y[tr])
    evidence["linear_logit"] = logit
    return evidence


def full_fit_priority(model: FittedModel, evidence: pd.DataFrame, train_index: np.ndarray) -> np.ndarray:
    """The suspicion score of every training row with the full-fit margin in place of the LOO margin:
    the order in which the LOO refits the support rows (most suspicious first)."""
    ev = evidence.iloc[train_index].reset_index(drop=True)
    frame = pd.DataFrame(
        {
            "loo_miss": model.prediction != model.y,
            "loo_margin": np.asarray(model.margin, dtype=np.float64),
            "neighbour_dissent_avg": ev["neighbour_dissent_avg"].to_numpy(),
            "linear_logit": ev["linear_logit"].to_numpy(),
            "held_out": np.zeros(len(model.y), dtype=bool),
        }
    )
    return suspicion_score(frame, margin_unit=margin_unit(model))


def _loo_margin(model: FittedModel, loo: LooResult) -> np.ndarray:
    """y * f_{-i}(x_i) of every training row; where the learner gave none, +-1 by the LOO prediction."""
    signed = np.where(loo.loo_code == model.y, 1.0, -1.0)
    if loo.loo_margin is None:
        return signed
    return np.where(np.isnan(loo.loo_margin), signed, loo.loo_margin)


def margin_unit(model: FittedModel) -> float:
    """The decision-value size the suspicion score reads as one margin unit, per family.

    SVM: 1 (free support rows sit at y f(x) = 1); logistic regression: 1 log-odds unit; k-NN: 0.5 of a
    vote share (own share minus the best other's lies in [-1, 1], so the score's clip of 2 units spans
    it); perceptron: its decision values have no natural scale (they grow with the updates), so the
    median |f(x)| over the training rows is one unit (our choice).
    """
    if model.family == "knn":
        return 0.5
    if model.family == "perceptron":
        med = float(np.median(np.abs(model.margin))) if len(model.margin) else 0.0
        return med if med > 0 else 1.0
    return 1.0


def build_rows(
    prepared: Prepared,
    model: FittedModel,
    loo: LooResult,
    *,
    held_pred: np.ndarray,
    held_decision: np.ndarray | None,
    k: int,
    evidence: pd.DataFrame | None = None,
    pending: np.ndarray | None = None,
) -> pd.DataFrame:
    """The per-row frame over all input rows, in input order.

    ``evidence``: :func:`quick_evidence`, when already computed. ``pending`` (provisional findings, one
    bool per training row): support rows whose refit has not arrived; their LOO columns are missing
    (nullable dtypes), the flags that need the refit (``loo_miss``, ``heavy_flip``) are not raised yet,
    their score and rank use the full-fit margin, and a ``loo_pending`` column is added.
    """
    n = len(prepared.frame)
    tr = prepared.train_index
    if evidence is None:
        evidence = quick_evidence(prepared, k)
    pend = np.zeros(n, dtype=bool)
    if pending is not None:
        pend[tr] = pending
    held = np.flatnonzero(~prepared.train)
    pred = np.full(n, -1, dtype=np.int64)
    loo_pred = np.full(n, -1, dtype=np.int64)
    pred[tr] = model.prediction
    loo_pred[tr] = loo.loo_code
    pred[held] = held_pred
    loo_pred[held] = held_pred
    margin = np.full(n, np.nan)
    margin[tr] = model.margin
    if held_decision is not None and len(held):
        yh = prepared.y[held]
        known = yh >= 0
        mh = signed_margins(held_decision, np.maximum(yh, 0))
        margin[held] = np.where(known, mh, np.nan)

    def spread(values: np.ndarray, fill: Any, dtype: Any) -> np.ndarray:
        out = np.full(n, fill, dtype=dtype)
        out[tr] = values
        return out

    labels = prepared.labels.reset_index(drop=True)
    rows = pd.DataFrame(
        {
            "row": np.arange(n, dtype=np.int64),
            "id": pd.Series(prepared.ids, dtype="string"),
            "label": labels,
            "prediction": _class_values(prepared, pred),
            "loo_prediction": _class_values(prepared, loo_pred),
            "loo_miss": (loo_pred != prepared.y) & ~pend,
            "support": spread(model.support, False, bool),
            "essential": spread(loo.essential, False, bool),
            "bounded": spread(model.bounded, False, bool),
            "alpha": spread(model.alpha, 0.0, float),
            "margin": margin,
            "loo_margin": spread(_loo_margin(model, loo), np.nan, float),
            "loo_exact": spread(loo_exact_mask(model, loo), False, bool),
            "flip_count": spread(loo.flip_count, 0, np.int64),
            "held_out": ~prepared.train,
        }
    )
    rows = pd.concat([rows, evidence.reset_index(drop=True)], axis=1)
    reference = model.support & ~pend[tr]  # the support rows' flip counts known so far
    rows = compute_flags(rows, heavy_flip_threshold(loo.flip_count[reference]))
    rows["score"] = suspicion_score(rows, margin_unit=margin_unit(model))
    rows["rank"] = rank_rows(rows["score"].to_numpy())
    if pending is not None:
        rows = _mask_pending(rows, pend)
    first = [c for c in ROW_COLUMNS if c in rows.columns]
    return rows[first + [c for c in rows.columns if c not in first]]


def _mask_pending(rows: pd.DataFrame, pend: np.ndarray) -> pd.DataFrame:
    """Provisional frame: the LOO columns of rows still waiting for their refit become missing."""
    rows["loo_prediction"] = rows["loo_prediction"].astype(object).where(~pend, None)
    rows["loo_miss"] = pd.Series(rows["loo_miss"].to_numpy(), dtype="boolean").mask(pend)
    rows["essential"] = pd.Series(rows["essential"].to_numpy(), dtype="boolean").mask(pend)
    rows["flip_count"] = pd.Series(rows["flip_count"].to_numpy(), dtype="Int64").mask(pend)
    rows["loo_margin"] = rows["loo_margin"].where(~pend)
    if "loo_exact" in rows:
        rows["loo_exact"] = rows["loo_exact"].to_numpy(dtype=bool) & ~pend
    rows["loo_pending"] = pend
    return rows


def _learner_params(params: dict[str, Any], prepared: Prepared) -> dict[str, Any]:
    """The learner's resolved parameters for the summary, with class weights keyed by label (the learner
    keys them by class code)."""
    out = dict(params)
    weights = out.get("class_weight_resolved")
    if isinstance(weights, dict):
        out["class_weight_resolved"] = {str(prepared.classes[int(c)]): w for c, w in weights.items()}
    return out


def _pending(pending: np.ndarray | None, m: int) -> np.ndarray:
    return np.zeros(m, dtype=bool) if pending is None else pending


def build_findings(
    prepared: Prepared,
    spec: Spec,
    model: FittedModel,
    loo: LooResult,
    *,
    held_pred: np.ndarray,
    held_decision: np.ndarray | None,
    seconds: float,
    evidence: pd.DataFrame | None = None,
    pending: np.ndarray | None = None,
    static: dict[str, Any] | None = None,
) -> Findings:
    """Per-row frame and summary for one scan.

    ``evidence``, ``pending``: as for :func:`build_rows`; with ``pending`` the findings are provisional
    (``summary["provisional"]``, ``loo_done``, ``loo_total``; LOO counts cover the refits done so far).
    ``static``: as for :func:`bounds_summary` (also keeps the distance statistics of the explanation).
    """
    rows = build_rows(
        prepared,
        model,
        loo,
        held_pred=held_pred,
        held_decision=held_decision,
        k=spec.insight.k,
        evidence=evidence,
        pending=pending,
    )
    tr = prepared.train_index
    m = len(tr)
    y = model.y
    d = int(model.support.sum())
    bounds = bounds_summary(prepared, model, loo, rows, spec.insight.delta, static)
    tr_mask = prepared.train
    counts = np.bincount(y, minlength=len(prepared.classes))
    summary: dict[str, Any] = {
        "holdfast_version": __version__,
        "data": {
            "rows_total": len(prepared.frame),
            "features": prepared.features,
            "prepared_features": len(prepared.feature_names),
        },
        "spec": spec.to_dict(),
        "spec_fingerprint": spec.fingerprint(),
        "learner": _learner_params(model.params, prepared),
        "classes": [str(c) for c in prepared.classes],
        "class_counts": {str(c): int(n) for c, n in zip(prepared.classes, counts, strict=True)},
        "m": m,
        "d": d,
        "bounded": int(model.bounded.sum()),
        "free": int(d - model.bounded.sum()),
        "essential": int(loo.essential.sum()),
        "training_errors": int((model.prediction != y).sum()),
        "loo_errors": int(((loo.loo_code != y) & ~_pending(pending, m)).sum()),
        "loo_exact": bool(model.loo_exact),
        "loo_exact_rows": int(rows["loo_exact"].to_numpy(dtype=bool)[tr_mask].sum()),
        "family": family_summary(model, m, loo),
        "solver_tol": model.params.get("tol"),
        "flags": {name: int(rows[f"flag_{name}"].sum()) for name in FLAG_REASONS},
        "heavy_flip_min": heavy_flip_threshold(flip_reference(rows)),
        "bounds": bounds,
        "refits": int(loo.refits),
        "resumed_refits": int(loo.resumed),
        "seconds": round(float(seconds), 3),
    }
    held = ~prepared.train
    if held.any():
        n_h = int(held.sum())
        e_h = int(rows.loc[held, "loo_miss"].sum())
        summary["held_out"] = {"n": n_h, "errors": e_h, "error_rate": e_h / n_h}
    distances = None if static is None else static.get("distances")
    summary["explanation"] = explain(rows, prepared.X[tr], model.params, distances=distances)
    if static is not None:
        static["distances"] = summary["explanation"]["distances"]
    if pending is not None:
        summary["provisional"] = True
        summary["loo_total"] = len(model.loo_candidates())
        summary["loo_done"] = summary["loo_total"] - int(pending.sum())
    return Findings(rows=rows, summary=summary, classes=[str(c) for c in prepared.classes])
