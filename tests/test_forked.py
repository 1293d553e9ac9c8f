"""Refits on forked worker processes (engine.forked): the same outcomes as refits in turn, every row exactly
once even when a worker dies, and no worker left behind after a cancel.

The reference for the LOO predictions is scikit-learn's ``LeaveOneOut`` with ``cross_val_predict`` on the
breast cancer data (Wolberg, Street & Mangasarian 1995, bundled with scikit-learn); flip counts are
compared with the refits done in turn in this process.
"""

from __future__ import annotations

import multiprocessing
import os

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from holdfast.engine import forked, parallel
from holdfast.engine.loo import exact_loo
from holdfast.errors import Cancelled
from holdfast.learners.base import RefitOutcome
from holdfast.learners.svm import SVMLearner

pytestmark = pytest.mark.skipif(not forked.available(), reason="workers are forked on Linux only")


def _forked_children() -> list[multiprocessing.process.BaseProcess]:
    """Forked worker processes still alive (joblib's own process pool from other tests aside)."""
    return [p for p in multiprocessing.active_children() if type(p).__name__ == "ForkProcess"]


class _WhoRefits:
    """A problem whose outcome records the process that computed it (``loo_margin`` = its pid)."""

    def __init__(self, die_in_worker: int | None = None) -> None:
        self.parent = os.getpid()
        self.die_in_worker = die_in_worker

    def refit_without(self, row: int) -> RefitOutcome:
        if row == self.die_in_worker and os.getpid() != self.parent:
            os._exit(9)  # as if the system killed the worker (out of memory)
        return RefitOutcome(row, row % 2, np.empty(0, dtype=np.int64), 0.0, float(os.getpid()))


def test_refits_run_on_other_processes_and_every_row_comes_back_once():
    got: list[RefitOutcome] = []
    parallel.run_refits(_WhoRefits(), np.arange(200), jobs=2, on_results=got.extend)
    assert sorted(o.row for o in got) == list(range(200))
    pids = {int(o.loo_margin) for o in got}
    assert os.getpid() not in pids and 1 <= len(pids) <= 2
    assert not _forked_children()


def test_threads_backend_stays_in_this_process():
    got: list[RefitOutcome] = []
    parallel.run_refits(_WhoRefits(), np.arange(200), jobs=2, backend="threads", on_results=got.extend)
    assert {int(o.loo_margin) for o in got} == {os.getpid()}


def test_a_dead_worker_loses_no_refit():
    """A worker killed mid-run: the rows it and the pool left undone are refitted on threads here."""
    got: list[RefitOutcome] = []
    parallel.run_refits(_WhoRefits(die_in_worker=57), np.arange(300), jobs=2, on_results=got.extend)
    rows = sorted(o.row for o in got)
    assert rows == list(range(300))  # each row exactly once
    assert [int(o.loo_margin) for o in got if o.row == 57] == [os.getpid()]
    assert not _forked_children()


def test_cancel_ends_the_workers():
    got: list[RefitOutcome] = []
    with pytest.raises(Cancelled):
        parallel.run_refits(
            _WhoRefits(), np.arange(400), jobs=2, on_results=got.extend, should_cancel=lambda: bool(got)
        )
    assert 0 < len(got) < 400
    assert not _forked_children()


def test_too_few_refits_stay_on_threads():
    got: list[RefitOutcome] = []
    few = 2 * forked.MIN_REFITS_PER_WORKER - 1
    parallel.run_refits(_WhoRefits(), np.arange(few), jobs=2, on_results=got.extend)
    assert {int(o.loo_margin) for o in got} == {os.getpid()}


@pytest.mark.parametrize("kernel", ["rbf", "linear"])
def test_forked_loo_equals_leave_one_out_and_refits_in_turn(kernel, monkeypatch):
    X, y = load_breast_cancer(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    calls: list[int] = []
    real = forked.refit_on_workers

    def counted(*args, **kwargs):
        calls.append(1)
        return real(*args, **kwargs)

    monkeypatch.setattr(forked, "refit_on_workers", counted)
    learner = SVMLearner(kernel=kernel, C=1.0, gamma="scale")
    model = learner.fit(X, y)
    on_workers = exact_loo(model, learner.refit_problem(), jobs=2)
    assert calls, "the refits did not go to forked workers"
    in_turn = exact_loo(model, learner.refit_problem(), jobs=1)
    reference = cross_val_predict(SVC(kernel=kernel, C=1.0, gamma="scale"), X, y, cv=LeaveOneOut())
    assert np.array_equal(on_workers.loo_code, reference)
    assert np.array_equal(on_workers.loo_code, in_turn.loo_code)
    assert np.array_equal(on_workers.flip_count, in_turn.flip_count)
