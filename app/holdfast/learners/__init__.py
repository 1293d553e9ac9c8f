"""Learner families behind one small protocol (see :mod:`holdfast.learners.base`).

Each family lives in its own module with a ``validate_<family>_params(table, source)`` and a learner
class; ``FAMILIES`` maps the spec's ``family`` value to both (imported on first use).
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

from holdfast.learners.base import SUPPORT_MEANING, FittedModel, Learner

#: family -> (module, validator, learner class)
FAMILIES: dict[str, tuple[str, str, str]] = {
    "svm": ("holdfast.learners.svm", "validate_svm_params", "SVMLearner"),
    "knn": ("holdfast.learners.knn", "validate_knn_params", "KNNLearner"),
    "perceptron": ("holdfast.learners.perceptron", "validate_perceptron_params", "PerceptronLearner"),
    "logistic": ("holdfast.learners.logistic", "validate_logistic_params", "LogisticLearner"),
}


def _family(name: str) -> tuple[Any, Any]:
    if name not in FAMILIES:
        raise ValueError(name)
    module, validator, cls = FAMILIES[name]
    mod = import_module(module)
    return getattr(mod, validator), getattr(mod, cls)


def validate_params(table: dict[str, Any], source: str) -> dict[str, Any]:
    """Validate a ``[learner]`` table for its family; return it with defaults filled in."""
    validator, _ = _family(table.get("family", "svm"))
    return validator(table, source)


def make_learner(params: dict[str, Any]) -> Learner:
    """Build the learner for a validated ``[learner]`` table."""
    _, cls = _family(params.get("family", "svm"))
    return cls(**{k: v for k, v in params.items() if k != "family"})


__all__ = ["FAMILIES", "SUPPORT_MEANING", "FittedModel", "Learner", "make_learner", "validate_params"]
