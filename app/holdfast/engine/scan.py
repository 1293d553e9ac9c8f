"""The scan: data set + spec -> prepared matrix -> fit -> support rows -> exact LOO -> findings.

Both faces call :func:`run_scan` (the CLI's ``scan`` and the inspector's background worker), so their
results are the same.
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from holdfast import __version__
from holdfast.atomic import atomic_write_parquet
from holdfast.data.load import fingerprint_file, read_table
from holdfast.data.prepare import Prepared, prepare
from holdfast.data.spec import Spec
from holdfast.engine.build import build_findings, full_fit_priority, quick_evidence
from holdfast.engine.cache import RefitStore, cache_dir
from holdfast.engine.findings import Findings
from holdfast.engine.loo import LooResult, Progress, assemble_loo, exact_loo, support_key
from holdfast.learners import make_learner
from holdfast.learners.base import FittedModel, RefitOutcome
from holdfast.learners.smo import compiled_code_cached


@dataclass
class Scan:
    """A finished scan: the findings plus what the faces need to explain a row."""

    findings: Findings
    prepared: Prepared
    data_path: Path | None
    spec: Spec
    #: input row position -> input row positions whose prediction flips when that row is left out
    flips: dict[int, np.ndarray] = field(default_factory=dict)
    model: FittedModel | None = None
    from_cache: bool = False


#: on_partial(provisional findings): see :func:`analyse`
Partial = Callable[[Findings], None]
#: shortest time between two provisional findings (seconds) ...
PARTIAL_INTERVAL = 1.0
#: ... and at most about this share of the scan's time goes into building them (the interval grows with
#: the time one build takes, so large data sets do not spend their LOO time on provisional frames; the
#: first build, which also computes the estimates that need no refit, does not count)
PARTIAL_SHARE = 0.2


class _PartialFeed:
    """Builds provisional findings from the refits done so far and hands them to ``on_partial``:
    at once, then at most every ``PARTIAL_INTERVAL`` seconds, and once when every refit is in."""

    def __init__(
        self,
        build: Callable[[dict[int, RefitOutcome]], Findings],
        total: int,
        on_partial: Partial,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.build = build
        self.total = total
        self.on_partial = on_partial
        self.clock = clock
        self.last: float | None = None
        self.cost = 0.0
        self.sent_done = -1

    def __call__(self, done: Mapping[int, RefitOutcome]) -> None:
        now = self.clock()
        n = len(done)
        complete = n >= self.total
        if self.last is not None and not complete:
            wait = max(PARTIAL_INTERVAL, self.cost / PARTIAL_SHARE)
            if now - self.last < wait:
                return
        if complete and self.sent_done == n:
            return
        first = self.last is None
        findings = self.build(dict(done))
        self.sent_done = n
        self.last = self.clock()
        if not first:
            self.cost = self.last - now
        self.on_partial(findings)


#: From this many training rows on, the scan says on the progress stream when it fits and gathers the
#: neighbour evidence (each takes a minute or more at 100,000 rows, before the refits' progress bar).
NOTE_MIN_ROWS = 10_000


def _note(progress: Progress | None, text: str) -> None:
    note = getattr(progress, "note", None)
    if callable(note):
        note(text)


def analyse(
    prepared: Prepared,
    spec: Spec,
    *,
    progress: Progress | None = None,
    should_cancel: Callable[[], bool] | None = None,
    store: RefitStore | None = None,
    store_factory: Callable[[str], RefitStore] | None = None,
    on_partial: Partial | None = None,
) -> tuple[Findings, dict[int, np.ndarray], FittedModel]:
    """Fit, run exact LOO over the support rows, gather the evidence; return findings and flips.

    The support rows are refitted most suspicious first by their full-fit evidence
    (:func:`holdfast.engine.build.full_fit_priority`). ``on_partial`` receives provisional findings
    (``summary["provisional"]`` True, ``loo_done``/``loo_total``, an extra ``loo_pending`` column; the
    LOO columns of pending rows are missing and their score uses the full-fit margin): first as soon as
    the fit and the evidence that needs no refit are ready (before any refit), then as refits arrive
    (throttled, about once a second at most) and once when all are in. Each call gets a new object; it
    runs on the thread running the LOO, so it should return quickly. The returned findings do not depend
    on ``on_partial``.
    """
    start = time.monotonic()
    train_idx = prepared.train_index
    X_train = prepared.X[train_idx]
    y_train = prepared.y[train_idx]
    learner = make_learner(spec.learner)
    long = len(train_idx) >= NOTE_MIN_ROWS
    family = spec.learner.get("family", "svm")
    if family == "svm" and not compiled_code_cached():
        _note(progress, "first scan after installing: compiling the solver once (about 10-60 s)")
    if long:
        _note(progress, f"fitting the {family} model on {len(train_idx):,} training rows")
    model = learner.fit(X_train, y_train)
    if long:
        _note(
            progress,
            f"fitted in {time.monotonic() - start:.0f} s; neighbour evidence, then "
            f"{len(model.loo_candidates()):,} refits",
        )
    held_idx = np.flatnonzero(~prepared.train)
    held_decision = learner.decision(prepared.X[held_idx]) if len(held_idx) else None
    held_pred = learner.predict(prepared.X[held_idx]) if len(held_idx) else np.empty(0, dtype=np.int64)
    evidence = quick_evidence(prepared, spec.insight.k, n_jobs=spec.run.jobs)
    static: dict[str, Any] = {}

    def build(done: dict[int, RefitOutcome]) -> Findings:
        partial, pending = assemble_loo(model, done)
        return build_findings(
            prepared,
            spec,
            model,
            partial,
            held_pred=held_pred,
            held_decision=held_decision,
            seconds=time.monotonic() - start,
            evidence=evidence,
            pending=pending,
            static=static,
        )

    feed = None
    if on_partial is not None:
        feed = _PartialFeed(build, len(model.loo_candidates()), on_partial)
    if store is None and store_factory is not None:
        store = store_factory(support_key(model))
    try:
        loo: LooResult = exact_loo(
            model,
            learner.refit_problem(),
            jobs=spec.run.jobs,
            backend=spec.run.backend,
            scheduler=spec.run.scheduler,
            store=store,
            progress=progress,
            should_cancel=should_cancel,
            priority=full_fit_priority(model, evidence, train_idx),
            on_update=feed,
        )
    finally:
        if store is not None:
            store.close()
    findings = build_findings(
        prepared,
        spec,
        model,
        loo,
        held_pred=held_pred,
        held_decision=held_decision,
        seconds=time.monotonic() - start,
        evidence=evidence,
        static=static,
    )
    flips = {int(train_idx[r]): train_idx[v] for r, v in loo.flipped.items()}
    return findings, flips, model


def _flips_frame(flips: dict[int, np.ndarray]) -> pd.DataFrame:
    rows = [(r, int(v)) for r, vs in flips.items() for v in vs]
    return pd.DataFrame(rows, columns=["row", "flipped_row"], dtype="int64")


def _read_cached(folder: Path, prepared: Prepared, spec: Spec, data_path: Path) -> Scan | None:
    try:
        rows = pd.read_parquet(folder / "rows.parquet")
        summary = json.loads((folder / "summary.json").read_text())
        flips_df = pd.read_parquet(folder / "flips.parquet")
    except (OSError, ValueError):
        return None
    if len(rows) != len(prepared.frame) or summary.get("holdfast_version") != __version__:
        return None
    flips: dict[int, np.ndarray] = {
        int(r): g["flipped_row"].to_numpy() for r, g in flips_df.groupby("row", sort=False)
    }
    summary["data"]["path"] = str(data_path)
    return Scan(
        findings=Findings(rows=rows, summary=summary, classes=[str(c) for c in prepared.classes]),
        prepared=prepared,
        data_path=data_path,
        spec=spec,
        flips=flips,
        from_cache=True,
    )


def run_scan(
    data_path: str | Path,
    spec: Spec,
    *,
    progress: Progress | None = None,
    should_cancel: Callable[[], bool] | None = None,
    use_cache: bool | None = None,
    cache_root: Path | None = None,
    frame: pd.DataFrame | None = None,
    on_partial: Partial | None = None,
) -> Scan:
    """Scan a data file with a spec. Reuses a finished scan of the same data + spec from the cache and
    resumes an interrupted one (refits kept from a cancelled scan are in the first provisional findings).
    ``frame`` may pass the already-read table; ``on_partial`` receives provisional findings during the
    LOO (see :func:`analyse`; not called when the finished scan comes from the cache)."""
    path = Path(data_path)
    if frame is None:
        frame = read_table(path)
    data_fp = fingerprint_file(path)
    prepared = prepare(frame, spec, source=str(path))
    cache = spec.run.cache if use_cache is None else use_cache
    folder = cache_dir(data_fp, spec.fingerprint(), cache_root) if cache else None
    if folder is not None and (folder / "summary.json").exists():
        cached = _read_cached(folder, prepared, spec, path)
        if cached is not None:
            if progress is not None:
                d = int(cached.findings.summary.get("d", 0))
                progress(d, d, 0.0)
            return cached
    factory = (lambda key: RefitStore(folder / "refits.sqlite", key)) if folder is not None else None
    data_info = {"path": str(path), "fingerprint": data_fp}
    forward = None
    if on_partial is not None:
        sink = on_partial

        def forward(partial: Findings) -> None:
            partial.summary["data"].update(data_info)
            sink(partial)

    findings, flips, model = analyse(
        prepared,
        spec,
        progress=progress,
        should_cancel=should_cancel,
        store_factory=factory,
        on_partial=forward,
    )
    findings.summary["data"].update(data_info)
    if folder is not None:
        atomic_write_parquet(_flips_frame(flips), folder / "flips.parquet")
        findings.write(folder)
    return Scan(findings=findings, prepared=prepared, data_path=path, spec=spec, flips=flips, model=model)
