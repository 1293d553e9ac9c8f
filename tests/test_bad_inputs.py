"""Bad inputs and a hostile environment through the CLI: exit code 2, exactly one message line naming the
column, file or key (and the way out), and nothing half-written in the output folder.

Full and read-only folders are real where the test process may mount a tmpfs (root in a container) and
are otherwise made with ``chmod`` (read-only, non-root) or by an injected ``ENOSPC`` from ``os.fsync``
(full disk: file systems report a full disk at write or at fsync; POSIX ``fsync(2)``).
"""

from __future__ import annotations

import errno
import os
import shutil
import subprocess
import warnings
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from holdfast.cli import main
from holdfast.data.load import fingerprint_file
from holdfast.data.prepare import prepare
from holdfast.data.spec import default_spec, spec_from_text
from holdfast.engine.cache import cache_dir

N = 120


@pytest.fixture(autouse=True)
def _cache(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(tmp_path / "cache"))


def _base(n: int = N, seed: int = 4) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x1, x2 = rng.normal(size=n), rng.normal(size=n)
    return pd.DataFrame(
        {
            "lot": [f"L{i:04d}" for i in range(n)],
            "diameter": x1,
            "firmness": x2,
            "grade": np.where(x1 + x2 + 0.4 * rng.normal(size=n) > 0, "premium", "processing"),
        }
    )


def _continuous(f: pd.DataFrame) -> pd.DataFrame:
    f["grade"] = np.round(np.random.default_rng(1).uniform(0, 100, len(f)), 2)  # many distinct floats
    return f


def _many_classes(f: pd.DataFrame) -> pd.DataFrame:
    f["grade"] = np.arange(len(f)) % 60  # 60 integer classes
    return f


def _free_text(f: pd.DataFrame) -> pd.DataFrame:
    f = f.head(60).copy()
    f["comment"] = [f"crate looked {w} on belt {i}" for i, w in enumerate(["fine", "odd"] * 30)]
    return f


def _stray_text(f: pd.DataFrame) -> pd.DataFrame:
    f["weight"] = [f"{v:.1f}" for v in np.linspace(100, 300, len(f))]
    f.loc[17, "weight"] = "heavy"  # CSV readers take "n/a" for a missing value, not this
    return f


def _huge(f: pd.DataFrame) -> pd.DataFrame:
    f["diameter"] = f["diameter"] * 1e300
    return f


SPEC_ID = '[data]\nlabel = "grade"\nid = "lot"\n'
LONG = "x" * 100_000

#: name -> (frame edit, file suffix, spec text or None for --label grade, extra args, expected pieces)
CASES: dict[str, tuple[Callable | None, str, str | None, list[str], list[str]]] = {
    "C far too large": (None, ".parquet", SPEC_ID + "[learner]\nC = 1e300\n", [], ["'learner.C'", "100000"]),
    "C 1e6": (None, ".parquet", SPEC_ID + "[learner]\nC = 1e6\n", [], ["'learner.C' must be between"]),
    "gamma tiny": (None, ".parquet", SPEC_ID + "[learner]\ngamma = 1e-9\n", [], ["'learner.gamma'"]),
    "poly degree 50": (
        None,
        ".parquet",
        SPEC_ID + '[learner]\nkernel = "poly"\ndegree = 50\n',
        [],
        ["'learner.degree'", "10"],
    ),
    "continuous label": (_continuous, ".parquet", SPEC_ID, [], ["label column 'grade'", "bin it"]),
    "too many classes": (_many_classes, ".parquet", SPEC_ID, [], ["label column 'grade'", "at most 50"]),
    "free text feature": (_free_text, ".parquet", SPEC_ID, [], ["'comment'", "data.features"]),
    "stray text cell": (_stray_text, ".csv", SPEC_ID, [], ["'weight'", "row 17", "'heavy'"]),
    "huge values unscaled": (
        _huge,
        ".parquet",
        SPEC_ID + '[prepare]\nscale = "none"\n',
        [],
        ["'diameter'", "prepare.scale"],
    ),
    "100k-character column name": (None, ".parquet", f'[data]\nlabel = "{LONG}"\n', [], ["no column 'xxxx"]),
    "unknown spec key": (None, ".parquet", SPEC_ID + "[learner]\nCC = 1\n", [], ["'learner.CC'"]),
    "jobs zero": (None, ".parquet", None, ["--jobs", "0"], ["--jobs"]),
    "out is a file": (None, ".parquet", None, ["--out", "{tmp}/taken"], ["taken", "--out must be a folder"]),
    "out under a file": (None, ".parquet", None, ["--out", "{tmp}/taken/res"], ["taken/res", "--out"]),
    "cache under a file": (None, ".parquet", None, ["--env-cache", "{tmp}/taken/c"], ["--no-cache"]),
}


