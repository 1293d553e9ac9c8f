"""Provisional findings during a scan (``on_partial``): rows before the LOO finishes, the LOO columns
filled in as refits arrive, refits most suspicious first, and a final result that does not depend on it.

Data: scikit-learn's bundled breast-cancer set (Wolberg, Street & Mangasarian 1995, "Breast Cancer
Wisconsin (Diagnostic)", UCI), 280 rows with 11 labels flipped here; a held-out split of every 7th row.
The reference for the finished LOO columns is the scan without the callback on the same frame; that
scan is itself checked against scikit-learn's ``LeaveOneOut`` in ``tests/test_loo_reference.py``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer

import holdfast.engine.scan as scan_mod
import holdfast.learners.svm as svm_mod
from holdfast.data.spec import spec_from_text
from holdfast.engine.findings import ROW_COLUMNS, Findings
from holdfast.engine.scan import run_scan
from holdfast.errors import Cancelled

# one job: refits in this process, where the tests count them (forked workers would count their own)
SPEC = '[data]\nlabel = "dx"\nid = "rid"\nsplit = "held"\n[learner]\nkernel = "rbf"\nC = 1.0\n'
SPEC += "[run]\njobs = 1\n"
LOO_COLUMNS = ("loo_prediction", "loo_miss", "loo_margin", "flip_count", "essential")


@pytest.fixture(scope="module")
def data(tmp_path_factory) -> tuple[pd.DataFrame, object]:
    X, y = load_breast_cancer(return_X_y=True)
    idx = np.arange(0, 569)[::2][:280]
    frame = pd.DataFrame(X[idx][:, :8], columns=[f"f{i}" for i in range(8)])
    frame.insert(0, "rid", [f"r{i}" for i in range(len(idx))])
    labels = y[idx].copy()
    flipped = np.arange(5, 280, 25)
    labels[flipped] = 1 - labels[flipped]
    frame["dx"] = np.where(labels == 1, "benign", "malignant")
    frame["held"] = np.arange(len(idx)) % 7 == 6
    path = tmp_path_factory.mktemp("partial") / "bc.parquet"
    frame.to_parquet(path, index=False)
    return frame, path


class RefitCounter:
    """Counts refits by wrapping the SVM refit problem's ``refit_without`` (in-process, one job)."""

    def __init__(self, monkeypatch: pytest.MonkeyPatch) -> None:
        self.n = 0
        real = svm_mod.SVMRefitProblem.refit_without

        def counted(problem, row):
            self.n += 1
            return real(problem, row)

        monkeypatch.setattr(svm_mod.SVMRefitProblem, "refit_without", counted)


def _scan(path, frame, tmp_path, **kw):
    return run_scan(path, spec_from_text(SPEC), frame=frame, cache_root=tmp_path, use_cache=True, **kw)


def test_partial_findings_arrive_before_the_loo_and_fill_in(data, tmp_path, monkeypatch):
    frame, path = data
    counter = RefitCounter(monkeypatch)
    monkeypatch.setattr(scan_mod, "PARTIAL_INTERVAL", 0.0)  # every batch: the test sees each step
    monkeypatch.setattr(scan_mod, "PARTIAL_SHARE", 1e9)
    seen: list[tuple[int, Findings]] = []
    final = _scan(path, frame, tmp_path / "a", on_partial=lambda f: seen.append((counter.n, f)))

    assert len(seen) >= 3
    refits_before_first, first = seen[0]
    assert refits_before_first == 0  # the first provisional findings come before any refit
    s = first.summary
    total = int(final.findings.summary["d"])
    assert s["provisional"] is True and s["loo_done"] == 0 and s["loo_total"] == total
    rows = first.rows
    assert set(ROW_COLUMNS) <= set(rows.columns) and rows["loo_pending"].dtype == bool
    pending = rows["loo_pending"].to_numpy()
    # pending = exactly the support rows (nothing refitted yet), never a held-out row
    assert np.array_equal(pending, final.findings.rows["support"].to_numpy())
    assert not (pending & rows["held_out"].to_numpy()).any()
    done_rows = ~pending & ~rows["held_out"].to_numpy()
    for col in LOO_COLUMNS:
        assert rows.loc[pending, col].isna().all(), col
        assert rows.loc[done_rows, col].notna().all(), col
    # non-support rows: their LOO values are exact already (the model does not change without them)
    for col in ("loo_margin", "loo_prediction", "flip_count"):
        a = rows.loc[done_rows, col].to_numpy(dtype=object)
        b = final.findings.rows.loc[done_rows, col].to_numpy(dtype=object)
        assert all(x == y for x, y in zip(a, b, strict=True)), col
    # the provisional score is there for every training row and ranks them all
    train = ~rows["held_out"].to_numpy()
    assert rows.loc[train, "score"].notna().all()
    assert sorted(rows.loc[train, "rank"]) == list(range(1, int(train.sum()) + 1))

    # loo_done grows, each call is a new object, the last one has every refit
    done = [f.summary["loo_done"] for _, f in seen]
    assert done == sorted(done) and done[-1] == total
    assert len({id(f) for _, f in seen}) == len(seen)
    assert not seen[-1][1].rows["loo_pending"].any()
    assert int(rows["loo_pending"].sum()) == total  # the first object was not changed afterwards

    # the final result: no provisional traces
    assert "loo_pending" not in final.findings.rows.columns
    assert "provisional" not in final.findings.summary and "loo_done" not in final.findings.summary


