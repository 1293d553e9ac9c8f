"""The scan's terminal summary (holdfast.output.terminal): the rows listed and their order come from the
per-row
frame's rank, checked against pandas; data text is shown literally."""

from __future__ import annotations

import numpy as np
import pandas as pd

from holdfast.output.terminal import CELL_MAX, explanation_lines, top_rows_text


def _rows(n: int = 30, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    score = rng.normal(size=n)
    held = np.arange(n) % 5 == 0
    score[held] = np.nan
    rank = pd.Series(-score).rank(method="first", na_option="bottom").astype(int).to_numpy()
    return pd.DataFrame(
        {
            "row": np.arange(n),
            "id": [f"LOT-{i:03d}" for i in range(n)],
            "label": rng.choice(["premium", "processing"], n),
            "loo_prediction": rng.choice(["premium", "processing"], n),
            "score": score,
            "rank": rank,
            "flag_names": np.where(score > 0, "loo_miss,bounded", ""),
            "held_out": held,
        }
    )


def test_top_rows_are_the_best_ranked_training_rows_in_order():
    rows = _rows()
    text = top_rows_text(rows, 5)
    lines = text.strip().splitlines()
    assert "(5 of 24 training rows" in lines[0]
    listed = [line.split()[1] for line in lines[2:]]
    expected = rows[~rows["held_out"]].nsmallest(5, "rank")["id"].tolist()
    assert listed == expected
    top = rows.set_index("id").loc[expected[0]]
    assert f"{top['score']:.3f}" in lines[2] and top["flag_names"] in lines[2]


def test_more_rows_asked_than_there_are():
    rows = _rows(10)
    lines = top_rows_text(rows, 50).strip().splitlines()
    assert len(lines) == 2 + 8  # title, header, the 8 training rows


def test_data_text_is_literal_and_long_cells_are_cut():
    rows = _rows(6)
    rows.loc[1, "id"] = "\x1b[2Jwipe"
    rows.loc[2, "label"] = "x" * 60
    rows["held_out"] = False
    rows["rank"] = np.arange(1, 7)
    text = top_rows_text(rows, 6)
    assert "\x1b" not in text and "\\x1b[2Jwipe" in text
    assert "x" * CELL_MAX not in text and "x" * (CELL_MAX - 1) + "…" in text


def test_explanation_lines_add_up_and_wrap():
    explanation = {
        "composition": {"d": 10, "bounded_misclassified": 3, "bounded_correct": 5, "free": 2},
        "hints": [{"text": "word " * 60}, "plain\nhint"],
    }
    lines = explanation_lines(explanation)
    assert "why d is 10: 3 bounded and misclassified + 5 bounded but correct + 2 free" in lines
    assert all(len(line) <= 100 for line in lines)
    assert "* plain\\nhint" in lines
    assert explanation_lines(None) == []