def _run(tmp_path: Path, capsys, edit, suffix, spec_text, extra) -> tuple[int, list[str], str, Path]:
    frame = _base()
    if edit is not None:
        frame = edit(frame)
    data = tmp_path / f"lots{suffix}"
    if suffix == ".csv":
        frame.to_csv(data, index=False)
    else:
        frame.to_parquet(data, index=False)
    (tmp_path / "taken").write_text("a file, not a folder")
    out = tmp_path / "res"
    args = ["scan", str(data), "--out", str(out), "--quiet"]
    if spec_text is None:
        args += ["--label", "grade", "--id", "lot"]
    else:
        (tmp_path / "s.toml").write_text(spec_text)
        args += ["--spec", str(tmp_path / "s.toml")]
    extra = [a.replace("{tmp}", str(tmp_path)) for a in extra]
    if "--env-cache" in extra:
        i = extra.index("--env-cache")
        os.environ["HOLDFAST_CACHE_DIR"] = extra[i + 1]
        extra = extra[:i] + extra[i + 2 :]
    if "--out" in extra:
        i = extra.index("--out")
        args[args.index("--out") + 1] = extra[i + 1]
        out = Path(extra[i + 1])
        extra = extra[:i] + extra[i + 2 :]
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a library warning is a failure too
        code = main(args + extra)
    captured = capsys.readouterr()
    return code, captured.err.splitlines(), captured.out, out


def _written(folder: Path) -> list[Path]:
    return sorted(folder.rglob("*")) if folder.is_dir() else []


@pytest.mark.parametrize("case", list(CASES))
def test_bad_input_is_one_line_exit_2_nothing_written(case: str, tmp_path: Path, capsys) -> None:
    edit, suffix, spec_text, extra, expected = CASES[case]
    code, err, out_text, out = _run(tmp_path, capsys, edit, suffix, spec_text, extra)
    assert code == 2, err
    assert len(err) == 1 and err[0].startswith("holdfast: error: "), err
    assert len(err[0]) <= 1100, f"{len(err[0])} characters"
    for piece in expected:
        assert piece in err[0], (piece, err[0][:300])
    assert out_text == ""
    if out.is_dir():
        assert _written(out) == [], "half-written output"


def test_labels_differing_only_in_space_or_case_are_warned(tmp_path: Path, capsys) -> None:
    def edit(f: pd.DataFrame) -> pd.DataFrame:
        f.loc[:9, "grade"] = "premium "  # a trailing space
        return f

    code, err, _, _ = _run(tmp_path, capsys, edit, ".parquet", SPEC_ID, [])
    assert code == 0
    warned = [line for line in err if line.startswith("holdfast: warning:")]
    assert len(warned) == 1 and "label column 'grade'" in warned[0]
    assert "'premium'" in warned[0] and "'premium '" in warned[0]


def test_features_at_1e300_scale_without_overflow_warnings() -> None:
    frame = _base()
    frame["diameter"] = np.where(np.arange(N) % 2 == 0, 1e300, -1e300) * np.linspace(0.5, 1.0, N)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # numpy's overflow RuntimeWarning would raise here
        prepared = prepare(frame, spec_from_text(SPEC_ID), source="lots.parquet")
    column = prepared.X[:, prepared.feature_names.index("diameter")]
    assert np.isfinite(prepared.X).all()
    assert abs(column.mean()) < 1e-9 and abs(column.std() - 1.0) < 1e-9  # standard-scaled as usual
    # the same order of rows as a plain standard scaling of the values divided by 1e300
    plain = frame["diameter"].to_numpy() / 1e300
    assert np.array_equal(np.argsort(column, kind="stable"), np.argsort(plain, kind="stable"))


