"""Regenerate the packhouse demo data set into this folder.

The generator is :mod:`holdfast.data.demo` (inside the package, so ``holdfast demo`` works from an
installed copy); this script re-exports it and writes into sample_data/ by default:
``python sample_data/make_packhouse.py [OUT_DIR]``.
"""

from __future__ import annotations

import sys
from pathlib import Path

from holdfast.data.demo import *  # noqa: F403 - re-exported for tests and notebooks
from holdfast.data.demo import main as _main

if __name__ == "__main__":
    raise SystemExit(_main(sys.argv[1:], default_dir=Path(__file__).resolve().parent))
