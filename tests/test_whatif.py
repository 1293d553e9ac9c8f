"""What-if refits checked against direct scikit-learn fits on the corrected data.

Reference: scikit-learn's SVC and its ``LeaveOneOut`` with ``cross_val_predict`` (Pedregosa et al. 2011,
"Scikit-learn: Machine Learning in Python", JMLR 12) on the corrected labels, the features standardized
with ``StandardScaler`` on the rows that remain; data: scikit-learn's bundled breast-cancer set (Wolberg,
Street & Mangasarian 1995, UCI) with label flips planted here.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from holdfast.cli import main
from holdfast.data.spec import spec_from_text
from holdfast.engine.scan import run_scan
from holdfast.review.events import Decision
from holdfast.review.whatif import CHANGED_COLUMNS, what_if

GAMMA = 0.05
# one job: refits in this process, where the tests count them (forked workers would count their own)
SPEC = f'[data]\nlabel = "diagnosis"\nid = "case"\n[learner]\nkernel = "rbf"\nC = 1.0\ngamma = {GAMMA}\n'
SPEC += "[run]\njobs = 1\n"
N = 200
PLANTED = 10


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(tmp_path / "cache"))


@pytest.fixture(scope="module")
def data():
    """Breast cancer subsample with ids, true labels and PLANTED flipped labels (seeded)."""
    X, y = load_breast_cancer(return_X_y=True)
    rng = np.random.default_rng(21)
    idx = np.sort(rng.choice(len(y), size=N, replace=False))
    X, y = X[idx], np.where(y[idx] == 1, "benign", "malignant")
    flip = np.sort(rng.choice(N, size=PLANTED, replace=False))
    given = y.copy()
    given[flip] = np.where(y[flip] == "benign", "malignant", "benign")
    frame = pd.DataFrame(X, columns=[f"f{i}" for i in range(X.shape[1])])
    frame.insert(0, "case", [f"case-{i:04d}" for i in range(N)])
    frame["diagnosis"] = given
    return frame, y, flip


def _svc() -> SVC:
    return SVC(kernel="rbf", C=1.0, gamma=GAMMA, tol=1e-6)  # holdfast's default tol is 1e-6 too


def _reference(frame: pd.DataFrame, labels: np.ndarray) -> tuple[int, int]:
    """(support rows, LOO errors) of a direct fit and scikit-learn LeaveOneOut on ``frame``'s features."""
    X = StandardScaler().fit_transform(frame[[c for c in frame.columns if c.startswith("f")]].to_numpy())
    d = int(_svc().fit(X, labels).n_support_.sum())
    loo = cross_val_predict(_svc(), X, labels, cv=LeaveOneOut(), n_jobs=1)
    return d, int((loo != labels).sum())


@pytest.fixture(scope="module")
def scan(tmp_path_factory, data):
    """One scan of the flipped data for the module (what_if never changes it)."""
    frame, _, _ = data
    tmp = tmp_path_factory.mktemp("whatif")
    path = tmp / "cases.parquet"
    frame.to_parquet(path, index=False)
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("HOLDFAST_CACHE_DIR", str(tmp / "cache"))
        return run_scan(path, spec_from_text(SPEC))


