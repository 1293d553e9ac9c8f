"""The CLI: exit codes, one-line messages, and the files `scan` writes."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from holdfast.cli import main
from holdfast.engine.findings import ROW_COLUMNS


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(tmp_path / "cache"))


@pytest.fixture
def data(tmp_path):
    rng = np.random.default_rng(3)
    n = 160
    x1, x2 = rng.normal(size=n), rng.normal(size=n)
    grade = np.where(x1 + 0.5 * x2 + 0.3 * rng.normal(size=n) > 0, "premium", "processing")
    frame = pd.DataFrame(
        {
            "lot": [f"L{i:04d}" for i in range(n)],
            "x1": x1,
            "x2": x2,
            "block": rng.choice(["B01", "B02"], n),
            "holdout": np.arange(n) % 8 == 0,
            "grade": grade,
        }
    )
    path = tmp_path / "d.parquet"
    frame.to_parquet(path)
    spec = tmp_path / "s.toml"
    spec.write_text('[data]\nlabel = "grade"\nid = "lot"\nsplit = "holdout"\n[learner]\nC = 1.0\n')
    return path, spec, frame


def test_scan_writes_rows_and_summary(data, tmp_path, capsys):
    path, spec, frame = data
    out = tmp_path / "res"
    assert main(["scan", str(path), "--spec", str(spec), "--out", str(out), "--quiet"]) == 0
    rows = pd.read_parquet(out / "rows.parquet")
    summary = json.loads((out / "summary.json").read_text())
    assert list(rows.columns[: len(ROW_COLUMNS)]) == list(ROW_COLUMNS)
    assert len(rows) == len(frame) and rows["id"].tolist() == frame["lot"].tolist()
    held = rows["held_out"].to_numpy()
    assert held.sum() == 20 and not rows.loc[held, "support"].any()
    assert (rows.loc[held, "prediction"] == rows.loc[held, "loo_prediction"]).all()
    train = rows[~held]
    assert summary["m"] == len(train) and summary["d"] == int(train["support"].sum())
    assert summary["loo_errors"] == int(train["loo_miss"].sum()) <= summary["d"]
    assert summary["loo_exact"] is True
    assert {"support_fraction", "loo_bound", "compression", "test_set"} <= set(summary["bounds"])
    assert summary["bounds"]["test_set"]["n"] == 20
    assert summary["learner"]["gamma"] > 0 and summary["learner"]["gamma_spec"] == "scale"
    printed = capsys.readouterr().out
    assert "support rows d" in printed and "evidence, not proof" in printed
    rate = summary["loo_errors"] / summary["m"]
    loo_line = next(line for line in printed.splitlines() if line.startswith("LOO errors "))
    assert loo_line.split(None, 2)[2] == f"{summary['loo_errors']}  (exact; error rate {rate:.4f})"
    # d/m and the LOO bound are one number for an SVM: one line with both names
    both = [line for line in printed.splitlines() if line.startswith("support fraction d/m = LOO bound ")]
    assert len(both) == 1 and f"{summary['bounds']['loo_bound']['value']:.4f}" in both[0]
    c = summary["explanation"]["composition"]
    assert f"why d is {summary['d']}: {c['bounded_misclassified']} bounded and misclassified" in printed
    # the ten best-ranked training rows, in rank order, as pandas picks them from rows.parquet
    listed = printed.split("most suspicious rows")[1].splitlines()[2:12]
    expected = train.nsmallest(10, "rank")
    assert [line.split()[1] for line in listed] == expected["id"].tolist()
    assert [int(line.split()[0]) for line in listed] == expected["rank"].tolist()


def test_scan_top_option(data, tmp_path, capsys):
    path, spec, _ = data
    args = ["scan", str(path), "--spec", str(spec), "--out", str(tmp_path / "res"), "--quiet"]
    assert main([*args, "--top", "3"]) == 0
    printed = capsys.readouterr().out
    assert "most suspicious rows (3 of 140 training rows" in printed
    assert main([*args, "--top", "0"]) == 0
    assert "most suspicious rows" not in capsys.readouterr().out
    r = _run([*args, "--top", "-1"])
    assert r.returncode == 2 and r.stderr.strip() == "holdfast: error: --top must be 0 or more, got -1"


def test_error_lines_show_data_text_literally(tmp_path):
    """A column name holding a terminal escape and a line break is named in one literal line."""
    bad = "grade\x1b[31m\nred"
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0], bad: ["a", "b", "a", "b"]})
    path = tmp_path / "d.parquet"
    frame.to_parquet(path)
    r = _run(["scan", str(path), "--label", "grad", "--out", str(tmp_path / "o")])
    assert r.returncode == 2
    assert "\x1b" not in r.stderr and len(r.stderr.strip().splitlines()) == 1
    assert "\\x1b[31m\\nred" in r.stderr  # the escape and the line break as visible characters


def test_scan_with_label_only(data, tmp_path):
    _, _, frame = data
    frame = frame.drop(columns=["lot"])  # without a spec every other column is a feature
    path = tmp_path / "no_id.parquet"
    frame.to_parquet(path)
    out = tmp_path / "res2"
    assert main(["scan", str(path), "--label", "grade", "--out", str(out), "--quiet"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["m"] == len(frame)  # no split column named: every row trains
    assert summary["spec"]["learner"]["kernel"] == "rbf" and summary["spec"]["learner"]["C"] == 1.0


def test_label_with_id_column(data, tmp_path):
    path, _, frame = data
    out = tmp_path / "res3"
    assert main(["scan", str(path), "--label", "grade", "--id", "lot", "--out", str(out), "--quiet"]) == 0
    rows = pd.read_parquet(out / "rows.parquet")
    assert rows["id"].tolist() == frame["lot"].tolist()
    summary = json.loads((out / "summary.json").read_text())
    assert "lot" not in summary["data"]["features"] and summary["spec"]["data"]["id"] == "lot"


def test_id_without_label_is_a_user_error(data, tmp_path):
    path, spec, _ = data
    r = _run(["scan", str(path), "--spec", str(spec), "--id", "lot", "--out", str(tmp_path / "o")])
    assert r.returncode == 2 and "--id goes with --label" in r.stderr


def _run(args):
    return subprocess.run([sys.executable, "-m", "holdfast.cli", *args], capture_output=True, text=True)


def test_missing_file_exit_2_one_line(tmp_path):
    r = _run(["scan", str(tmp_path / "nope.parquet"), "--label", "grade", "--out", str(tmp_path / "o")])
    assert r.returncode == 2
    assert r.stderr.strip().splitlines() == [
        f"holdfast: error: {tmp_path / 'nope.parquet'}: data file not found"
    ]


def test_missing_label_column_exit_2(data, tmp_path):
    path, _, _ = data
    r = _run(["scan", str(path), "--label", "grad", "--out", str(tmp_path / "o")])
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "no column 'grad' (label)" in lines[0] and "did you mean 'grade'" in lines[0]


def test_unknown_spec_key_exit_2(data, tmp_path):
    path, spec, _ = data
    spec.write_text('[data]\nlabel = "grade"\n[learner]\nkernal = "rbf"\n')
    r = _run(["scan", str(path), "--spec", str(spec), "--out", str(tmp_path / "o")])
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "unknown key 'learner.kernal'; did you mean 'kernel'?" in lines[0]
    assert str(spec) in lines[0]


def test_one_class_and_nan_exit_2(tmp_path):
    frame = pd.DataFrame({"x": [1.0, 2.0, np.nan, 4.0], "y": ["a", "a", "a", "a"]})
    p = tmp_path / "one.parquet"
    frame.to_parquet(p)
    r = _run(["scan", str(p), "--label", "y", "--out", str(tmp_path / "o")])
    assert r.returncode == 2 and "one class only" in r.stderr and len(r.stderr.strip().splitlines()) == 1
    frame["y"] = ["a", "b", "a", "b"]
    frame.to_parquet(p)
    r = _run(["scan", str(p), "--label", "y", "--out", str(tmp_path / "o")])
    assert r.returncode == 2 and "'x' has 1 NaN" in r.stderr and "Traceback" not in r.stderr


def test_second_scan_comes_from_cache(data, tmp_path, capsys):
    path, spec, _ = data
    args = ["scan", str(path), "--spec", str(spec), "--out", str(tmp_path / "r"), "--quiet"]
    assert main(args) == 0
    first = pd.read_parquet(tmp_path / "r" / "rows.parquet")
    capsys.readouterr()
    assert main(args) == 0
    assert "from cache" in capsys.readouterr().out
    pd.testing.assert_frame_equal(first, pd.read_parquet(tmp_path / "r" / "rows.parquet"))


def test_scan_piped_into_a_reader_that_stops_early(data, tmp_path):
    """`holdfast scan ... | head -1`: the reader closes the pipe; the scan's files are written and no
    internal error is reported (common practice for command-line tools: a closed stdout is not a failure)."""
    path, spec, _ = data
    out = tmp_path / "o"
    proc = subprocess.Popen(
        [sys.executable, "-m", "holdfast.cli", "scan", str(path), "--spec", str(spec), "--out", str(out)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    assert proc.stdout is not None and proc.stderr is not None
    proc.stdout.readline()  # the first line only, then hang up, as `head -1` does
    proc.stdout.close()
    err = proc.stderr.read()
    assert proc.wait(timeout=300) == 0, err
    assert "internal error" not in err and "Traceback" not in err
    assert (out / "rows.parquet").is_file() and (out / "summary.json").is_file()
