"""The summary's sections about the model: which bounds and estimates apply to the learner family in use,
their values and published sources, and what "support rows" and the family's own columns mean."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from holdfast.data.prepare import Prepared
from holdfast.engine.loo import LooResult
from holdfast.insight import bounds as B
from holdfast.learners.base import SUPPORT_MEANING, FittedModel


def loo_exact_mask(model: FittedModel, loo: LooResult) -> np.ndarray:
    """Per training row: its LOO prediction and margin are exact (not an approximation)."""
    if loo.exact is not None:
        return np.asarray(loo.exact, dtype=bool)
    return np.full(len(model.y), bool(model.loo_exact))


def pending_of(rows: pd.DataFrame, tr: np.ndarray) -> np.ndarray:
    """The training rows' ``loo_pending`` (all False in finished findings)."""
    if "loo_pending" not in rows:
        return np.zeros(len(tr), dtype=bool)
    return rows["loo_pending"].to_numpy(dtype=bool)[tr]


def bounds_summary(
    prepared: Prepared,
    model: FittedModel,
    loo: LooResult,
    rows: pd.DataFrame,
    delta: float,
    static: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Bounds and estimates side by side, each with its name and published source.

    ``static``: a dict kept across calls for the same fit (the provisional findings of one scan); the
    estimates that need no refit (xi-alpha, span) are computed once into it.
    """
    tr = prepared.train_index
    m = len(tr)
    d = int(model.support.sum())
    y = model.y
    train_err_outside = int(((model.prediction != y) & ~model.support).sum())
    loo_miss_outside = int(((loo.loo_code != y) & ~model.support).sum())
    two = len(model.classes) == 2
    loo_source = {
        "svm": "exact refits of the support rows",
        "perceptron": "exact refits of the update rows",
        "knn": "exact for every row from the neighbour lists",
        "logistic": "one-step approximation (Rad & Maleki 2020) with exact refits near the boundary",
    }.get(model.family, "")
    if model.family in ("knn", "logistic"):
        # no compression set: removing any row changes the model, so neither d/m, the LOO bound nor the
        # compression bound on the support rows applies
        out: dict[str, Any] = {
            "loo_error": {
                "name": "exact LOO error" if model.family == "knn" else "LOO error",
                "value": float(((loo.loo_code != y) & ~pending_of(rows, tr)).mean()),
                "source": "Lachenbruch & Mickey 1968, Estimation of error rates in discriminant analysis, "
                f"Technometrics 10 (leave-one-out); {loo_source}",
            }
        }
        if model.family == "knn":
            store = model.extras["condensed"]
            errs = int(model.extras["condensed_errors"])
            out["compression_condensed"] = {
                "name": "compression bound (condensed 1-NN)",
                "value": B.compression_bound(m, len(store), errs, delta),
                "size": len(store),
                "k": errs,
                "delta": delta,
                "source": "Hart 1968, The condensed nearest neighbor rule, IEEE Trans. Inf. Theory 14 "
                "(a consistent subset); Langford 2005, JMLR 6 (sample compression bound)",
                "note": f"for the 1-NN rule on Hart's condensed set of {len(store)} rows, not for k-NN "
                f"itself; delta={delta}",
            }
        else:
            out["loo_error"]["note"] = f"{int(loo_exact_mask(model, loo).sum())} of {m} rows exact"
        _held_bound(out, prepared, rows, delta)
        return out
    out = {
        "support_fraction": {
            "name": "support fraction d/m",
            "value": B.support_fraction(d, m),
            "source": "Vapnik 1995, The Nature of Statistical Learning Theory (LOO errors <= d)",
        },
        "loo_bound": {
            "name": "LOO bound",
            "value": B.loo_bound(d, loo_miss_outside, m),
            "source": "Vapnik 1995, The Nature of Statistical Learning Theory: "
            "(d + LOO misses outside the support set) / m",
            "misses_outside": loo_miss_outside,
        },
    }
    if loo_miss_outside == 0:
        # rows outside the support set keep the model when left out, and an SVM classifies them correctly
        # (margin >= 1), so none is a LOO miss: the two numbers coincide
        out["support_fraction"]["note"] = "= LOO bound (no LOO miss outside the support set)"
        out["loo_bound"]["note"] = "= d/m: no LOO miss outside the support set"
    out |= {
        "loo_error": {
            "name": "exact LOO error",
            "value": float(((loo.loo_code != y) & ~pending_of(rows, tr)).mean()),
            "source": "Lachenbruch & Mickey 1968, Estimation of error rates in discriminant analysis, "
            f"Technometrics 10 (leave-one-out); {loo_source}",
        },
        "compression": {
            "name": "compression bound",
            "value": B.compression_bound(m, d, train_err_outside, delta),
            "delta": delta,
            "k": train_err_outside,
            "source": "Langford 2005, Tutorial on practical prediction theory for classification, JMLR 6 "
            "(sample compression bound; after Littlestone & Warmuth 1986, Floyd & Warmuth 1995)",
            "note": f"delta={delta}",
        },
    }
    if model.family == "perceptron":
        out["compression"]["note"] = f"on the update set; delta={delta}"
        nov = model.extras.get("novikoff")
        if nov is None:
            out["novikoff"] = {
                "name": "Novikoff mistake bound",
                "value": None,
                "applies": False,
                "source": "Novikoff 1962, On convergence proofs on perceptrons",
                "note": "defined for two classes only",
            }
        else:
            out["novikoff"] = {
                "name": "Novikoff mistake bound",
                "value": nov["bound"],
                "applies": bool(nov["applies"]),
                "updates": int(nov["updates"]),
                "R": nov["R"],
                "gamma": nov["gamma"],
                "source": "Novikoff 1962, On convergence proofs on perceptrons: updates <= (R / gamma)^2",
                "note": (
                    f"a count of updates, not an error rate; {nov['updates']} made"
                    if nov["applies"]
                    else "does not apply: the final weights do not separate the training rows"
                ),
            }
    if static is not None and "fit_estimates" in static:
        out.update(static["fit_estimates"])
    elif model.family == "svm" and two:
        # two-class theorems: margin = y f(x) with y in {-1, +1}, alpha = |dual_coef_|
        xa = B.xi_alpha(model.alpha, model.margin, model.extras["kernel_r2"])
        out["xi_alpha"] = {
            "name": "xi-alpha estimate",
            "value": xa.count / m,
            "count": int(xa.count),
            "rho": xa.rho,
            "R2": xa.r2,
            "source": "Joachims 2000, Estimating the generalization performance of a SVM efficiently, ICML",
            "note": "upper bound on the LOO errors; rho=2, R^2 = max K - min K",
        }
        span = span_summary(model, m)
        if span is not None:
            out["span"] = span
    if static is not None:
        static["fit_estimates"] = {k: out[k] for k in ("xi_alpha", "span") if k in out}
    _held_bound(out, prepared, rows, delta)
    return out


def _held_bound(out: dict[str, Any], prepared: Prepared, rows: pd.DataFrame, delta: float) -> None:
    """Add the test-set bound when rows were held out."""
    held = ~prepared.train
    if held.any():
        hr = rows[held]
        n_h = len(hr)
        k_h = int(hr["loo_miss"].sum())
        out["test_set"] = {
            "name": "test-set bound",
            "value": B.test_set_bound(n_h, k_h, delta),
            "n": n_h,
            "errors": k_h,
            "delta": delta,
            "source": "Langford 2005, Tutorial on practical prediction theory for classification, JMLR 6 "
            "(test-set bound)",
            "note": f"delta={delta}",
        }


def span_summary(model: FittedModel, m: int) -> dict[str, Any] | None:
    """The span estimate (Vapnik & Chapelle 2000) from the kernel matrix of the support rows.

    Needs the training kernel (``model.extras["K"]``, present when it was precomputed); None without it
    or when the kernel matrix of the free support rows is not positive definite.
    """
    K = model.extras.get("K")
    sv = np.flatnonzero(model.support)
    if K is None or not len(sv):
        return None
    try:
        res = B.span_estimate(
            K[np.ix_(sv, sv)], model.alpha[sv], model.margin[sv], model.bounded[sv], bounded_rule="span"
        )
    except ValueError:
        return None
    bounded = model.bounded[sv]
    conservative = int(res.mask[~bounded].sum() + bounded.sum())
    return {
        "name": "span estimate",
        "value": res.count / m,
        "count": int(res.count),
        "count_bounded_as_errors": conservative,
        "source": "Vapnik & Chapelle 2000, Bounds on error expectation for support vector machines, "
        "Neural Computation 12(9)",
        "note": "estimate, not a bound: assumes the support set stays the same without the row",
    }


#: Per-row columns that mean something only for some families (the faces hide them elsewhere).
FAMILY_COLUMNS: dict[str, tuple[str, ...]] = {
    "svm": ("alpha", "bounded"),
    "perceptron": ("alpha",),
    "knn": (),
    "logistic": (),
}
#: What the alpha column holds, where it means something.
ALPHA_MEANING = {
    "svm": "dual weight (0 outside the support set)",
    "perceptron": "updates the row caused (the dual perceptron's weight)",
}


def ties_summary(model: FittedModel, loo: LooResult | None) -> dict[str, Any]:
    """SVM: how decision values near 0 got their sign (``learner.ties``), the allowance, and how many
    training decision values (full model) and LOO decision values of refitted rows lie within it. Under
    "optimum" those signs are the exact optimum's, which a solver stopping at ``tol`` (libsvm, so
    scikit-learn's LeaveOneOut) may give the other way."""
    allowance = float(model.extras["tie_allowance"])
    out: dict[str, Any] = {"rule": model.extras["ties"], "allowance": allowance}
    decision = np.asarray(model.extras["decision"])
    if decision.ndim == 1:
        out["training_within"] = int(np.sum(np.abs(decision) < allowance))
        if loo is not None and loo.loo_margin is not None:
            refitted = model.loo_candidates()
            out["loo_within"] = int(np.sum(np.abs(loo.loo_margin[refitted]) < allowance))
    return out


def family_summary(model: FittedModel, m: int, loo: LooResult | None = None) -> dict[str, Any]:
    """The ``family`` object of the summary: what "support rows" means for the family in use, which
    family-specific columns apply, how the LOO was computed, and the family's own facts."""
    meaning = SUPPORT_MEANING.get(model.family, {"name": "support rows", "meaning": ""})
    out: dict[str, Any] = {
        "name": model.family,
        "support_name": meaning["name"],
        "support_meaning": meaning["meaning"],
        "columns": list(FAMILY_COLUMNS.get(model.family, ("alpha", "bounded"))),
        "alpha_meaning": ALPHA_MEANING.get(model.family),
        "classes": len(model.classes),
        "multiclass": "one-vs-rest" if model.family in ("perceptron", "logistic") else "plain",
    }
    if model.family == "knn":
        out["condensed_size"] = len(model.extras["condensed"])
        out["loo"] = "exact for every row (the row left out of its own neighbour list by position)"
    elif model.family == "perceptron":
        out["updates"] = int(model.extras["updates"])
        out["loo"] = "exact: refits of the update rows; other rows keep their training prediction"
    elif model.family == "logistic":
        out["influence"] = "Cook's distance (Pregibon 1981)"
        out["influence_threshold"] = float(model.extras["influence_threshold"])
        out["threshold_rule"] = "4 / m (common practice)"
        out["refit_band"] = float(model.extras["refit_band"])
        out["loo"] = (
            "one Newton step from the full fit for every row (Rad & Maleki 2020); exact warm-started "
            f"refits for rows within {model.extras['refit_band']} of zero, the influential rows and rows "
            "the step says flip another row"
        )
    else:
        out["loo"] = "exact: refits of the support rows; other rows keep their training prediction"
        if "ties" in model.extras:
            out["ties"] = ties_summary(model, loo)
    return out