def test_relabelling_the_planted_flips_back_matches_a_direct_fit(scan, data):
    frame, truth, flip = data
    ids = frame["case"].to_numpy()
    decisions = {ids[i]: Decision(ids[i], "relabel", truth[i], None, "") for i in flip}
    decisions["case-9999"] = Decision("case-9999", "relabel", "benign", None, "")  # not in the data
    w = what_if(scan, decisions)
    d_ref, loo_ref = _reference(frame, truth)
    assert w.after["loo_errors"] == loo_ref
    assert w.after["d"] == d_ref
    # the before side is the flipped data: same reference on the given labels
    d_before, loo_before = _reference(frame, frame["diagnosis"].to_numpy())
    assert (w.before["d"], w.before["loo_errors"]) == (d_before, loo_before)
    assert w.relabelled == PLANTED and w.excluded == 0
    assert w.after["m"] == w.before["m"] == N
    assert w.unmatched == ["case-9999"]
    # every planted row changed its label; the comparison carries the LOO errors and every bound
    changed = w.changed.set_index("id")
    assert set(ids[flip]) <= set(changed.index)
    for i in flip:
        assert changed.loc[ids[i], "label_before"] != changed.loc[ids[i], "label_after"] == truth[i]
    names = {name: (b, a) for name, b, a in w.comparison}
    assert names["LOO errors"] == (loo_before, loo_ref)
    bounds = w.after["bounds"]
    both = (
        f"{bounds['support_fraction']['name']} = {bounds['loo_bound']['name']}"  # equal for an SVM: one row
    )
    assert names[both] == (w.before["bounds"]["loo_bound"]["value"], bounds["loo_bound"]["value"])
    assert bounds["loo_bound"]["name"] not in names and bounds["support_fraction"]["name"] not in names
    for key, item in bounds.items():
        if key not in ("support_fraction", "loo_bound"):
            assert names[item["name"]][1] == item["value"], key
    assert list(w.changed.columns) == list(CHANGED_COLUMNS)


def test_exclusions_remove_rows_and_match_a_direct_fit(scan, data):
    frame, _, flip = data
    ids = frame["case"].to_numpy()
    drop = flip[:5]
    decisions = {ids[i]: Decision(ids[i], "exclude", None, None, "") for i in drop}
    decisions[ids[0]] = Decision(ids[0], "confirm", None, "looked fine", "")
    w = what_if(scan, decisions)
    assert w.after["m"] == w.before["m"] - len(drop)
    assert w.excluded == len(drop)
    kept = frame.drop(index=drop)
    d_ref, loo_ref = _reference(kept, kept["diagnosis"].to_numpy())  # re-standardized on the kept rows
    assert (w.after["d"], w.after["loo_errors"]) == (d_ref, loo_ref)
    ex = w.changed[w.changed["status_after"] == "excluded"]
    assert sorted(ex["id"]) == sorted(ids[drop])
    assert sorted(ex["row"]) == sorted(drop.tolist())
    assert w.findings is not None
    assert list(w.findings.rows["id"]) == [i for n, i in enumerate(ids) if n not in set(drop)]


def test_rows_by_position_keep_their_ids_after_an_exclusion(tmp_path, data):
    # without an id column the id is the row position: an exclusion must not shift the ids after it
    frame, _, _ = data
    path = tmp_path / "noid.parquet"
    frame.drop(columns="case").to_parquet(path, index=False)
    spec = spec_from_text(SPEC.replace('id = "case"\n', ""))
    scan = run_scan(path, spec)
    w = what_if(scan, {"3": Decision("3", "exclude", None, None, "")})
    after_ids = list(w.findings.rows["id"])
    assert "3" not in after_ids and after_ids[:4] == ["0", "1", "2", "4"]
    assert w.relabelled == 0  # nothing but the exclusion changed
    labels = dict(zip(w.findings.rows["id"], w.findings.rows["label"], strict=True))
    assert all(labels[str(i)] == frame["diagnosis"].iloc[i] for i in range(N) if i != 3)


def test_decision_on_a_held_out_row_changes_the_data_not_the_training(tmp_path, data):
    frame = data[0]
    f = frame.copy()
    held = np.zeros(N, dtype=bool)
    held[-40:] = True
    f["held"] = held
    path = tmp_path / "split.parquet"
    f.to_parquet(path, index=False)
    scan = run_scan(path, spec_from_text(SPEC.replace('id = "case"', 'id = "case"\nsplit = "held"')))
    target = int(np.flatnonzero(held)[0])
    rid = f["case"].iloc[target]
    new = "benign" if f["diagnosis"].iloc[target] == "malignant" else "malignant"
    w = what_if(scan, {rid: Decision(rid, "relabel", new, None, "")})
    assert w.held_out_decisions == 1
    assert any("held-out" in n and "never trained on" in n for n in w.notes)
    assert w.after["m"] == w.before["m"] == N - 40
    assert w.after["d"] == w.before["d"] and w.after["loo_errors"] == w.before["loo_errors"]
    # the held-out error moves by exactly one: the relabelled row's prediction did not change
    delta = w.after["held_out"]["errors"] - w.before["held_out"]["errors"]
    assert abs(delta) == 1
    assert w.after["bounds"]["test_set"]["errors"] == w.after["held_out"]["errors"]


