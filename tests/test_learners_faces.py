"""Each learner family end to end: `holdfast scan` through the CLI, the summary's family words, the
per-row exactness column, the bounds that apply, the report and the row detail; bad parameters give one
line and exit code 2."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from holdfast.cli import main
from holdfast.data.spec import spec_from_text
from holdfast.engine.scan import run_scan
from holdfast.insight.detail import DetailContext
from holdfast.output.report import write_report
from holdfast.output.terminal import summary_text

FAMILIES = {
    "svm": "C = 1.0",
    "knn": "k = 5",
    "perceptron": "epochs = 5",
    "logistic": "C = 0.5",
}
SUPPORT_NAME = {
    "svm": "support vectors",
    "knn": "critical neighbours",
    "perceptron": "update set",
    "logistic": "influential rows",
}


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(tmp_path / "cache"))


@pytest.fixture
def data(tmp_path):
    rng = np.random.default_rng(5)
    n = 180
    x1, x2 = rng.normal(size=n), rng.normal(size=n)
    grade = np.where(x1 + 0.5 * x2 + 0.4 * rng.normal(size=n) > 0, "premium", "processing")
    frame = pd.DataFrame(
        {
            "lot": [f"L{i:04d}" for i in range(n)],
            "x1": x1,
            "x2": x2,
            "holdout": np.arange(n) % 9 == 0,
            "grade": grade,
        }
    )
    path = tmp_path / "d.parquet"
    frame.to_parquet(path)
    return path


def _spec(tmp_path, family: str, extra: str) -> str:
    text = (
        f'[data]\nlabel = "grade"\nid = "lot"\nsplit = "holdout"\n[learner]\nfamily = "{family}"\n{extra}\n'
    )
    (tmp_path / f"{family}.toml").write_text(text)
    return text


@pytest.mark.parametrize("family", list(FAMILIES))
def test_scan_with_each_family_through_the_cli(family, data, tmp_path, capsys):
    _spec(tmp_path, family, FAMILIES[family])
    out = tmp_path / f"res_{family}"
    assert main(["scan", str(data), "--spec", str(tmp_path / f"{family}.toml"), "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    summary = json.loads((out / "summary.json").read_text())
    rows = pd.read_parquet(out / "rows.parquet")
    fam = summary["family"]
    assert fam["name"] == family and fam["support_name"] == SUPPORT_NAME[family]
    support_line = next(line for line in printed.splitlines() if line.startswith("support rows d"))
    if family != "svm":
        assert f"{SUPPORT_NAME[family]}: " in support_line
    train = ~rows["held_out"]
    assert summary["d"] == int(rows.loc[train, "support"].sum())
    assert summary["loo_exact_rows"] == int(rows.loc[train, "loo_exact"].sum())
    bounds = summary["bounds"]
    if family in ("knn", "logistic"):
        # no compression set of their own: the bounds on the support rows do not apply
        assert "compression" not in bounds and "loo_bound" not in bounds
        assert "alpha" not in fam["columns"] and "bounded" not in fam["columns"]
    else:
        assert "compression" in bounds and "loo_bound" in bounds
    if family == "knn":
        assert bounds["compression_condensed"]["size"] == fam["condensed_size"] > 0
        assert summary["loo_exact"] and rows.loc[train, "loo_exact"].all()
        assert summary["refits"] == 0
    if family == "logistic":
        assert not summary["loo_exact"]
        assert 0 < summary["loo_exact_rows"] < summary["m"]
        assert summary["refits"] == summary["loo_exact_rows"]
    if family == "perceptron":
        assert bounds["novikoff"]["name"] == "Novikoff mistake bound"
        assert summary["refits"] == summary["d"]
    # the LOO misses agree with the LOO predictions, and the score exists for every training row
    assert (
        rows.loc[train, "loo_miss"] == (rows.loc[train, "loo_prediction"] != rows.loc[train, "label"])
    ).all()
    assert rows.loc[train, "score"].notna().all()


@pytest.mark.parametrize("family", ["knn", "logistic", "perceptron"])
def test_report_terminal_and_row_detail_use_the_family_words(family, data, tmp_path):
    spec = spec_from_text(_spec(tmp_path, family, FAMILIES[family]), "s.toml")
    scan = run_scan(data, spec, use_cache=False)
    summary = scan.findings.summary
    text = write_report(scan, None, tmp_path / "r.md").read_text(encoding="utf-8")
    assert SUPPORT_NAME[family] in text
    assert "Why the bound is what it is" not in text  # the bounded/free composition is the SVM's
    assert "bounded," not in summary_text(summary)
    rows = scan.findings.rows
    first = int(np.flatnonzero(rows["support"].to_numpy())[0])
    detail = DetailContext.from_scan(scan).row_detail(first)
    assert detail.support_name == {"knn": "critical neighbour", "logistic": "influential row"}.get(
        family, "update row"
    )
    assert ("alpha" in detail.family_columns) == (family == "perceptron")


@pytest.mark.parametrize(
    ("family", "extra", "message"),
    [
        ("knn", "k = 0", "'learner.k' must be a positive integer"),
        ("knn", 'metric = "chebyshev"', "'learner.metric' must be one of euclidean | manhattan | cosine"),
        ("knn", 'kernel = "rbf"', "key 'learner.kernel' belongs to family 'svm', not 'knn'"),
        ("perceptron", "epoch = 3", "unknown key 'learner.epoch'; did you mean 'epochs'?"),
        ("logistic", "C = -1", "'learner.C' must be a positive number"),
        ("knn", "k = 500", "learner.k = 500 needs at least 501 training rows"),
    ],
)
def test_bad_parameters_give_one_line_and_exit_2(family, extra, message, data, tmp_path, capsys):
    _spec(tmp_path, family, extra)
    code = main(["scan", str(data), "--spec", str(tmp_path / f"{family}.toml"), "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert message in err and len(err.splitlines()) == 1


@pytest.mark.parametrize(("family", "unit"), [("knn", 0.5), ("logistic", 1.0), ("perceptron", None)])
def test_score_reads_each_family_loo_margin_in_its_own_unit(family, unit, data, tmp_path):
    # holdfast.insight.score formula with the LOO margin divided by the family's margin unit
    spec = spec_from_text(_spec(tmp_path, family, FAMILIES[family]), "s.toml")
    scan = run_scan(data, spec, use_cache=False)
    rows = scan.findings.rows[~scan.findings.rows["held_out"]]
    if unit is None:  # perceptron: the median |y f(x)| of the training rows
        unit = float(np.median(np.abs(rows["margin"].to_numpy())))
    expected = (
        -np.clip(rows["loo_margin"].to_numpy() / unit, -2, 2)
        + 0.5 * rows["neighbour_dissent_avg"].to_numpy()
        - 0.1 * np.clip(rows["linear_logit"].to_numpy(), -4, 4)
    )
    assert np.allclose(rows["score"].to_numpy(), expected)
