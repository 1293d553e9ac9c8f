"""The report: one Markdown file with PNG images beside it (``REPORT_files/``).

Sections: summary, bounds and estimates with their sources, why the bound is what it is (the
``explanation`` of the summary), a margin histogram and a score histogram, the most suspicious rows with
their flags, the decisions taken, the what-if comparison when given, and the cautions.

Every text that comes from the data set (ids, labels, notes, column names) is escaped so that it shows
literally: Markdown punctuation is backslash-escaped (CommonMark 0.31, section 2.4 "Backslash escapes":
any ASCII punctuation may be escaped) and control characters are written as ``\\xNN``.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from holdfast import __version__
from holdfast.atomic import atomic_write_bytes
from holdfast.errors import UserError
from holdfast.insight.explain import percent
from holdfast.output.plots import margin_figure, png, score_figure, whatif_figure
from holdfast.output.terminal import same_support_and_loo_bound, ties_line
from holdfast.review.decisions import decisions_dict
from holdfast.review.events import Decision
from holdfast.review.journal import Journal

if TYPE_CHECKING:
    from holdfast.engine.scan import Scan
    from holdfast.review.whatif import WhatIf

#: How many of the most suspicious rows the report lists.
TOP_ROWS = 30
CAUTIONS: tuple[str, ...] = (
    "Flags are statistical evidence, not proof of a wrong label; in regulated or safety-relevant data "
    "(medical, credit, safety), label changes follow the domain's own review and local rules.",
    "The LOO errors come from the method the summary names (family, LOO); where they are refits, a "
    "different solver tolerance may move the counts slightly.",
    "The xi-alpha count is an upper bound on the LOO errors under its theorem (Joachims 2000, Estimating "
    "the generalization performance of a SVM efficiently, ICML); the span estimate (Vapnik & Chapelle "
    "2000, Bounds on error expectation for support vector machines, Neural Computation 12(9)) is an "
    "estimate and can miss LOO errors.",
    "A what-if refit shows what the model would be if the decisions were right; it does not check them. "
    "Its LOO error is partly self-fulfilling (relabelled rows are judged against their new labels); the "
    "held-out error is the honest check.",
)

# characters with an inline meaning in CommonMark or GitHub-flavoured Markdown (tables, strikethrough, math)
_MD_SPECIAL = re.compile(r"([\\`*_\[\]<>|~&$#])")
# text that would start a block (list item, heading, quote, thematic break) if it began a line
_MD_BLOCK_START = re.compile(r"^(\s*)([+\-=])")
_MD_ORDERED_START = re.compile(r"^(\s*\d+)([.)])")
# C0/C1 control characters, DEL, and Unicode bidirectional overrides/isolates
_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f\u200e\u200f\u202a-\u202e\u2066-\u2069]")


def md_escape(value: Any) -> str:
    """Text of ``value`` shown literally in Markdown (also inside a table cell).

    Markdown punctuation gets a backslash (also a list or heading marker at the start), tabs and line
    breaks become one space, other control characters (terminal escape sequences) and bidirectional
    overrides become a visible ``\\xNN`` / ``\\uNNNN``. None and NaN become an empty string.
    """
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NA:
        return ""
    text = re.sub(r"[\t\r\n]+", " ", str(value))
    text = _MD_SPECIAL.sub(r"\\\1", text)
    text = _MD_BLOCK_START.sub(lambda m: m.group(1) + "\\" + m.group(2), text)
    text = _MD_ORDERED_START.sub(lambda m: m.group(1) + "\\" + m.group(2), text)

    def visible(match: re.Match[str]) -> str:
        code = ord(match.group(0))
        return f"\\\\x{code:02x}" if code < 0x100 else f"\\\\u{code:04x}"

    return _CONTROL.sub(visible, text)


def _num(v: Any, digits: int = 4) -> str:
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "-"
    if isinstance(v, bool | np.bool_):
        return "yes" if v else "no"
    if isinstance(v, int | np.integer):
        return str(int(v))
    if isinstance(v, float | np.floating):
        return f"{float(v):.{digits}f}"
    return md_escape(v)


def _table(header: list[str], rows: list[list[str]]) -> list[str]:
    out = ["| " + " | ".join(header) + " |", "|" + "|".join(" --- " for _ in header) + "|"]
    out.extend("| " + " | ".join(r) + " |" for r in rows)
    return out


def _decisions(decisions: Journal | Mapping[str, Decision] | pd.DataFrame | None) -> dict[str, Decision]:
    if decisions is None:
        return {}
    if isinstance(decisions, Journal):
        return decisions.current()
    if isinstance(decisions, pd.DataFrame):
        return {k: v for k, v in decisions_dict(decisions).items() if v.decision != "clear"}
    return {k: v for k, v in decisions.items() if v.decision != "clear"}


# ------------------------------------------------------------------------------------------------ images
def _images(
    scan: Scan, decisions: Mapping[str, Decision], whatif: WhatIf | None, top: int
) -> dict[str, bytes]:
    rows = scan.findings.rows
    classes = [str(c) for c in scan.findings.summary.get("classes", scan.findings.classes)]
    out = {
        "margin.png": png(margin_figure(rows, classes, decisions)),
        "score.png": png(score_figure(rows, classes, decisions, top)),
    }
    if whatif is not None:
        out["whatif.png"] = png(whatif_figure(whatif, rows))
    return out


# ------------------------------------------------------------------------------------------------ sections
def _summary(scan: Scan) -> list[str]:
    s = scan.findings.summary
    learner = s.get("learner", {})
    params = ", ".join(
        f"{k}={learner[k]:.4g}" if isinstance(learner[k], float) else f"{k}={learner[k]}"
        for k in (
            "family",
            "kernel",
            "C",
            "gamma",
            "degree",
            "class_weight",
            "k",
            "weights",
            "metric",
            "epochs",
            "intercept",
            "tol",
            "ties_resolved",
        )
        if k in learner
    )
    family = s.get("family") or {}
    if family.get("name", "svm") == "svm":
        support = f"{s['d']} ({s['bounded']} bounded, {s['d'] - s['bounded']} free)"
    else:  # what "support rows" means for this family
        meaning = f"{family.get('support_name', '')}: {family.get('support_meaning', '')}"
        support = f"{s['d']} ({md_escape(meaning)})"
    loo_kind = "exact" if s.get("loo_exact") else "approximate"
    if not s.get("loo_exact") and "loo_exact_rows" in s:
        loo_kind += f"; {s['loo_exact_rows']} of {s['m']} rows exact"
    rows = [
        ["data", md_escape(s.get("data", {}).get("path", scan.data_path))],
        ["data fingerprint", md_escape(s.get("data", {}).get("fingerprint", ""))],
        ["learner", md_escape(params)],
        ["rows (training) m", _num(s["m"])],
        ["support rows d", support],
        ["training errors", _num(s["training_errors"])],
        ["LOO errors", f"{s['loo_errors']} ({loo_kind})"],
        ["class counts", ", ".join(f"{md_escape(c)}: {n}" for c, n in s.get("class_counts", {}).items())],
    ]
    if family.get("loo") and family.get("name", "svm") != "svm":
        rows.append(["how the LOO was computed", md_escape(family["loo"])])
    ties = ties_line(family.get("ties"))
    if ties:
        rows.append(["near-zero signs", md_escape(ties)])
    if s.get("held_out"):
        h = s["held_out"]
        rows.append(["held-out rows", f"{h['n']} ({h['errors']} errors, {h['error_rate']:.4f})"])
    return ["## Summary", "", *_table(["", ""], rows), ""]


def _bounds(scan: Scan) -> list[str]:
    b = scan.findings.summary.get("bounds", {})
    same = same_support_and_loo_bound(b)
    rows = []
    for key, item in b.items():
        if same and key == "loo_bound":
            continue
        if same and key == "support_fraction":
            lb = b["loo_bound"]
            rows.append(
                [
                    md_escape(f"{item.get('name', key)} = {lb.get('name', 'LOO bound')}"),
                    _num(item.get("value")),
                    md_escape("misses_outside=0: no LOO miss outside the support set, so (d + 0)/m = d/m"),
                    md_escape(lb.get("source", "")),
                ]
            )
            continue
        detail = []
        keys = ("count", "k", "n", "errors", "misses_outside", "count_bounded_as_errors", "size", "updates")
        for k in keys:
            if k in item:
                detail.append(f"{k}={_num(item[k])}")
        if item.get("note"):
            detail.append(str(item["note"]))
        rows.append(
            [
                md_escape(item.get("name", key)),
                _num(item.get("value")),
                md_escape("; ".join(detail)),
                md_escape(item.get("source", "")),
            ]
        )
    return [
        "## Bounds and estimates",
        "",
        *_table(["bound or estimate", "value", "detail", "source"], rows),
        "",
    ]


def _explanation(scan: Scan) -> list[str]:
    family = scan.findings.summary.get("family") or {}
    if family.get("name", "svm") != "svm":  # the composition below (bounded / free) is the SVM's
        return []
    e = scan.findings.summary.get("explanation")
    if not e:
        from holdfast.insight.explain import explain_scan

        e = explain_scan(scan)
    c = e["composition"]
    d = e["d"]
    lines = [
        "## Why the bound is what it is",
        "",
        f"The {d} support rows (d/m = {e['support_fraction']:.4f}) are made of:",
        "",
        *_table(
            ["kind", "rows", "meaning"],
            [
                [
                    "bounded and misclassified",
                    str(c["bounded_misclassified"]),
                    "at the limit C, the model disagrees with the label: the usual mislabel signature",
                ],
                ["bounded but correct", str(c["bounded_correct"]), "at the limit C, inside the margin"],
                ["free", str(c["free"]), "on the margin"],
                ["total", str(d), ""],
            ],
        ),
        "",
    ]
    f = e["flagged"]
    lines.append(
        f"Rows flagged with label evidence ({', '.join(md_escape(x) for x in f['flags'])}) account for "
        f"{f['support_rows_flagged']} of the {d} support rows ({percent(f['support_rows_flagged'], d)})."
    )
    t = e["twins"]
    lines.append(f"Twin conflicts: {t['rows']} rows ({t['support_rows']} of them support rows).")
    cls = e["classes"]
    lines.append(
        "Class balance (rows / support rows): "
        + ", ".join(
            f"{md_escape(k)}: {v} / {cls['support_counts'].get(k, 0)}" for k, v in cls["counts"].items()
        )
        + "."
    )
    lines.append("")
    if e.get("hints"):
        lines.append("Hints (computed from the data; thresholds are rules of thumb):")
        lines.append("")
        lines.extend(f"- {md_escape(h['text'])}" for h in e["hints"])
        lines.append("")
    return lines


def _top_rows(scan: Scan, decisions: dict[str, Decision], top: int) -> list[str]:
    rows = scan.findings.rows
    tr = rows[~rows["held_out"].to_numpy(dtype=bool)].sort_values("rank").head(top)
    body = []
    for r in tr.itertuples(index=False):
        d = decisions.get(str(r.id))
        decision = (
            "" if d is None else (f"relabel to {d.new_label}" if d.decision == "relabel" else d.decision)
        )
        body.append(
            [
                str(r.rank),
                md_escape(r.id),
                md_escape(r.label),
                md_escape(r.prediction),
                md_escape(r.loo_prediction),
                _num(float(r.score), 3),
                _num(float(r.margin), 3),
                str(int(r.flip_count)),
                md_escape(str(r.flag_names).replace(",", ", ")),
                md_escape(decision),
            ]
        )
    header = [
        "rank",
        "id",
        "label",
        "prediction",
        "LOO prediction",
        "score",
        "margin",
        "flips",
        "flags",
        "decision",
    ]
    return [f"## Most suspicious rows (top {len(tr)})", "", *_table(header, body), ""]


def _decision_section(scan: Scan, decisions: dict[str, Decision]) -> list[str]:
    lines = ["## Decisions taken", ""]
    if not decisions:
        return [*lines, "No decisions yet.", ""]
    counts = pd.Series([d.decision for d in decisions.values()]).value_counts()
    lines.append(", ".join(f"{k}: {int(v)}" for k, v in counts.items()) + f" (total {len(decisions)}).")
    lines.append("")
    rows = scan.findings.rows
    label_of = dict(zip(rows["id"].astype(str), rows["label"], strict=True))
    body = []
    for rid, d in decisions.items():
        old = label_of.get(rid)
        body.append(
            [
                md_escape(rid),
                md_escape(old) if rid in label_of else "(not in the data)",
                md_escape(d.decision),
                md_escape(d.new_label),
                md_escape(d.note),
                md_escape(d.time),
            ]
        )
    lines.extend(_table(["id", "label", "decision", "new label", "note", "time"], body))
    lines.append("")
    return lines


def _whatif_section(w: WhatIf, image: str) -> list[str]:
    lines = [
        "## What-if: the decisions applied and the model refitted",
        "",
        f"{w.relabelled} rows relabelled, {w.excluded} excluded; refit with the same spec.",
        "",
        *_table(["", "before", "after"], [[md_escape(n), _num(b), _num(a)] for n, b, a in w.comparison]),
        "",
        f"Rows whose status changed (label, support, LOO miss, prediction, or excluded): {len(w.changed)}.",
        "",
        f"**Caution.** {md_escape(w.caution)}",
        "",
        f"![Before and after the decisions]({image})",
        "",
    ]
    lines.extend(f"- {md_escape(n)}" for n in w.notes)
    if w.notes:
        lines.append("")
    return lines


def _relative(path: Path, start: Path) -> str:
    """Link target relative to the report, percent-encoded (spaces and brackets in file names)."""
    from urllib.parse import quote

    return quote(path.relative_to(start).as_posix())


def write_report(
    scan: Scan,
    decisions: Journal | Mapping[str, Decision] | pd.DataFrame | None,
    path: str | Path,
    *,
    force: bool = False,
    whatif: WhatIf | None = None,
    top: int = TOP_ROWS,
) -> Path:
    """Write the Markdown report to ``path`` and its images to ``<stem>_files/`` beside it.

    Parameters
    ----------
    scan : Scan
        A finished scan.
    decisions : Journal, dict, DataFrame or None
        The decisions taken (a journal, ``Journal.current()``, or a decisions frame).
    path : path
        The report file (``.md``).
    force : bool
        Overwrite an existing report or image; without it an existing file is a UserError naming it.
    whatif : WhatIf, optional
        A what-if comparison to include (:func:`holdfast.review.whatif.what_if`).
    top : int
        How many of the most suspicious rows to list.

    Returns
    -------
    Path
        The report path. Images are written first and the report last, each atomically, so the report
        never points at a missing image.
    """
    target = Path(path)
    if target.is_dir():
        raise UserError(f"{target}: is a folder, expected a report file (.md)")
    folder = target.with_name(f"{target.stem}_files")
    names = ("margin.png", "score.png", *(("whatif.png",) if whatif is not None else ()))
    images = {name: folder / name for name in names}
    if not force:
        for p in (target, *images.values()):
            if p.exists():
                raise UserError(f"{p}: already exists; use --force to overwrite")
    table = _decisions(decisions)
    s = scan.findings.summary
    name = Path(str(s.get("data", {}).get("path") or scan.data_path or "data")).name
    lines = [
        f"# holdfast report: {md_escape(name)}",
        "",
        f"Written {datetime.now(UTC).strftime('%Y-%m-%d %H:%M UTC')} by holdfast {__version__}.",
        "",
        *_summary(scan),
        *_bounds(scan),
        *_explanation(scan),
        "## Margins and scores",
        "",
        "The counts are on a log scale above 1 row, so the few rows in the negative margin tail show; each "
        "label is one outline (not stacked). Marks at the top are the decided rows; dashed lines are the "
        "cut-offs named in the legend.",
        "",
        f"![Margin histogram by label]({_relative(images['margin.png'], target.parent)})",
        "",
        f"![Suspicion score histogram by label]({_relative(images['score.png'], target.parent)})",
        "",
        *_top_rows(scan, table, top),
        *_decision_section(scan, table),
        *(
            _whatif_section(whatif, _relative(images["whatif.png"], target.parent))
            if whatif is not None
            else []
        ),
        "## Cautions",
        "",
        *(f"- {c}" for c in CAUTIONS),
        "",
    ]
    try:
        for filename, data in _images(scan, table, whatif, top).items():
            atomic_write_bytes(images[filename], data)
        atomic_write_bytes(target, "\n".join(lines).encode("utf-8"))
    except OSError as exc:
        raise UserError(f"{exc.filename or target}: cannot write ({exc.strerror or exc})") from exc
    return target