def test_confirm_and_defer_leave_the_model_unchanged(scan, data):
    ids = data[0]["case"].to_numpy()
    w = what_if(
        scan,
        {
            ids[1]: Decision(ids[1], "confirm", None, None, ""),
            ids[2]: Decision(ids[2], "defer", None, "", ""),
        },
    )
    assert w.after is w.before and w.changed.empty
    assert any("unchanged" in n for n in w.notes)


def test_scan_with_decisions_writes_whatif(tmp_path, data, capsys):
    frame, truth, flip = data
    path = tmp_path / "cases.parquet"
    frame.to_parquet(path, index=False)
    spec_path = tmp_path / "spec.toml"
    spec_path.write_text(SPEC)
    ids = frame["case"].to_numpy()
    dec = pd.DataFrame({"id": ids[flip], "decision": "relabel", "new_label": truth[flip]})
    drop = next(i for i in range(N) if i not in set(flip))
    dec.loc[len(dec)] = [ids[drop], "exclude", None]
    dec_path = tmp_path / "decisions.csv"
    dec.to_csv(dec_path, index=False)
    out = tmp_path / "out"
    rc = main(
        [
            "scan",
            str(path),
            "--spec",
            str(spec_path),
            "--decisions",
            str(dec_path),
            "--out",
            str(out),
            "--quiet",
        ]
    )
    assert rc == 0
    doc = json.loads((out / "whatif.json").read_text())
    changed = pd.read_parquet(out / "whatif_rows.parquet")
    corrected = frame.assign(diagnosis=truth).drop(index=drop)
    d_ref, loo_ref = _reference(corrected, corrected["diagnosis"].to_numpy())
    assert (doc["after"]["d"], doc["after"]["loo_errors"]) == (d_ref, loo_ref)
    assert doc["relabelled"] == PLANTED and doc["excluded"] == 1
    assert doc["after"]["m"] == N - 1
    assert set(ids[flip]) | {ids[drop]} <= set(changed["id"])
    assert len(changed) == doc["changed_rows"]
    shown = capsys.readouterr().out
    assert f"what-if: {PLANTED} relabelled, 1 excluded" in shown
    table = shown[shown.index("what-if:") :].splitlines()
    loo_line = next(line for line in table if line.startswith("LOO errors"))
    assert loo_line.split()[-2:] == [str(doc["before"]["loo_errors"]), str(doc["after"]["loo_errors"])]


def test_scan_with_a_missing_decisions_file_fails_before_scanning(tmp_path, data, capsys):
    frame = data[0]
    path = tmp_path / "cases.parquet"
    frame.to_parquet(path, index=False)
    spec_path = tmp_path / "spec.toml"
    spec_path.write_text(SPEC)
    missing = tmp_path / "nope.csv"
    rc = main(
        [
            "scan",
            str(path),
            "--spec",
            str(spec_path),
            "--decisions",
            str(missing),
            "--out",
            str(tmp_path / "o"),
        ]
    )
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and str(missing) in err[0]
    assert not (tmp_path / "o").exists()


def test_relabel_to_a_class_that_does_not_exist_is_refused_before_scanning(tmp_path, data, capsys):
    frame = data[0]
    path = tmp_path / "cases.parquet"
    frame.to_parquet(path, index=False)
    spec_path = tmp_path / "spec.toml"
    spec_path.write_text(SPEC)
    dec_path = tmp_path / "decisions.csv"
    pd.DataFrame({"id": ["case-0003"], "decision": ["relabel"], "new_label": ["banana"]}).to_csv(
        dec_path, index=False
    )
    argv = [
        "scan",
        str(path),
        "--spec",
        str(spec_path),
        "--decisions",
        str(dec_path),
        "--out",
        str(tmp_path / "o"),
    ]
    rc = main(argv)
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1
    assert "case-0003" in err[0] and "'banana'" in err[0] and "benign, malignant" in err[0]
    assert str(dec_path) in err[0]
    assert not (tmp_path / "o").exists()


