"""Shared pieces for the UI tests: a findings-shaped frame and a way to read the screen as text."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from textual.app import App

from .inspector_kit import DataSet, write_dataset


def findings_frame(n: int, seed: int = 0) -> pd.DataFrame:
    """A frame with the findings columns (``holdfast.engine.findings.ROW_COLUMNS``) plus ``decision``.

    The values are random but shaped like a packhouse grading scan: labels are fruit grades, ids are
    crate ids, ``score`` has ties and NaN so that sort rules are exercised.
    """
    rng = np.random.default_rng(seed)
    grades = np.array(["class_1", "class_2", "juice"], dtype=object)
    label = grades[rng.integers(0, 3, n)]
    prediction = grades[rng.integers(0, 3, n)]
    loo_prediction = np.where(rng.random(n) < 0.9, prediction, grades[rng.integers(0, 3, n)])
    support = rng.random(n) < 0.2
    score = np.round(rng.random(n), 2)  # rounded: many ties
    score[rng.random(n) < 0.05] = np.nan
    flags = np.where(loo_prediction != label, "loo_miss", "").astype(object)
    return pd.DataFrame(
        {
            "row": np.arange(n),
            "id": np.array([f"crate-{i:06d}" for i in range(n)], dtype=object),
            "label": label,
            "prediction": prediction,
            "loo_prediction": loo_prediction,
            "loo_miss": loo_prediction != label,
            "support": support,
            "essential": support & (rng.random(n) < 0.5),
            "bounded": support & (rng.random(n) < 0.3),
            "alpha": np.where(support, rng.random(n), 0.0),
            "margin": rng.normal(size=n),
            "flip_count": rng.integers(0, 4, n),
            "score": score,
            "rank": np.arange(1, n + 1),
            "flag_names": flags,
            "held_out": np.zeros(n, dtype=bool),
            "decision": np.full(n, "", dtype=object),
        }
    )


@pytest.fixture
def make_frame() -> Callable[..., pd.DataFrame]:
    """Factory fixture: ``make_frame(n, seed=0)`` -> findings-shaped frame."""
    return findings_frame


def screen_lines(app: App) -> list[str]:
    """The text of every line the compositor would send to the terminal, top to bottom.

    Uses ``Screen._compositor.render_strips`` (Textual 8.2.8): the same strips the headless driver
    would draw, so this is what a user sees, without colours.
    """
    return [strip.text for strip in app.screen._compositor.render_strips()]


@pytest.fixture
def read_screen() -> Callable[[App], list[str]]:
    """Fixture returning ``screen_lines``."""
    return screen_lines


@pytest.fixture(scope="module")
def shared(tmp_path_factory: pytest.TempPathFactory) -> tuple[DataSet, Path]:
    """One data set and one result cache for the module: the first test scans, the others hit the cache."""
    root = tmp_path_factory.mktemp("inspector")
    return write_dataset(root / "data"), root / "cache"


@pytest.fixture
def ds(shared: tuple[DataSet, Path], tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> DataSet:
    """The shared data set copied into this test's folder (so each test has its own session file)."""
    base, cache = shared
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(cache))
    data = tmp_path / base.data.name
    data.write_bytes(base.data.read_bytes())
    spec_path = tmp_path / base.spec_path.name
    spec_path.write_text(base.spec_path.read_text())
    return DataSet(data, spec_path, base.frame)
