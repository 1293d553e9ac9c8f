"""Learner families behind one small protocol (see :mod:`holdfast.learners.base`)."""

from __future__ import annotations

from typing import Any

from holdfast.learners.base import FittedModel, Learner


def validate_params(table: dict[str, Any], source: str) -> dict[str, Any]:
    """Validate a ``[learner]`` table for its family; return it with defaults filled in."""
    family = table.get("family", "svm")
    if family == "svm":
        from holdfast.learners.svm import validate_svm_params

        return validate_svm_params(table, source)
    raise ValueError(family)


def make_learner(params: dict[str, Any]) -> Learner:
    """Build the learner for a validated ``[learner]`` table."""
    family = params.get("family", "svm")
    if family == "svm":
        from holdfast.learners.svm import SVMLearner

        return SVMLearner(**{k: v for k, v in params.items() if k != "family"})
    raise ValueError(family)


__all__ = ["FittedModel", "Learner", "make_learner", "validate_params"]