def test_what_if_refuses_an_unknown_class_naming_row_and_classes(scan):
    from holdfast.errors import DataError

    with pytest.raises(DataError, match=r"row id 'case-0001'.*'banana'.*classes: benign, malignant"):
        what_if(scan, {"case-0001": Decision("case-0001", "relabel", "banana", None, "")})


def test_same_decisions_do_not_refit_twice(scan, data, monkeypatch):
    import holdfast.learners.svm as svm_mod

    frame, truth, flip = data
    ids = frame["case"].to_numpy()
    refits = {"n": 0}
    real = svm_mod.SVMRefitProblem.refit_without

    def counted(problem, row):
        refits["n"] += 1
        return real(problem, row)

    monkeypatch.setattr(svm_mod.SVMRefitProblem, "refit_without", counted)
    decisions = {ids[i]: Decision(ids[i], "relabel", truth[i], None, "") for i in flip[:4]}
    first = what_if(scan, decisions)
    assert refits["n"] > 0 and not first.from_cache
    refits["n"] = 0
    # the same changes, with a note, a confirm and another time: what changes the data is the same
    again = dict(decisions)
    rid = ids[flip[0]]
    again[rid] = Decision(rid, "relabel", truth[flip[0]], "checked twice", "2026-01-02T00:00:00+00:00")
    again[ids[flip[5]]] = Decision(ids[flip[5]], "confirm", None, None, "")
    second = what_if(scan, again)
    assert refits["n"] == 0 and second.from_cache
    assert second.comparison == first.comparison
    pd.testing.assert_frame_equal(
        second.changed.drop(columns="decision"), first.changed.drop(columns="decision")
    )
    # other decisions: a new refit
    third = what_if(scan, {**decisions, ids[flip[5]]: Decision(ids[flip[5]], "exclude", None, None, "")})
    assert refits["n"] > 0 and not third.from_cache
    assert third.after["m"] == first.after["m"] - 1


def test_the_caution_names_the_self_fulfilling_loo_error_and_the_held_out_check(tmp_path, data):
    frame, truth, flip = data
    held = frame.assign(held=np.arange(N) % 5 == 4)
    path = tmp_path / "held.parquet"
    held.to_parquet(path, index=False)
    scan = run_scan(path, spec_from_text(SPEC.replace('id = "case"', 'id = "case"\nsplit = "held"')))
    ids = frame["case"].to_numpy()
    w = what_if(scan, {ids[i]: Decision(ids[i], "relabel", truth[i], None, "") for i in flip})
    assert "self-fulfilling" in w.caution and "held-out error" in w.caution
    counts = f"held-out errors {w.before['held_out']['errors']} -> {w.after['held_out']['errors']}"
    assert counts in w.caution
    assert w.caution in w.text()


def test_the_what_if_cache_keeps_the_most_recent_results(tmp_path):
    import os

    from holdfast.review.whatif import WHATIF_PREFIX, prune_whatif_cache

    for n in range(11):
        folder = tmp_path / f"{WHATIF_PREFIX}{n:02d}"
        folder.mkdir()
        (folder / "summary.json").write_text("{}")
        os.utime(folder, (1_000_000 + n, 1_000_000 + n))
    (tmp_path / "refits.sqlite").write_text("")  # the scan's own files stay
    removed = prune_whatif_cache(tmp_path, keep=8)
    assert sorted(f.name for f in removed) == [f"{WHATIF_PREFIX}{n:02d}" for n in range(3)]
    left = sorted(f.name for f in tmp_path.iterdir())
    assert left == sorted([f"{WHATIF_PREFIX}{n:02d}" for n in range(3, 11)] + ["refits.sqlite"])