def test_refits_run_most_suspicious_first(data, tmp_path, monkeypatch):
    frame, path = data
    order: list[int] = []
    real = svm_mod.SVMRefitProblem.refit_without

    def recorded(problem, row):
        order.append(int(row))
        return real(problem, row)

    monkeypatch.setattr(svm_mod.SVMRefitProblem, "refit_without", recorded)
    firsts: list[Findings] = []
    _scan(path, frame, tmp_path / "b", on_partial=lambda f: firsts.append(f) if not firsts else None)
    first = firsts[0].rows
    train = first[~first["held_out"]].reset_index(drop=True)  # training-row positions, as the refits
    support = train.index[train["support"].to_numpy()]
    assert sorted(order) == sorted(support.tolist())
    provisional = train.loc[order, "score"].to_numpy()
    # the provisional score of pending rows is the full-fit evidence: refits follow it, highest first
    assert np.all(np.diff(provisional) <= 1e-12)


def test_final_findings_equal_a_scan_without_the_callback(data, tmp_path, monkeypatch):
    frame, path = data
    monkeypatch.setattr(scan_mod, "PARTIAL_INTERVAL", 0.0)
    a = run_scan(path, spec_from_text(SPEC), frame=frame, use_cache=False)
    b = run_scan(path, spec_from_text(SPEC), frame=frame, use_cache=False, on_partial=lambda f: None)
    pd.testing.assert_frame_equal(a.findings.rows, b.findings.rows)
    sa, sb = dict(a.findings.summary), dict(b.findings.summary)
    for s in (sa, sb):
        s.pop("seconds")
    assert sa == sb


def test_cancel_keeps_partials_and_refits_then_resumes(data, tmp_path, monkeypatch):
    frame, path = data
    monkeypatch.setattr(scan_mod, "PARTIAL_INTERVAL", 0.0)
    monkeypatch.setattr(scan_mod, "PARTIAL_SHARE", 1e9)
    seen: list[Findings] = []
    calls = {"n": 0}

    def cancel_after_twenty() -> bool:
        calls["n"] += 1
        return calls["n"] > 20

    with pytest.raises(Cancelled):
        _scan(path, frame, tmp_path, on_partial=seen.append, should_cancel=cancel_after_twenty)
    last = seen[-1]
    kept = last.summary["loo_done"]
    assert 0 < kept < last.summary["loo_total"]
    assert int(last.rows["loo_pending"].sum()) == last.summary["loo_total"] - kept
    counter = RefitCounter(monkeypatch)
    resumed: list[tuple[int, Findings]] = []
    final = _scan(path, frame, tmp_path, on_partial=lambda f: resumed.append((counter.n, f)))
    # the rescan starts from the refits kept by the store: its first provisional findings have them
    assert resumed[0][0] == 0 and resumed[0][1].summary["loo_done"] >= kept
    assert counter.n == final.findings.summary["d"] - resumed[0][1].summary["loo_done"]
    assert final.findings.summary["resumed_refits"] == resumed[0][1].summary["loo_done"]


