"""Exact leave-one-out over the support rows, with flip counts.

A row outside the support set leaves the fitted model unchanged when removed, so its LOO prediction is
its training prediction and its flip count is 0. Each support row gets one refit without it
(Vapnik 1995, *The Nature of Statistical Learning Theory*: hence LOO errors <= number of support rows).

Families for which that shortcut does not hold for the other rows (k-NN: a training row is its own
nearest neighbour; logistic regression: every row has some weight) hand over LOO results they computed
themselves (``FittedModel.direct_loo``); the engine starts from those and overwrites the refitted rows.
"""

from __future__ import annotations

import hashlib
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np

from holdfast.engine.cache import RefitStore
from holdfast.engine.parallel import run_refits
from holdfast.learners.base import ESSENTIAL_CHANGE, FittedModel, RefitOutcome, RefitProblem

#: progress(done, total, eta_seconds or None)
Progress = Callable[[int, int, float | None], None]
#: on_update(refits done so far, keyed by training row): called before the first refit and after each
#: batch of results, on the thread that runs the LOO; the mapping is live (read it, do not keep it)
Update = Callable[[Mapping[int, RefitOutcome]], None]


@dataclass
class LooResult:
    """Exact LOO over the m training rows."""

    loo_code: np.ndarray
    flip_count: np.ndarray
    essential: np.ndarray
    max_change: np.ndarray
    flipped: dict[int, np.ndarray] = field(default_factory=dict)
    #: y * f_{-i}(x_i) per row: the LOO decision value signed by the label (training margin outside the
    #: refitted rows, whose removal leaves the model unchanged)
    loo_margin: np.ndarray | None = None
    #: per row: the LOO prediction and margin are exact (False where the learner approximated them)
    exact: np.ndarray | None = None
    refits: int = 0
    resumed: int = 0


def support_key(model: FittedModel) -> str:
    """Hash of the support set and training predictions: a cache of refits is valid only for the same fit."""
    h = hashlib.sha256()
    h.update(np.flatnonzero(model.support).astype(np.int64).tobytes())
    h.update(model.prediction.astype(np.int64).tobytes())
    h.update(repr(sorted((k, str(v)) for k, v in model.params.items())).encode())
    return h.hexdigest()[:16]


def exact_loo(
    model: FittedModel,
    problem: RefitProblem,
    *,
    jobs: int = 1,
    backend: str = "joblib",
    scheduler: str | None = None,
    store: RefitStore | None = None,
    progress: Progress | None = None,
    should_cancel: Callable[[], bool] | None = None,
    essential_tol: float = ESSENTIAL_CHANGE,
    priority: np.ndarray | None = None,
    on_update: Update | None = None,
) -> LooResult:
    """Exact LOO predictions, flip counts and essential flags for all training rows.

    Refits only ``model.loo_candidates()``, highest ``priority`` (one value per training row) first when
    given, else in row order; finished refits go to ``store`` as they arrive so an interrupted run
    resumes, and to ``on_update``. Raises :class:`holdfast.errors.Cancelled` when cancelled.
    """
    m = model.y.shape[0]
    candidates = model.loo_candidates()
    done: dict[int, RefitOutcome] = {}
    if store is not None:
        done = {r: o for r, o in store.load().items() if r < m}
    resumed = len(done)
    todo = np.array([r for r in candidates if int(r) not in done], dtype=np.int64)
    if priority is not None and len(todo):
        key = np.nan_to_num(np.asarray(priority, dtype=np.float64)[todo], nan=-np.inf)
        todo = todo[np.argsort(-key, kind="stable")]
    total = len(candidates)
    start = time.monotonic()

    def on_results(outcomes: list[RefitOutcome]) -> None:
        for o in outcomes:
            done[o.row] = o
        if store is not None:
            store.add(outcomes)
        if progress is not None:
            new = len(done) - resumed
            elapsed = time.monotonic() - start
            left = total - len(done)
            eta = elapsed / new * left if new > 0 else None
            progress(len(done), total, eta)
        if on_update is not None:
            on_update(done)

    if progress is not None:
        progress(len(done), total, None)
    if on_update is not None:
        on_update(done)
    run_refits(
        problem,
        todo,
        jobs=jobs,
        backend=backend,
        scheduler=scheduler,
        on_results=on_results,
        should_cancel=should_cancel,
    )

    loo, _ = assemble_loo(model, done, essential_tol=essential_tol)
    loo.refits = total - resumed
    loo.resumed = resumed
    return loo


def assemble_loo(
    model: FittedModel, done: Mapping[int, RefitOutcome], *, essential_tol: float = ESSENTIAL_CHANGE
) -> tuple[LooResult, np.ndarray]:
    """The LOO result from the refits in ``done``, and the mask of candidates still without a refit.

    Rows outside ``model.loo_candidates()`` take their training values (exact). A pending candidate keeps
    its training prediction and margin, flip count 0 and not essential: placeholders, to be masked by
    the caller (the provisional findings show them as missing).
    """
    m = model.y.shape[0]
    direct = model.direct_loo
    max_change = np.full(m, np.nan)
    pending = np.zeros(m, dtype=bool)
    if direct is None:
        loo_code = model.prediction.copy()
        flip_count = np.zeros(m, dtype=np.int64)
        essential = np.zeros(m, dtype=bool)
        loo_margin = np.asarray(model.margin, dtype=np.float64).copy()
        exact = np.full(m, bool(model.loo_exact))
        flipped: dict[int, np.ndarray] = {}
    else:  # the learner's own LOO results, overwritten below where a refit exists
        loo_code = np.asarray(direct.code, dtype=np.int64).copy()
        flip_count = np.asarray(direct.flip_count, dtype=np.int64).copy()
        essential = np.asarray(direct.essential, dtype=bool).copy()
        loo_margin = np.asarray(direct.margin, dtype=np.float64).copy()
        exact = np.asarray(direct.exact, dtype=bool).copy()
        flipped = {int(r): v for r, v in direct.flipped.items()}
    for r in model.loo_candidates():
        o = done.get(int(r))
        if o is None:
            pending[r] = True
            continue
        exact[r] = True
        flipped.pop(int(r), None)
        loo_code[r] = o.loo_code
        loo_margin[r] = o.loo_margin
        flip_count[r] = len(o.flipped)
        max_change[r] = o.max_change
        essential[r] = o.max_change > essential_tol or len(o.flipped) > 0 or o.loo_code != model.prediction[r]
        if len(o.flipped):
            flipped[int(r)] = o.flipped
    result = LooResult(
        loo_code=loo_code,
        flip_count=flip_count,
        essential=essential,
        max_change=max_change,
        flipped=flipped,
        loo_margin=loo_margin,
        exact=exact,
    )
    return result, pending
