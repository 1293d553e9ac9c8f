"""Histograms checked against ``numpy.histogram`` / ``numpy.histogram_bin_edges`` (Harris et al. 2020,
"Array programming with NumPy", Nature 585), run on the finite values of each group."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.datasets import load_wine

from holdfast.insight.histograms import ALL, MISSING_GROUP, histogram


def test_counts_by_class_match_numpy_histogram():
    """Wine data (scikit-learn's bundled copy of the UCI wine recognition data, Forina et al.; from
    memory): alcohol content by cultivar, with a few values knocked out."""
    data = load_wine(as_frame=True)
    values = data.data["alcohol"].to_numpy().copy()
    values[[3, 50, 120]] = [np.nan, np.inf, -np.inf]
    cultivar = np.array(["c0", "c1", "c2"], dtype=object)[data.target.to_numpy()]
    h = histogram(values, bins=12, by=cultivar)
    finite = np.isfinite(values)
    edges = np.histogram_bin_edges(values[finite], bins=12)
    np.testing.assert_array_equal(h.edges, edges)
    assert h.groups == ["c0", "c1", "c2"] and h.bins == 12
    for g in h.groups:
        sel = (cultivar == g) & finite
        np.testing.assert_array_equal(h.counts[g], np.histogram(values[sel], bins=edges)[0])
        assert h.missing[g] == int(((cultivar == g) & ~finite).sum())
    assert h.total == int(finite.sum()) and h.missing_total == 3


def test_without_groups_and_with_range():
    rng = np.random.default_rng(1)
    values = rng.normal(size=500)
    h = histogram(values, bins=7, range=(-1.0, 1.0))
    ref, ref_edges = np.histogram(values, bins=7, range=(-1.0, 1.0))
    np.testing.assert_array_equal(h.edges, ref_edges)
    np.testing.assert_array_equal(h.counts[ALL], ref)
    assert h.total == int(ref.sum()) < 500 and h.missing == {ALL: 0}


def test_group_order_and_missing_group():
    values = pd.Series([0.1, 0.2, 0.3, 0.4, 0.5])
    by = pd.Series(pd.Categorical(["z", "a", None, "z", "a"], categories=["z", "a", "m"]))
    h = histogram(values, bins=2, by=by)
    assert h.groups == ["z", "a", "m", MISSING_GROUP]
    assert h.counts["m"].sum() == 0 and h.counts[MISSING_GROUP].sum() == 1
    h2 = histogram(values, bins=2, by=["b", "a", "b", "a", "c"], groups=["a", "b", "absent"])
    assert h2.groups == ["a", "b", "absent"]
    assert h2.total == 4  # the value of group "c" is not asked for
    assert h2.counts["absent"].tolist() == [0, 0]


def test_degenerate_inputs():
    h = histogram([np.nan, np.nan], bins=3)
    assert h.total == 0 and h.missing_total == 2 and h.bins == 3
    const = histogram([2.0, 2.0, 2.0], bins=4)
    np.testing.assert_array_equal(const.edges, np.histogram_bin_edges([2.0, 2.0, 2.0], bins=4))
    assert const.counts[ALL].sum() == 3
    with pytest.raises(ValueError, match="bins"):
        histogram([1.0], bins=0)
    with pytest.raises(ValueError, match="'by'"):
        histogram([1.0, 2.0], by=["a"])
    with pytest.raises(ValueError, match="range"):
        histogram([1.0], range=(2.0, 1.0))


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.floats(allow_nan=True, allow_infinity=True, width=32) | st.just(np.nan), max_size=60),
    st.integers(1, 15),
    st.integers(1, 4),
)
def test_every_value_is_counted_once(values, bins, n_groups):
    values = np.array(values, dtype=np.float64)
    by = np.arange(len(values)) % n_groups
    h = histogram(values, bins=bins, by=by)
    finite = np.isfinite(values)
    assert h.total + h.missing_total == len(values)
    assert h.total == int(finite.sum())
    assert np.all(np.diff(h.edges) >= 0)
    for g, counts in h.counts.items():
        assert counts.sum() == int(((by.astype(str) == g) & finite).sum())