def test_long_names_are_cut_in_messages() -> None:
    frame = _base()
    with pytest.raises(Exception) as info:
        prepare(frame, default_spec(LONG), source="lots.parquet")
    assert len(str(info.value)) < 600 and "characters" in str(info.value)


# ---------------------------------------------------------------------------------- the environment
def test_garbage_cache_file_is_one_line(tmp_path: Path, capsys) -> None:
    frame = _base()
    data = tmp_path / "lots.parquet"
    frame.to_parquet(data, index=False)
    spec = default_spec("grade", id_column="lot")
    folder = cache_dir(fingerprint_file(data), spec.fingerprint(), tmp_path / "cache")
    folder.mkdir(parents=True)
    (folder / "refits.sqlite").write_bytes(b"\x00garbage, not a database" * 100)
    out = tmp_path / "res"
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        code = main(["scan", str(data), "--label", "grade", "--id", "lot", "--out", str(out), "--quiet"])
    err = capsys.readouterr().err.splitlines()
    assert code == 2 and len(err) == 1
    assert "refits.sqlite" in err[0] and "--no-cache" in err[0]
    assert _written(out) == []
    code = main(
        ["scan", str(data), "--label", "grade", "--id", "lot", "--out", str(out), "--quiet", "--no-cache"]
    )
    assert code == 0 and (out / "rows.parquet").is_file()  # the way out named in the message works


def test_full_disk_at_fsync_is_one_line(tmp_path: Path, capsys, monkeypatch: pytest.MonkeyPatch) -> None:
    frame = _base()
    data = tmp_path / "lots.parquet"
    frame.to_parquet(data, index=False)
    out = tmp_path / "res"

    def full(fd: int) -> None:
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    import holdfast.atomic

    monkeypatch.setattr(holdfast.atomic.os, "fsync", full)
    code = main(
        ["scan", str(data), "--label", "grade", "--id", "lot", "--out", str(out), "--quiet", "--no-cache"]
    )
    err = capsys.readouterr().err.splitlines()
    assert code == 2 and len(err) == 1, err
    assert str(out) in err[0] and "free disk space" in err[0]
    assert _written(out) == []


def _mount_tmpfs(folder: Path, options: str) -> bool:
    if os.geteuid() != 0 or shutil.which("mount") is None:
        return False
    folder.mkdir(parents=True, exist_ok=True)
    return subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(folder)]).returncode == 0


@pytest.mark.parametrize("kind", ["full", "read-only"])
def test_real_full_or_read_only_out(kind: str, tmp_path: Path, capsys) -> None:
    data = tmp_path / "lots.parquet"
    _base().to_parquet(data, index=False)
    out = tmp_path / "res"
    if os.geteuid() != 0 and kind == "read-only":
        out.mkdir()
        out.chmod(0o555)
        mounted = False
    else:
        mounted = _mount_tmpfs(out, "size=4k" if kind == "full" else "size=64k,ro")
        if not mounted:
            pytest.skip("needs a tmpfs mount (root in a container)")
    try:
        code = main(
            ["scan", str(data), "--label", "grade", "--id", "lot", "--out", str(out), "--quiet", "--no-cache"]
        )
        err = capsys.readouterr().err.splitlines()
        assert code == 2 and len(err) == 1, err
        assert str(out) in err[0]
        assert ("free disk space" if kind == "full" else "read-only") in err[0]
        assert [p for p in _written(out) if p.stat().st_size > 0] == []
    finally:
        if mounted:
            subprocess.run(["umount", "-l", str(out)])
        else:
            out.chmod(0o755)


def test_real_full_cache_disk(tmp_path: Path, capsys, monkeypatch: pytest.MonkeyPatch) -> None:
    data = tmp_path / "lots.parquet"
    _base().to_parquet(data, index=False)
    cache = tmp_path / "cache-disk"
    if not _mount_tmpfs(cache, "size=4k"):
        pytest.skip("needs a tmpfs mount (root in a container)")
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(cache))
    out = tmp_path / "res"
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            code = main(["scan", str(data), "--label", "grade", "--id", "lot", "--out", str(out), "--quiet"])
        err = capsys.readouterr().err.splitlines()
        assert code == 2 and len(err) == 1, err
        assert str(cache) in err[0] and "free disk space" in err[0] and "--no-cache" in err[0]
        assert _written(out) == []
    finally:
        subprocess.run(["umount", "-l", str(cache)])
