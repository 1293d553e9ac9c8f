"""score_parts: the parts of the suspicion score add up to suspicion_score, row by row.

The check is against the engine's own formula (holdfast.insight.score.suspicion_score) on random per-row
frames with missing values and values beyond the clips, so a part that is shown with the wrong weight,
clip or fallback fails.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from holdfast.insight.score import LINEAR_CLIP, MARGIN_CLIP, W_DISSENT, W_LINEAR, score_parts, suspicion_score

maybe = st.one_of(st.just(float("nan")), st.floats(-6.0, 6.0))


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(maybe, st.booleans(), maybe, maybe), min_size=1, max_size=20))
def test_parts_sum_to_the_score(rows: list[tuple[float, bool, float, float]]) -> None:
    frame = pd.DataFrame(rows, columns=["loo_margin", "loo_miss", "neighbour_dissent_avg", "linear_logit"])
    frame["held_out"] = False
    expected = suspicion_score(frame)
    for i, (lm, miss, dissent, logit) in enumerate(rows):
        parts = score_parts(lm, miss, dissent, logit)
        assert np.isclose(sum(p[4] for p in parts), expected[i], rtol=0, atol=1e-12)


def test_weights_clips_and_fallbacks() -> None:
    parts = {name: rest for name, *rest in score_parts(-5.0, True, 0.8, 9.0)}
    assert parts["LOO margin"] == [-1.0, -5.0, -MARGIN_CLIP, MARGIN_CLIP]
    assert parts["neighbour dissent"][0] == W_DISSENT and parts["neighbour dissent"][3] == W_DISSENT * 0.8
    assert parts["logistic log-odds"][2:] == [LINEAR_CLIP, -W_LINEAR * LINEAR_CLIP]
    # a missing LOO margin (a row whose refit has not arrived) counts as +-1 by the LOO miss
    missing = {name: rest for name, *rest in score_parts(float("nan"), False, float("nan"), float("nan"))}
    assert np.isnan(missing["LOO margin"][1]) and missing["LOO margin"][2] == 1.0
    assert missing["neighbour dissent"][3] == 0.0 and missing["logistic log-odds"][3] == 0.0
