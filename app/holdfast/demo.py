"""``holdfast demo``: the fruit-packhouse demo data set, written to a folder the user can see."""

from __future__ import annotations

from pathlib import Path

from holdfast.demo_data import write_packhouse


def write_demo(folder: Path) -> tuple[Path, Path]:
    """Write the demo data, spec and planted-error ground truth into ``folder`` unless already there.

    Existing files are kept (with the session journal beside them, reopening the demo restores its
    decisions). Returns (data path, spec path).
    """
    data, spec = folder / "packhouse.parquet", folder / "packhouse.toml"
    if not (data.exists() and spec.exists()):
        write_packhouse(folder)
    return data, spec
