"""The scan's human summary for the terminal: counts, bounds, why d is what it is, the rows to look at first.

Plain text for stdout (``holdfast scan``); the files (rows.parquet, summary.json) hold everything in full.
Data text (ids, labels, flags) goes through :func:`holdfast.textsafe.safe_text`, so it shows literally.
"""

from __future__ import annotations

import textwrap
from typing import Any

import numpy as np
import pandas as pd

from holdfast.textsafe import safe_text

#: width the explanation's hints are wrapped to
WRAP = 100
#: longest id or label shown in the top-rows list (longer ones end in "…")
CELL_MAX = 24


def summary_text(summary: dict[str, Any]) -> str:
    """Counts, errors, bounds with their notes, held-out errors, flag counts and the explanation of d."""
    b = summary["bounds"]
    held = summary.get("held_out")
    m = int(summary["m"])
    free = summary["d"] - summary["bounded"]
    family = summary.get("family") or {}
    kind = "exact" if summary["loo_exact"] else "approximate"
    if not summary["loo_exact"] and "loo_exact_rows" in summary:
        kind = f"approximate; {summary['loo_exact_rows']} of {m} rows exact"
    loo = int(summary["loo_errors"])
    if family.get("name", "svm") == "svm":
        support = f"{summary['d']}  ({summary['bounded']} bounded, {free} free)"
    else:  # what "support rows" means for this family
        meaning = f"{family.get('support_name', '')}: {family.get('support_meaning', '')}"
        support = f"{summary['d']}  {safe_text(meaning)}"
    pairs: list[tuple[str, str]] = [
        ("rows (training)", f"{m}" + (f"   held out {held['n']}" if held else "")),
        ("support rows d", support),
        ("training errors", f"{summary['training_errors']}"),
        ("LOO errors", f"{loo}  ({kind}; error rate {loo / m:.4f})" if m else f"{loo}  ({kind})"),
    ]
    same = same_support_and_loo_bound(b)
    keys = ("support_fraction", "loo_bound", "xi_alpha", "span", "compression", "compression_condensed")
    for key in (*keys, "novikoff", "test_set"):
        if key in b:
            item = b[key]
            name, note = item["name"], item.get("note", "")
            if same and key == "loo_bound":
                continue
            if same and key == "support_fraction":
                name, note = f"{name} = {b['loo_bound']['name']}", "no LOO miss outside the support set"
            value = item.get("value")
            shown = "n/a" if value is None else (f"{value:.1f}" if key == "novikoff" else f"{value:.4f}")
            pairs.append((name, f"{shown}   {note}".rstrip()))
    if held:
        pairs.append(("held-out errors", f"{held['errors']} of {held['n']}  ({held['error_rate']:.4f})"))
    flags = {k: v for k, v in (summary.get("flags") or {}).items() if v}
    if flags:
        least = summary.get("heavy_flip_min")
        shown = [
            f"{safe_text(k)} {int(v)}" + (f" (>= {int(least)} flips)" if k == "heavy_flip" and least else "")
            for k, v in flags.items()
        ]
        pairs.append(("flags", ", ".join(shown)))
    ties = ties_line(family.get("ties"))
    if ties:
        pairs.append(("near-zero signs", ties))
    width = max(len(name) for name, _ in pairs) + 2
    lines = [f"{name:<{width}}{value}" for name, value in pairs]
    if family.get("name", "svm") == "svm":  # the composition of d is the SVM's (bounded / free)
        lines += explanation_lines(summary.get("explanation"))
    return "\n".join(lines)


def ties_line(ties: Any) -> str:
    """SVM under ``learner.ties = "optimum"``: how many decision values lie within the tie allowance of 0,
    whose signs are the exact optimum's (a solver stopping at its tolerance may give the other sign); ""
    when there are none or libsvm decided them."""
    if not isinstance(ties, dict) or ties.get("rule") != "optimum":
        return ""
    train, loo = int(ties.get("training_within") or 0), int(ties.get("loo_within") or 0)
    if not (train or loo):
        return ""
    return (
        f"{loo} LOO and {train} training decision values within {float(ties['allowance']):.1g} of 0: "
        "signs of the exact optimum (libsvm may differ there)"
    )


def same_support_and_loo_bound(bounds: dict[str, Any]) -> bool:
    """True when the LOO bound equals d/m (no LOO miss outside the support set: always for an SVM), so
    the faces show them as one line with both names."""
    lb = bounds.get("loo_bound")
    return bool(lb) and "support_fraction" in bounds and lb.get("misses_outside") == 0


def explanation_lines(explanation: Any) -> list[str]:
    """What the d support rows are made of, and the hints computed from the data (wrapped)."""
    if not isinstance(explanation, dict):
        return []
    out: list[str] = []
    c = explanation.get("composition") or {}
    if c:
        out += [
            "",
            f"why d is {c.get('d')}: {c.get('bounded_misclassified')} bounded and misclassified"
            f" + {c.get('bounded_correct')} bounded but correct + {c.get('free')} free",
        ]
    for hint in explanation.get("hints") or []:
        text = hint.get("text", "") if isinstance(hint, dict) else str(hint)
        out += textwrap.wrap(safe_text(text), WRAP, initial_indent="* ", subsequent_indent="  ")
    return out


def _cell(value: Any) -> str:
    text = safe_text(value)
    return text if len(text) <= CELL_MAX else text[: CELL_MAX - 1] + "…"


def top_rows_text(rows: pd.DataFrame, n: int = 10) -> str:
    """The ``n`` training rows with the best (lowest) rank: rank, id, label -> LOO prediction, score, flags.

    ``rows`` is the findings per-row frame (columns ``rank``, ``id``, ``label``, ``loo_prediction``,
    ``score``, ``flags``, ``held_out``; see holdfast.engine.findings).
    """
    train = rows.loc[~rows["held_out"].to_numpy(dtype=bool)]
    top = train.sort_values("rank", kind="stable").head(n)
    if top.empty:
        return ""
    table = [("rank", "id", "label", "LOO prediction", "score", "flags")]
    for r in top.itertuples(index=False):
        score = float(r.score)
        table.append(
            (
                str(int(r.rank)),
                _cell(r.id),
                _cell(r.label),
                _cell(r.loo_prediction),
                "" if np.isnan(score) else f"{score:.3f}",
                safe_text(r.flag_names or ""),
            )
        )
    widths = [max(len(row[i]) for row in table) for i in range(len(table[0]) - 1)]
    right = {0, 4}  # numbers
    lines = [f"\nmost suspicious rows ({len(top)} of {len(train)} training rows; all in rows.parquet):"]
    for row in table:
        pairs = enumerate(zip(row[:-1], widths, strict=True))
        cells = [c.rjust(w) if i in right else c.ljust(w) for i, (c, w) in pairs]
        lines.append("  " + "  ".join([*cells, row[-1]]).rstrip())
    return "\n".join(lines)