def test_partial_feed_is_throttled_and_sends_the_last_state():
    """A fake clock: 100 refits arrive 0.05 s apart; builds take 0.01 s (then 0.5 s: the interval grows,
    counting from the second build: the first also computes what needs no refit)."""
    now = {"t": 0.0}
    build_cost = {"s": 0.01}
    sent: list[int] = []

    def build(done):
        now["t"] += build_cost["s"]
        return Findings(rows=pd.DataFrame(), summary={"loo_done": len(done)})

    feed = scan_mod._PartialFeed(
        build, 100, lambda f: sent.append(f.summary["loo_done"]), clock=lambda: now["t"]
    )
    done: dict[int, object] = {}
    feed(done)  # before any refit
    for r in range(100):
        now["t"] += 0.05
        done[r] = object()
        feed(done)
    assert sent[0] == 0 and sent[-1] == 100
    gaps = np.diff(sent[:-1])
    # at most about once a second: 0.05 s per refit -> at least 19 refits between two updates
    assert len(sent) <= 2 + 100 * 0.05 / scan_mod.PARTIAL_INTERVAL and (gaps >= 19).all()
    feed(done)
    assert sent.count(100) == 1  # the complete state is sent once

    # a build that costs 0.5 s: the interval becomes 0.5 / PARTIAL_SHARE = 5 s
    now["t"], build_cost["s"] = 0.0, 0.5
    sent.clear()
    feed = scan_mod._PartialFeed(
        build, 1000, lambda f: sent.append(f.summary["loo_done"]), clock=lambda: now["t"]
    )
    done = {}
    feed(done)
    for r in range(400):
        now["t"] += 0.05
        done[r] = object()
        feed(done)
    assert len(sent) <= 1 + 400 * 0.05 / (0.5 / scan_mod.PARTIAL_SHARE) + 1
    assert len(sent) >= 3


def test_long_scans_say_when_they_fit_before_the_refit_bar(data, tmp_path, monkeypatch):
    """Above NOTE_MIN_ROWS the fit and the neighbour evidence (minutes at 100,000 rows) are announced on
    the progress stream before the refits' bar; below it nothing is added."""
    import io

    from holdfast.output.progress import ProgressBar

    frame, path = data
    monkeypatch.setattr(scan_mod, "NOTE_MIN_ROWS", 100)
    stream = io.StringIO()
    scan = _scan(path, frame, tmp_path, progress=ProgressBar(stream=stream, tty=False))
    lines = stream.getvalue().splitlines()
    m, d = int(scan.findings.summary["m"]), int(scan.findings.summary["d"])
    assert lines[0] == f"fitting the svm model on {m:,} training rows"
    assert lines[1].startswith("fitted in ") and lines[1].endswith(f"neighbour evidence, then {d:,} refits")
    assert lines[2].startswith("refits: ")
    monkeypatch.setattr(scan_mod, "NOTE_MIN_ROWS", 10**9)
    stream = io.StringIO()
    _scan(path, frame, tmp_path / "again", progress=ProgressBar(stream=stream, tty=False))
    assert not any(line.startswith("fitting") for line in stream.getvalue().splitlines())


def test_the_first_scan_after_installing_says_it_compiles(data, tmp_path, monkeypatch):
    """Without the solver's compiled code in numba's cache (the first run after an install) the scan says
    why it pauses; with it (every scan in this test session has compiled it by now), nothing is added."""
    import io

    from holdfast.learners import smo
    from holdfast.output.progress import ProgressBar

    frame, path = data
    _scan(path, frame, tmp_path / "warm")
    assert smo.compiled_code_cached()  # numba's cache is where compiled_code_cached looks
    stream = io.StringIO()
    _scan(path, frame, tmp_path / "again", progress=ProgressBar(stream=stream, tty=False))
    assert not any("compiling" in line for line in stream.getvalue().splitlines())
    monkeypatch.setattr(scan_mod, "compiled_code_cached", lambda: False)
    stream = io.StringIO()
    _scan(path, frame, tmp_path / "cold", progress=ProgressBar(stream=stream, tty=False))
    assert stream.getvalue().splitlines()[0].startswith("first scan after installing: compiling the solver")
