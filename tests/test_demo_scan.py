"""The whole scan on the packhouse demo data: planted grader slips are over-represented among LOO misses.

Invented demo data (sample_data/README.md); the ground truth is sample_data/packhouse_planted.csv.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from holdfast.data.spec import load_spec
from holdfast.engine.scan import run_scan

SAMPLE = Path(__file__).resolve().parent.parent / "sample_data"


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    spec = load_spec(SAMPLE / "packhouse.toml")
    scan = run_scan(SAMPLE / "packhouse.parquet", spec, cache_root=tmp_path_factory.mktemp("cache"))
    planted = pd.read_csv(SAMPLE / "packhouse_planted.csv")
    return scan, planted


def test_planted_rows_over_represented_among_loo_misses(demo):
    scan, planted = demo
    rows = scan.findings.rows
    train = rows[~rows["held_out"]]
    planted_ids = set(planted.loc[~planted["holdout"].astype(bool), "lot_id"])
    is_planted = train["id"].isin(planted_ids)
    misses = train["loo_miss"]
    share_among_misses = is_planted[misses].mean()
    base_rate = is_planted.mean()
    # measured: 69 of the 77 planted training rows are LOO misses; 39% of the 175 misses vs a 3% base rate
    assert is_planted[misses].sum() >= 0.8 * is_planted.sum()
    assert share_among_misses >= 8 * base_rate
    # every LOO miss is a support row (Vapnik 1995: LOO errors <= d)
    assert train.loc[misses, "support"].all()
    assert scan.findings.summary["loo_errors"] == int(misses.sum()) <= scan.findings.summary["d"]


def test_demo_summary_is_consistent(demo):
    scan, _ = demo
    s = scan.findings.summary
    assert s["m"] + s["held_out"]["n"] == s["data"]["rows_total"] == 3000
    assert s["bounded"] + s["free"] == s["d"]
    assert 0.1 <= s["bounds"]["support_fraction"]["value"] <= 0.3
    assert s["bounds"]["test_set"]["value"] > s["held_out"]["error_rate"]
