"""What the insight functions read from a finished scan, as structural types.

The scan itself (:class:`holdfast.engine.scan.Scan`) lives in the engine, one layer above insight; the
explanation and the row detail only need the attributes named here, so they depend on these protocols and
never import the engine.
"""

from __future__ import annotations

from typing import Any, Protocol

import numpy as np
import pandas as pd

from holdfast.data.prepare import Prepared
from holdfast.data.spec import Spec


class FindingsView(Protocol):
    """The per-row frame and the summary of a scan."""

    rows: pd.DataFrame
    summary: dict[str, Any]


class ScanView(Protocol):
    """A finished scan: its findings, the prepared data, the spec and the flipped rows per left-out row."""

    findings: FindingsView
    prepared: Prepared
    spec: Spec
    flips: dict[int, np.ndarray]
