"""What-if: apply the decisions (relabels, exclusions), refit, and compare before with after.

The decisions are applied to the original table (:func:`holdfast.review.decisions.apply_decisions`); the
result is
prepared with the same spec and analysed from scratch (fit + exact LOO over the new support rows), exactly
as a new scan of the cleaned data set would be. Rows are matched by id. A decision on a held-out row
changes the held-out data (its error and the test-set bound) but the row is never trained on.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from holdfast.atomic import atomic_write_bytes, atomic_write_parquet
from holdfast.data.prepare import prepare, row_ids
from holdfast.engine.cache import cache_dir
from holdfast.engine.findings import Findings, to_jsonable
from holdfast.review.decisions import apply_decisions, check_relabels, decisions_dict
from holdfast.review.events import Decision

if TYPE_CHECKING:
    from holdfast.engine.loo import Progress
    from holdfast.engine.scan import Scan

#: what the what-if screen and the report say beside the comparison (see :attr:`WhatIf.caution`)
WHATIF_CAUTION = (
    "The LOO error after the decisions is partly self-fulfilling: each relabelled row is now judged against "
    "the label the decision gave it, by models trained on the other edited labels. The held-out error "
    "(rows never trained on) is the honest check."
)
#: the what-if cache: after-findings of each set of decisions, in the scan's cache folder; the
#: ``WHATIF_KEEP`` most recently written or read are kept
WHATIF_PREFIX = "whatif-"
WHATIF_KEEP = 8

#: summary counts compared before/after: (summary key, label)
COUNTS: tuple[tuple[str, str], ...] = (
    ("m", "rows (training) m"),
    ("d", "support rows d"),
    ("bounded", "bounded"),
    ("free", "free"),
    ("training_errors", "training errors"),
    ("loo_errors", "LOO errors"),
)
#: bounds compared before/after, in this order (summary["bounds"] keys)
BOUND_KEYS: tuple[str, ...] = (
    "support_fraction",
    "loo_bound",
    "loo_error",
    "xi_alpha",
    "span",
    "compression",
    "test_set",
)
#: columns of :attr:`WhatIf.changed`
CHANGED_COLUMNS: tuple[str, ...] = (
    "id",
    "row",
    "label_before",
    "label_after",
    "status_before",
    "status_after",
    "decision",
    "support_before",
    "support_after",
    "loo_miss_before",
    "loo_miss_after",
    "prediction_before",
    "prediction_after",
    "held_out",
)


@dataclass
class WhatIf:
    """Before/after comparison of a refit with the decisions applied.

    ``comparison`` rows are (name, before, after); ``changed`` lists the rows whose label, support
    membership, LOO miss or prediction changed, or that were excluded (columns ``CHANGED_COLUMNS``;
    ``row`` is its 0-based position in the original data, as in rows.parquet).
    """

    before: dict[str, Any]
    after: dict[str, Any]
    comparison: list[tuple[str, Any, Any]]
    changed: pd.DataFrame
    excluded: int
    relabelled: int
    unmatched: list[str] = field(default_factory=list)
    held_out_decisions: int = 0
    notes: list[str] = field(default_factory=list)
    findings: Findings | None = None
    #: True when the after-findings came from the what-if cache (no refit)
    from_cache: bool = False

    @property
    def caution(self) -> str:
        """:data:`WHATIF_CAUTION`, with this comparison's LOO and held-out error counts."""
        loo = f"LOO errors {_fmt(self.before.get('loo_errors'))} -> {_fmt(self.after.get('loo_errors'))}"
        hb, ha = self.before.get("held_out"), self.after.get("held_out")
        if hb and ha:
            return f"{WHATIF_CAUTION} Here: {loo}; held-out errors {hb['errors']} -> {ha['errors']}."
        return (
            f"{WHATIF_CAUTION} Here: {loo}; this data set has no held-out rows (a split column in the spec, "
            f"data.split, sets some aside) so nothing checks the decisions independently."
        )

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict (``whatif.json``)."""
        return to_jsonable(
            {
                "relabelled": self.relabelled,
                "excluded": self.excluded,
                "unmatched": list(self.unmatched),
                "held_out_decisions": self.held_out_decisions,
                "comparison": [{"name": n, "before": b, "after": a} for n, b, a in self.comparison],
                "changed_rows": len(self.changed),
                "notes": list(self.notes),
                "before": self.before,
                "after": self.after,
            }
        )

    def text(self) -> str:
        """The comparison as a small table for the terminal."""
        lines = [f"what-if: {self.relabelled} relabelled, {self.excluded} excluded; refit with the same spec"]
        lines.append(f"{'':<22}{'before':>12}{'after':>12}")
        for name, b, a in self.comparison:
            lines.append(f"{name:<22}{_fmt(b):>12}{_fmt(a):>12}")
        lines.append(f"rows whose status changed: {len(self.changed)}")
        lines.extend(self.notes)
        lines.append(self.caution)
        return "\n".join(lines)


def _fmt(v: Any) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.4f}"
    return str(v)


def _as_dict(decisions: Mapping[str, Decision] | pd.DataFrame) -> dict[str, Decision]:
    if isinstance(decisions, pd.DataFrame):
        return decisions_dict(decisions)
    return dict(decisions)


def compare(before: dict[str, Any], after: dict[str, Any]) -> list[tuple[str, Any, Any]]:
    """(name, before, after) for the counts and every bound present in either summary."""
    rows: list[tuple[str, Any, Any]] = [(label, before.get(k), after.get(k)) for k, label in COUNTS]
    if before.get("held_out") or after.get("held_out"):
        rows.append(
            (
                "held-out errors",
                (before.get("held_out") or {}).get("errors"),
                (after.get("held_out") or {}).get("errors"),
            )
        )
    bb, ba = before.get("bounds", {}), after.get("bounds", {})
    # d/m and the LOO bound are one number when no LOO miss lies outside the support set (always for an
    # SVM): one row with both names, as in the terminal summary and the report
    same = all(
        b.get("loo_bound", {}).get("misses_outside") == 0 and "support_fraction" in b for b in (bb, ba)
    )
    for key in BOUND_KEYS:
        if same and key == "loo_bound":
            continue
        if key in bb or key in ba:
            name = (bb.get(key) or ba.get(key))["name"]
            if same and key == "support_fraction":
                name = f"{name} = {(bb.get('loo_bound') or ba.get('loo_bound'))['name']}"
            rows.append((name, (bb.get(key) or {}).get("value"), (ba.get(key) or {}).get("value")))
    return rows


def _status(support: bool, loo_miss: bool, prediction: str) -> str:
    where = "support" if support else "non-support"
    loo = "LOO miss" if loo_miss else "LOO hit"
    return f"{where}, {loo}, predicted {prediction}"


def _bools(s: pd.Series) -> np.ndarray:
    """Booleans with missing (rows absent after the refit) as False."""
    return np.array([bool(v) if not pd.isna(v) else False for v in s.tolist()], dtype=bool)


def changed_rows(
    before: pd.DataFrame, after: pd.DataFrame, decisions: Mapping[str, Decision]
) -> pd.DataFrame:
    """Rows (matched by id) whose label, support membership, LOO miss or prediction changed, or excluded."""
    b = before.set_index(before["id"].astype(str))
    a = after.set_index(after["id"].astype(str))
    a = a.reindex(b.index)
    present = a["row"].notna().to_numpy()

    def text(s: pd.Series) -> np.ndarray:
        return np.array([None if pd.isna(v) else str(v) for v in s.tolist()], dtype=object)

    lb, la = text(b["label"]), text(a["label"])
    pb, pa = text(b["prediction"]), text(a["prediction"])
    sb = b["support"].to_numpy(dtype=bool)
    sa = _bools(a["support"])
    mb = b["loo_miss"].to_numpy(dtype=bool)
    ma = _bools(a["loo_miss"])
    diff = ~present | (lb != la) | (sb != sa) | (mb != ma) | (pb != pa)
    idx = np.flatnonzero(diff)
    ids = b.index.to_numpy()[idx]
    frame = pd.DataFrame(
        {
            "id": pd.Series(ids, dtype="string"),
            "row": b["row"].to_numpy(dtype=np.int64)[idx],
            "label_before": pd.Series(lb[idx], dtype="string"),
            "label_after": pd.Series(la[idx], dtype="string"),
            "status_before": pd.Series([_status(sb[i], mb[i], pb[i]) for i in idx], dtype="string"),
            "status_after": pd.Series(
                [_status(sa[i], ma[i], pa[i]) if present[i] else "excluded" for i in idx], dtype="string"
            ),
            "decision": pd.Series(
                [decisions[r].decision if r in decisions else None for r in ids], dtype="string"
            ),
            "support_before": sb[idx],
            "support_after": pd.array([bool(sa[i]) if present[i] else None for i in idx], dtype="boolean"),
            "loo_miss_before": mb[idx],
            "loo_miss_after": pd.array([bool(ma[i]) if present[i] else None for i in idx], dtype="boolean"),
            "prediction_before": pd.Series(pb[idx], dtype="string"),
            "prediction_after": pd.Series(pa[idx], dtype="string"),
            "held_out": b["held_out"].to_numpy(dtype=bool)[idx],
        }
    )
    return frame[list(CHANGED_COLUMNS)]


def decisions_fingerprint(table: Mapping[str, Decision], ids: set[str]) -> str:
    """Hash of what the decisions change in the data: the relabels (with their new labels) and the
    exclusions of ids present in the data. Confirm, defer, notes and times do not change the refit."""
    effective = sorted(
        (rid, d.decision, d.new_label if d.decision == "relabel" else "")
        for rid, d in table.items()
        if rid in ids and (d.decision == "exclude" or (d.decision == "relabel" and d.new_label is not None))
    )
    return hashlib.sha256(json.dumps(effective).encode()).hexdigest()[:16]


def _cache_folder(scan: Scan, key: str, root: Path | None) -> Path | None:
    data_fp = (scan.findings.summary.get("data") or {}).get("fingerprint")
    if not data_fp:
        return None
    return cache_dir(str(data_fp), scan.spec.fingerprint(), root) / f"{WHATIF_PREFIX}{key}"


def prune_whatif_cache(scan_folder: Path, keep: int = WHATIF_KEEP) -> list[Path]:
    """Remove all but the ``keep`` most recently written (or read) what-if results of one scan; return
    the removed folders."""
    import shutil

    found = [f for f in scan_folder.glob(f"{WHATIF_PREFIX}*") if f.is_dir()]
    found.sort(key=lambda f: f.stat().st_mtime, reverse=True)
    removed = found[keep:]
    for folder in removed:
        shutil.rmtree(folder, ignore_errors=True)
    return removed


def _read_after(folder: Path) -> Findings | None:
    try:
        rows = pd.read_parquet(folder / "rows.parquet")
        summary = json.loads((folder / "summary.json").read_text())
    except (OSError, ValueError):
        return None
    return Findings(rows=rows, summary=summary, classes=list(summary.get("classes", [])))


def what_if(
    scan: Scan,
    decisions: Mapping[str, Decision] | pd.DataFrame,
    *,
    progress: Progress | None = None,
    should_cancel: Callable[[], bool] | None = None,
    use_cache: bool | None = None,
    cache_root: Path | None = None,
) -> WhatIf:
    """Apply relabels and exclusions to the scan's data, refit with the same spec, compare.

    Parameters
    ----------
    scan : Scan
        A finished scan (also one read from the cache).
    decisions : dict or DataFrame
        ``Journal.current()`` or a decisions frame (``holdfast.review.decisions.read_decisions``). Confirm and
        defer
        change nothing; ids not in the data are listed in ``unmatched`` and otherwise ignored.
    progress, should_cancel
        As for :func:`holdfast.engine.scan.run_scan` (the refit runs exact LOO again).
    use_cache, cache_root
        The refit's findings are kept in the scan's cache folder under a fingerprint of the data, the spec
        and what the decisions change (:func:`decisions_fingerprint`), so the same decisions never refit
        twice (the inspector's what-if, then the report). Default: the spec's ``run.cache``.

    Raises
    ------
    DataError
        A relabel to a value that is not a class of the label column (names the row id and the classes).

    Returns
    -------
    WhatIf
        Before/after summaries, the comparison, the rows whose status changed.
    """
    from holdfast.engine.scan import analyse

    table = _as_dict(decisions)
    p = scan.prepared
    frame = p.frame
    check_relabels(table, frame[p.label_column], label_column=p.label_column, source="decisions")
    ids = row_ids(frame, p.id_column)
    present = set(ids)
    unmatched = [rid for rid in table if rid not in present]
    cleaned = apply_decisions(frame, table, id_column=p.id_column, label_column=p.label_column)
    excluded = len(frame) - len(cleaned)
    # positions of the kept rows in the original table: ids stay those of the original rows (when rows
    # are identified by position, an exclusion must not shift the ids of the rows after it)
    kept = frame.index.get_indexer(cleaned.index)
    kept_ids = np.asarray(ids, dtype=object)[kept]
    old_text = np.array([str(v) for v in frame[p.label_column].tolist()], dtype=object)[kept]
    new_text = np.array([str(v) for v in cleaned[p.label_column].tolist()], dtype=object)
    relabelled = int((old_text != new_text).sum())
    held = {rid for rid, h in zip(ids, ~p.train, strict=True) if h}
    held_decisions = sum(
        1 for rid, d in table.items() if rid in held and d.decision in ("relabel", "exclude")
    )
    notes: list[str] = []
    if unmatched:
        notes.append(
            f"{len(unmatched)} decision(s) name ids not in the data (ignored): {', '.join(unmatched[:10])}"
            + (" ..." if len(unmatched) > 10 else "")
        )
    if held_decisions:
        notes.append(
            f"{held_decisions} decision(s) concern held-out rows: they change the held-out data (held-out "
            f"errors, test-set bound) but those rows are never trained on"
        )
    before = scan.findings.summary
    cached = False
    if not excluded and not relabelled:
        notes.append("no relabel or exclusion changes the data: the model is unchanged")
        after_findings = scan.findings
    else:
        cache = scan.spec.run.cache if use_cache is None else use_cache
        folder = _cache_folder(scan, decisions_fingerprint(table, present), cache_root) if cache else None
        found = _read_after(folder) if folder is not None and (folder / "summary.json").exists() else None
        if found is not None and len(found.rows) == len(cleaned):
            after_findings, cached = found, True
            with contextlib.suppress(OSError):
                os.utime(folder)  # recently used: kept by prune_whatif_cache
            if progress is not None:
                d = int(found.summary.get("d", 0))
                progress(d, d, 0.0)
        else:
            source = f"{scan.data_path or '<data>'} (with decisions)"
            prepared = prepare(cleaned.reset_index(drop=True), scan.spec, source=source)
            prepared.ids = kept_ids
            after_findings, _, _ = analyse(
                prepared, scan.spec, progress=progress, should_cancel=should_cancel
            )
            after_findings.summary["data"]["path"] = source
            if folder is not None:
                after_findings.write(folder)
                prune_whatif_cache(folder.parent)
    after = after_findings.summary
    return WhatIf(
        before=before,
        after=after,
        comparison=compare(before, after),
        changed=changed_rows(scan.findings.rows, after_findings.rows, table),
        excluded=excluded,
        relabelled=relabelled,
        unmatched=unmatched,
        held_out_decisions=held_decisions,
        notes=notes,
        findings=after_findings,
        from_cache=cached,
    )


def write_whatif(result: WhatIf, out_dir: str | Path) -> tuple[Path, Path]:
    """Write ``whatif.json`` and ``whatif_rows.parquet`` (the changed rows) into ``out_dir`` atomically."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    json_path = atomic_write_bytes(
        out / "whatif.json", (json.dumps(result.to_dict(), indent=2) + "\n").encode()
    )
    rows_path = atomic_write_parquet(result.changed, out / "whatif_rows.parquet")
    return json_path, rows_path
