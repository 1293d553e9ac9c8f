"""Histograms of one per-row quantity (margin, score), optionally split by group (class).

The faces draw these counts; they compute nothing themselves. Edges are deterministic: the same values
give the same edges, whatever the grouping, so the groups of one histogram share one axis.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

#: group name used when ``by`` is not given
ALL = "all"
#: group name for rows whose group value is missing
MISSING_GROUP = "(missing)"


@dataclass
class Histogram:
    """Counts of values in shared bins, per group.

    Attributes
    ----------
    edges
        ``bins + 1`` increasing bin edges; bin ``i`` is ``[edges[i], edges[i+1])``, the last bin is closed
        (as in ``numpy.histogram``).
    counts
        group name -> int array of ``bins`` counts, in group order.
    total
        number of finite values counted over all groups (the sum of all counts).
    missing
        group name -> number of values that were NaN or infinite (ignored by the counts).
    """

    edges: np.ndarray
    counts: dict[str, np.ndarray]
    total: int
    missing: dict[str, int] = field(default_factory=dict)

    @property
    def bins(self) -> int:
        """Number of bins."""
        return len(self.edges) - 1

    @property
    def groups(self) -> list[str]:
        """Group names in order."""
        return list(self.counts)

    @property
    def missing_total(self) -> int:
        """Values left out of the counts because they were NaN or infinite."""
        return int(sum(self.missing.values()))


def _group_names(by: Any, n: int) -> np.ndarray:
    """Group value of every row as text; missing values become ``MISSING_GROUP``."""
    s = pd.Series(by)
    if len(s) != n:
        raise ValueError(f"histogram: 'by' has {len(s)} values, 'values' has {n}")
    missing = s.isna().to_numpy()
    names = np.array([str(v) for v in s.tolist()], dtype=object)
    names[missing] = MISSING_GROUP
    return names


def _order(names: np.ndarray, by: Any, groups: Sequence[Any] | None) -> list[str]:
    if groups is not None:
        return [str(g) for g in groups]
    if isinstance(by, pd.Series) and isinstance(by.dtype, pd.CategoricalDtype):
        order = [str(c) for c in by.cat.categories]
    else:
        order = sorted({str(v) for v in names.tolist()} - {MISSING_GROUP})
    if (names == MISSING_GROUP).any():
        order.append(MISSING_GROUP)
    return order


def _edges(lo: float, hi: float, bins: int) -> np.ndarray:
    """Equal-width edges over ``[lo, hi]``; numpy's rule (widen by 0.5 each side) for ``lo == hi``, and
    wide enough to give ``bins`` distinct edges at any magnitude."""
    if lo == hi:
        lo, hi = lo - 0.5, hi + 0.5
    min_span = 4.0 * bins * float(np.spacing(max(abs(lo), abs(hi))))
    if hi - lo < min_span:
        mid = lo / 2.0 + hi / 2.0
        lo, hi = mid - min_span / 2.0, mid + min_span / 2.0
    return np.histogram_bin_edges(np.empty(0), bins=bins, range=(lo, hi))


def histogram(
    values: Any,
    *,
    bins: int = 20,
    by: Any = None,
    range: tuple[float, float] | None = None,
    groups: Sequence[Any] | None = None,
) -> Histogram:
    """Count ``values`` in ``bins`` equal-width bins, per group of ``by``.

    Parameters
    ----------
    values
        Numbers (array-like). NaN and infinite values are not counted; ``Histogram.missing`` reports them.
    bins
        Number of equal-width bins (at least 1).
    by
        Optional group of every value (array-like of the same length, e.g. the class label). Groups are
        named by ``str`` of their value; missing group values form the group ``"(missing)"``.
    range
        ``(low, high)`` of the bins; values outside are not counted (and not reported as missing). Default:
        the smallest and largest finite value (widened by 0.5 each side when they are equal, as numpy does,
        and further when the values are too large for ``bins`` distinct edges in that span).
    groups
        Optional group order (and groups to include even when empty). Default: the categories of a
        categorical ``by``, else the sorted group names. Values whose group is not listed are not counted.

    Returns
    -------
    Histogram
        Edges shared by all groups and the counts per group. The binning is ``numpy.histogram``'s
        (NumPy reference: ``numpy.histogram_bin_edges`` with an integer ``bins``).
    """
    if int(bins) < 1:
        raise ValueError(f"histogram: bins must be at least 1, got {bins}")
    v = np.asarray(pd.Series(values, dtype="float64").to_numpy(), dtype=np.float64)
    finite = np.isfinite(v)
    if range is None:
        if finite.any():
            lo, hi = float(v[finite].min()), float(v[finite].max())
        else:
            lo, hi = 0.0, 1.0
    else:
        lo, hi = float(range[0]), float(range[1])
        if not (np.isfinite(lo) and np.isfinite(hi)) or hi < lo:
            raise ValueError(f"histogram: range must be finite with low <= high, got {range}")
    edges = _edges(lo, hi, int(bins))
    if by is None:
        names = np.full(len(v), ALL, dtype=object)
        order = [ALL] if groups is None else [str(g) for g in groups]
    else:
        names = _group_names(by, len(v))
        order = _order(names, by, groups)
    counts: dict[str, np.ndarray] = {}
    missing: dict[str, int] = {}
    for g in order:
        in_group = names == g
        counts[g] = np.histogram(v[in_group & finite], bins=edges)[0].astype(np.int64)
        missing[g] = int((in_group & ~finite).sum())
    total = int(sum(int(c.sum()) for c in counts.values()))
    return Histogram(edges=edges, counts=counts, total=total, missing=missing)
