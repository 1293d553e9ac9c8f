"""Shared test settings.

Hypothesis profiles: the default explores new random cases on every run (a failure is saved in
``.hypothesis/`` and replayed first next time); ``HYPOTHESIS_PROFILE=ci`` (set by ``.ci/run``) draws the
same cases on every run, so that a CI result can be reproduced. Cases found locally that matter become
fixed tests (e.g. ``test_a_refit_whose_intercept_is_not_unique_matches_a_full_refit``).
"""

from __future__ import annotations

import os

from hypothesis import settings

settings.register_profile("ci", derandomize=True, print_blob=True)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "default"))
