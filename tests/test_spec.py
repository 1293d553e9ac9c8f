"""Spec validation: every mistake names the file and key, unknown keys suggest the nearest valid key."""

from __future__ import annotations

import pytest

from holdfast.data.spec import load_spec, spec_from_text
from holdfast.errors import SpecError

GOOD = """
[data]
label = "grade"
id = "lot_id"
features = ["diameter_mm", "variety"]
split = "holdout"
[prepare]
scale = "standard"
categorical = "onehot"
[learner]
family = "svm"
kernel = "rbf"
C = 2
gamma = 0.5
class_weight = "balanced"
[run]
jobs = -1
"""


def test_good_spec_round_trips_through_toml():
    spec = spec_from_text(GOOD, "good.toml")
    assert spec.data.label == "grade" and spec.data.features == ("diameter_mm", "variety")
    assert spec.learner["C"] == 2.0 and spec.learner["gamma"] == 0.5 and spec.run.jobs == -1
    again = spec_from_text(spec.to_toml(), "again.toml")
    assert again.to_dict() == spec.to_dict()
    assert again.fingerprint() == spec.fingerprint()


def test_fingerprint_ignores_run_but_not_learner():
    a = spec_from_text(GOOD)
    b = spec_from_text(GOOD.replace("jobs = -1", "jobs = 2"))
    c = spec_from_text(GOOD.replace("C = 2", "C = 3"))
    assert a.fingerprint() == b.fingerprint() != c.fingerprint()


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        (
            GOOD.replace("kernel =", "kernal ="),
            r"s.toml: unknown key 'learner.kernal'; did you mean 'kernel'\?",
        ),
        (GOOD.replace("[prepare]", "[prepar]"), r"unknown key 'prepar'; did you mean 'prepare'\?"),
        (GOOD.replace("label =", "lable ="), r"missing required key 'data.label'"),
        (GOOD.replace("C = 2", "c = 2"), r"unknown key 'learner.c'; did you mean 'C'\?"),
        (GOOD.replace("C = 2", "C = -1"), r"'learner.C' must be a positive number"),
        (GOOD.replace("gamma = 0.5", 'gamma = "wide"'), r"'learner.gamma' must be"),
        (GOOD.replace('kernel = "rbf"', 'kernel = "sigmoid"'), r"'learner.kernel' must be one of linear"),
        (GOOD.replace("jobs = -1", "jobs = 0"), r"'run.jobs' must be a positive integer or -1"),
        (
            GOOD.replace("jobs = -1", 'jobs = -1\nbackend = "thread"'),
            r"'run.backend' must be one of joblib \| threads \| dask, got 'thread'; did you mean 'threads'\?",
        ),
        (GOOD.replace("jobs = -1", 'jobs = -1\nbackend = "spark"'), r"got 'spark'$"),
        (GOOD.replace('family = "svm"', 'family = "forest"'), r"'learner.family' must be one of"),
        (GOOD.replace('scale = "standard"', 'scale = "minmax"'), r"'prepare.scale' must be one of standard"),
        (GOOD + "\n[insight]\nk = 0\n", r"'insight.k' must be a positive integer"),
        ("[data\nlabel=1", r"s.toml: not valid TOML"),
    ],
)
def test_bad_specs_name_the_key(text, expected):
    with pytest.raises(SpecError, match=expected):
        spec_from_text(text, "s.toml")


def test_missing_spec_file_names_the_path(tmp_path):
    with pytest.raises(SpecError, match=r"nope.toml: spec file not found"):
        load_spec(tmp_path / "nope.toml")
