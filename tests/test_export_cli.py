"""``holdfast export SESSION``: in-process through ``holdfast.cli.main`` and as a subprocess.

Checks exit codes (0; 2 with one line on stderr naming the file for each user mistake) and the contents of
the files written. Data: scikit-learn's bundled breast-cancer set (Wolberg, Street & Mangasarian 1995, UCI),
a subsample with text ids; the cleaned set is checked against a plain pandas edit of the same table.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer

from holdfast.cli import main
from holdfast.data.load import fingerprint_file
from holdfast.data.spec import spec_from_text
from holdfast.engine.scan import run_scan
from holdfast.review.journal import Journal

APP = Path(__file__).resolve().parents[1] / "app"
# one job: refits in this process, where the tests count them (forked workers would count their own)
SPEC = '[data]\nlabel = "grade"\nid = "sample"\n[learner]\nkernel = "rbf"\nC = 1.0\n'
SPEC += "[run]\njobs = 1\n"


@pytest.fixture(scope="module")
def cache_dir(tmp_path_factory):
    """One scan cache for the module: every test writes the same data, so later tests read the cache."""
    return tmp_path_factory.mktemp("cache")


@pytest.fixture
def session(tmp_path, monkeypatch, cache_dir):
    """Data, spec and a session: the most suspicious row relabelled, an exclusion, a confirm, a defer, a
    note-only row and an id the data does not have."""
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(cache_dir))
    X, y = load_breast_cancer(return_X_y=True)
    idx = np.sort(np.random.default_rng(8).choice(len(y), size=120, replace=False))
    frame = pd.DataFrame(X[idx][:, :8], columns=[f"m{i}" for i in range(8)])
    frame.insert(3, "sample", [f"S-{i:03d}" for i in range(len(idx))])
    frame["grade"] = np.where(y[idx] == 1, "benign", "malignant")
    data = tmp_path / "samples.parquet"
    frame.to_parquet(data, index=False)
    spec = spec_from_text(SPEC)
    rows = run_scan(data, spec).findings.rows  # also warms the cache the exports read
    first = rows.loc[rows["rank"] == 1].iloc[0]
    top, new = str(first["id"]), ("malignant" if first["label"] == "benign" else "benign")
    assert top not in ("S-010", "S-011", "S-012", "S-013")
    db = tmp_path / "samples.holdfast.db"
    with Journal.create(
        db,
        fingerprint=fingerprint_file(data),
        data_path=data.absolute(),
        spec_text=spec.to_toml(),
        label_column="grade",
        id_column="sample",
    ) as j:
        j.record(top, "relabel", new, "lab recheck")
        j.record("S-010", "exclude", note="duplicate sample")
        j.record("S-011", "confirm")
        j.record("S-012", "defer")
        j.set_note("S-013", "look again")
        j.record("S-999", "exclude")  # an id the data does not have
    decided = {top: "relabel", "S-010": "exclude", "S-011": "confirm", "S-012": "defer", "S-013": "clear"}
    order = sorted(decided, key=lambda rid: int(rid[2:]))  # input order, then ids not in the data
    return {
        "data": data,
        "frame": frame,
        "db": db,
        "tmp": tmp_path,
        "top": top,
        "new": new,
        "rows": rows,
        "ids": [*order, "S-999"],
        "decisions": [*(decided[r] for r in order), "exclude"],
    }


def _one_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    return lines[0]


def test_export_all_three(session, capsys):
    t = session["tmp"]
    out = (t / "decisions.parquet", t / "clean.csv", t / "report.md")
    rc = main(
        ["export", str(session["db"]), "--to", str(out[0]), "--cleaned", str(out[1]), "--report", str(out[2])]
    )
    captured = capsys.readouterr()
    assert rc == 0
    assert [line for line in captured.out.splitlines() if line.startswith("wrote")] == [
        f"wrote {p}" for p in out
    ]
    # the stale id is named on stderr, not dropped
    assert "S-999" in captured.err and "not in" in captured.err

    frame = session["frame"]
    decisions = pd.read_parquet(out[0])
    assert list(decisions["id"]) == session["ids"]
    assert list(decisions["decision"]) == session["decisions"]
    grade = dict(zip(frame["sample"], frame["grade"], strict=True))
    assert list(decisions["old_label"][:5]) == [grade[i] for i in session["ids"][:5]]
    assert pd.isna(decisions["old_label"].iloc[5])
    # scores and flags are those of the scan of the session's data and spec
    rows = session["rows"].set_index("id")
    for rec in decisions.iloc[:5].itertuples():
        assert rec.score == pytest.approx(rows.loc[rec.id, "score"])
        assert ("" if pd.isna(rec.flag_names) else rec.flag_names) == rows.loc[rec.id, "flag_names"]
    assert "loo_miss" in decisions.set_index("id").loc[session["top"], "flag_names"]

    # cleaned set = the same edit done with pandas: relabel the top row, drop S-010, columns and order kept
    expected = frame.copy()
    expected.loc[expected["sample"] == session["top"], "grade"] = session["new"]
    expected = expected[expected["sample"] != "S-010"].reset_index(drop=True)
    cleaned = pd.read_csv(out[1])
    assert list(cleaned.columns) == list(frame.columns)
    pd.testing.assert_frame_equal(cleaned, expected, check_exact=False, rtol=1e-12)

    report = out[2].read_text(encoding="utf-8")
    assert "## What-if: the decisions applied and the model refitted" in report
    assert "1 rows relabelled, 1 excluded" in report
    assert (t / "report_files" / "margin.png").is_file() and (t / "report_files" / "score.png").is_file()


def test_existing_output_needs_force(session, capsys):
    target = session["tmp"] / "d.csv"
    target.write_text("keep me\n")
    rc = main(["export", str(session["db"]), "--to", str(target)])
    line = _one_line(capsys.readouterr().err)
    assert rc == 2 and str(target) in line and "--force" in line
    assert target.read_text() == "keep me\n"
    assert main(["export", str(session["db"]), "--to", str(target), "--force"]) == 0
    assert pd.read_csv(target)["id"].tolist() == session["ids"]


@pytest.mark.parametrize(
    "mistake", ["missing session", "not a journal", "data moved", "nothing asked", "bad suffix"]
)
def test_user_mistakes_are_one_line(session, capsys, mistake):
    t = session["tmp"]
    db = session["db"]
    args = ["--to", str(t / "d.parquet")]
    named = str(db)
    if mistake == "missing session":
        db = named = str(t / "nope.db")
    elif mistake == "not a journal":
        db = named = str(session["data"])
    elif mistake == "data moved":
        moved = t / "elsewhere.parquet"
        session["data"].rename(moved)
        named = str(session["data"].absolute())
    elif mistake == "nothing asked":
        args = []
    else:
        args = ["--to", str(t / "d.xlsx")]
        named = "d.xlsx"
    rc = main(["export", str(db), *args])
    line = _one_line(capsys.readouterr().err)
    assert rc == 2 and line.startswith("holdfast: error: ") and named in line
    assert not (t / "d.parquet").exists()


def test_changed_data_warns_and_matches_by_id(session, capsys):
    # rows shuffled: the fingerprint changes, decisions still land on the same ids
    frame = session["frame"].sample(frac=1.0, random_state=3).reset_index(drop=True)
    frame.to_parquet(session["data"], index=False)
    out = session["tmp"] / "clean.parquet"
    assert main(["export", str(session["db"]), "--cleaned", str(out)]) == 0
    err = capsys.readouterr().err
    assert "changed since session" in err
    cleaned = pd.read_parquet(out)
    assert "S-010" not in set(cleaned["sample"]) and len(cleaned) == len(frame) - 1
    assert list(cleaned["sample"]) == [s for s in frame["sample"] if s != "S-010"]  # the new order is kept
    old = session["frame"].set_index("sample")["grade"]
    assert cleaned.set_index("sample").loc[session["top"], "grade"] == session["new"] != old[session["top"]]


def _run(args: list[str]) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, PYTHONPATH=str(APP))  # HOLDFAST_CACHE_DIR set by the session fixture
    return subprocess.run(
        [sys.executable, "-m", "holdfast.cli", *args], capture_output=True, text=True, env=env, timeout=300
    )


def test_subprocess_export_and_missing_session(session):
    t = session["tmp"]
    out = t / "sub.csv"
    done = _run(["export", str(session["db"]), "--to", str(out)])
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().splitlines()[-1] == f"wrote {out}"
    assert pd.read_csv(out)["decision"].tolist() == session["decisions"]
    missing = t / "missing.db"
    done = _run(["export", str(missing), "--to", str(t / "x.csv")])
    assert done.returncode == 2
    assert _one_line(done.stderr) == f"holdfast: error: {missing}: no such session file"
    assert done.stdout == "" and not (t / "x.csv").exists()


def test_report_without_whatif_when_the_decisions_leave_one_class(session, capsys):
    frame = session["frame"]
    with Journal.open(session["db"]) as j:
        j.record_many(
            [(s, "exclude", None, None) for s in frame.loc[frame["grade"] == "malignant", "sample"]]
        )
    out = session["tmp"] / "r.md"
    assert main(["export", str(session["db"]), "--report", str(out)]) == 0
    err = capsys.readouterr().err
    assert "what-if refit skipped" in err and "one class only" in err
    text = out.read_text(encoding="utf-8")
    assert "## What-if" not in text and "## Decisions taken" in text


def test_warnings_show_ids_literally(capsys):
    """Warnings name ids from the data: a terminal escape in one is printed as visible characters."""
    from holdfast.output.export import _stderr_warning

    _stderr_warning("1 decision names an id not in the data: \x1b[2Jgone\nnext")
    err = capsys.readouterr().err
    assert "\x1b" not in err and "\\x1b[2Jgone\\nnext" in err and err.count("\n") == 1


def test_report_reuses_the_what_if_of_the_same_decisions(session, monkeypatch):
    """The inspector's what-if, then ``export --report``: the report's what-if comes from the cache."""
    import holdfast.learners.svm as svm_mod
    from holdfast.review.whatif import what_if

    scan = run_scan(session["data"], spec_from_text(SPEC))
    with Journal.open(session["db"]) as journal:
        shown = what_if(scan, journal.current())
    refits = {"n": 0}
    real = svm_mod.SVMRefitProblem.refit_without

    def counted(problem, row):
        refits["n"] += 1
        return real(problem, row)

    monkeypatch.setattr(svm_mod.SVMRefitProblem, "refit_without", counted)
    report = session["tmp"] / "again.md"
    assert main(["export", str(session["db"]), "--report", str(report)]) == 0
    assert refits["n"] == 0
    text = report.read_text(encoding="utf-8")
    assert "self-fulfilling" in text and "held-out" in text
    # the caution names this comparison's LOO counts ("->" escaped for Markdown)
    assert f"LOO errors {shown.before['loo_errors']} -\\> {shown.after['loo_errors']}" in text
