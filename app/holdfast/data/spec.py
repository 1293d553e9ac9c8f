"""The model spec: a small TOML file saying which column is the label, how to prepare features,
which learner with which parameters, and how to run.

Unknown keys and bad values raise :class:`holdfast.errors.SpecError` with one line naming the file and
key, and the nearest valid key when there is one.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import tomllib
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from holdfast.errors import SpecError

SECTIONS = ("data", "prepare", "learner", "run", "insight")
DATA_KEYS = ("label", "id", "features", "split")
PREPARE_KEYS = ("scale", "categorical")
RUN_KEYS = ("jobs", "backend", "scheduler", "cache")
INSIGHT_KEYS = ("k", "delta")
#: Learner keys by family; a family's learner module validates the values.
LEARNER_KEYS: dict[str, tuple[str, ...]] = {
    "svm": ("family", "kernel", "C", "gamma", "degree", "coef0", "class_weight", "tol", "ties"),
    "knn": ("family", "k", "weights", "metric"),
    "perceptron": ("family", "epochs", "intercept"),
    "logistic": ("family", "C", "tol"),
}


@dataclass(frozen=True)
class DataSpec:
    """Which columns play which part."""

    label: str
    id: str | None = None
    features: tuple[str, ...] | None = None
    split: str | None = None


@dataclass(frozen=True)
class PrepareSpec:
    """Unsupervised preparation, fitted once on the training rows."""

    scale: str = "standard"
    categorical: str = "onehot"


@dataclass(frozen=True)
class RunSpec:
    """How to run the refits."""

    jobs: int = -1
    backend: str = "joblib"
    scheduler: str | None = None
    cache: bool = True


@dataclass(frozen=True)
class InsightSpec:
    """Parameters of the evidence: neighbours k and the confidence parameter delta of the bounds."""

    k: int = 10
    delta: float = 0.05


@dataclass(frozen=True)
class Spec:
    """A validated spec. ``learner`` keeps the raw learner table (family included)."""

    data: DataSpec
    prepare: PrepareSpec = field(default_factory=PrepareSpec)
    learner: dict[str, Any] = field(default_factory=lambda: {"family": "svm"})
    run: RunSpec = field(default_factory=RunSpec)
    insight: InsightSpec = field(default_factory=InsightSpec)
    source: str = "<spec>"

    def to_dict(self) -> dict[str, Any]:
        """Plain dict of the spec (without its source), JSON- and TOML-ready."""
        d = {
            "data": {k: v for k, v in asdict(self.data).items() if v is not None},
            "prepare": asdict(self.prepare),
            "learner": dict(self.learner),
            "run": {k: v for k, v in asdict(self.run).items() if v is not None},
            "insight": asdict(self.insight),
        }
        if self.data.features is not None:
            d["data"]["features"] = list(self.data.features)
        return d

    def to_toml(self) -> str:
        """Render the spec as TOML text (stored in the journal; read back with :func:`parse_spec`)."""
        lines: list[str] = []
        for section, table in self.to_dict().items():
            lines.append(f"[{section}]")
            for key, value in table.items():
                lines.append(f"{key} = {_toml_value(value)}")
            lines.append("")
        return "\n".join(lines)

    def fingerprint(self) -> str:
        """Short hash of everything that changes the scan's results (not jobs/backend/cache)."""
        d = self.to_dict()
        d.pop("run", None)
        text = json.dumps(d, sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    return _toml_string(str(value))


def _toml_string(text: str) -> str:
    """A TOML basic string: quote, backslash and control characters escaped, everything else literal.

    (``json.dumps`` would write characters outside the Basic Multilingual Plane as surrogate pairs, which
    TOML 1.0 refuses: "Escaped character is not a Unicode scalar value".)
    """
    out = []
    for ch in text:
        if ch in ('"', "\\"):
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _unknown(where: str, key: str, valid: tuple[str, ...] | list[str], source: str) -> SpecError:
    near = difflib.get_close_matches(key, list(valid), n=1, cutoff=0.5)
    if not near:
        low = {v.lower(): v for v in valid}
        near = [low[key.lower()]] if key.lower() in low else []
    hint = f"; did you mean '{near[0]}'?" if near else f"; valid keys: {', '.join(valid)}"
    return SpecError(f"{source}: unknown key '{where}{key}'{hint}")


def _expect(value: Any, types: type | tuple[type, ...], key: str, source: str, what: str) -> Any:
    if isinstance(value, bool) and bool not in (types if isinstance(types, tuple) else (types,)):
        raise SpecError(f"{source}: '{key}' must be {what}, got {value!r}")
    if not isinstance(value, types):
        raise SpecError(f"{source}: '{key}' must be {what}, got {value!r}")
    return value


def _choice(value: Any, choices: tuple[str, ...], key: str, source: str) -> str:
    if not isinstance(value, str) or value not in choices:
        near = (
            difflib.get_close_matches(value, list(choices), n=1, cutoff=0.6) if isinstance(value, str) else []
        )
        hint = f"; did you mean '{near[0]}'?" if near else ""
        raise SpecError(f"{source}: '{key}' must be one of {' | '.join(choices)}, got {value!r}{hint}")
    return value


def parse_spec(table: dict[str, Any], source: str = "<spec>") -> Spec:
    """Validate a parsed TOML table into a :class:`Spec`."""
    for section in table:
        if section not in SECTIONS:
            raise _unknown("", section, SECTIONS, source)
        if not isinstance(table[section], dict):
            raise SpecError(f"{source}: '{section}' must be a table ([{section}])")
    data = table.get("data")
    if not data or "label" not in data:
        raise SpecError(f"{source}: missing required key 'data.label' (the label column)")
    for key in data:
        if key not in DATA_KEYS:
            raise _unknown("data.", key, DATA_KEYS, source)
    label = _expect(data["label"], str, "data.label", source, "a column name")
    id_col = _expect(data["id"], str, "data.id", source, "a column name") if "id" in data else None
    split = _expect(data["split"], str, "data.split", source, "a column name") if "split" in data else None
    features = None
    if "features" in data:
        feats = _expect(data["features"], list, "data.features", source, "a list of column names")
        if not feats or not all(isinstance(f, str) for f in feats):
            raise SpecError(f"{source}: 'data.features' must be a non-empty list of column names")
        if len(set(feats)) != len(feats):
            dup = next(f for f in feats if feats.count(f) > 1)
            raise SpecError(f"{source}: 'data.features' lists column '{dup}' twice")
        for f in feats:
            if f in (label, id_col, split):
                raise SpecError(f"{source}: 'data.features' includes '{f}', which is the label, id or split")
        features = tuple(feats)

    prep = table.get("prepare", {})
    for key in prep:
        if key not in PREPARE_KEYS:
            raise _unknown("prepare.", key, PREPARE_KEYS, source)
    prepare = PrepareSpec(
        scale=_choice(prep.get("scale", "standard"), ("standard", "none"), "prepare.scale", source),
        categorical=_choice(
            prep.get("categorical", "onehot"), ("onehot", "error"), "prepare.categorical", source
        ),
    )

    learner = dict(table.get("learner", {}))
    family = learner.setdefault("family", "svm")
    if not isinstance(family, str) or family not in LEARNER_KEYS:
        raise SpecError(
            f"{source}: 'learner.family' must be one of {' | '.join(LEARNER_KEYS)}, got {family!r}"
        )
    for key in learner:
        if key not in LEARNER_KEYS[family]:
            other = [f for f, keys in LEARNER_KEYS.items() if key in keys and f != family]
            if other:
                raise SpecError(
                    f"{source}: key 'learner.{key}' belongs to family {other[0]!r}, not {family!r}; "
                    f"valid keys for {family!r}: {', '.join(LEARNER_KEYS[family])}"
                )
            raise _unknown("learner.", key, LEARNER_KEYS[family], source)
    from holdfast.learners import validate_params

    learner = validate_params(learner, source)

    run_t = table.get("run", {})
    for key in run_t:
        if key not in RUN_KEYS:
            raise _unknown("run.", key, RUN_KEYS, source)
    jobs = _expect(run_t.get("jobs", -1), int, "run.jobs", source, "a positive integer or -1")
    if jobs == 0 or jobs < -1:
        raise SpecError(f"{source}: 'run.jobs' must be a positive integer or -1 (all cores), got {jobs}")
    backend = _choice(run_t.get("backend", "joblib"), ("joblib", "threads", "dask"), "run.backend", source)
    scheduler = run_t.get("scheduler")
    if scheduler is not None:
        _expect(scheduler, str, "run.scheduler", source, "a scheduler address such as 'tcp://127.0.0.1:8786'")
    cache = _expect(run_t.get("cache", True), bool, "run.cache", source, "true or false")
    run = RunSpec(jobs=jobs, backend=backend, scheduler=scheduler, cache=cache)

    ins = table.get("insight", {})
    for key in ins:
        if key not in INSIGHT_KEYS:
            raise _unknown("insight.", key, INSIGHT_KEYS, source)
    k = _expect(ins.get("k", 10), int, "insight.k", source, "a positive integer")
    if k < 1:
        raise SpecError(f"{source}: 'insight.k' must be a positive integer, got {k}")
    delta = _expect(ins.get("delta", 0.05), (int, float), "insight.delta", source, "a number in (0, 1)")
    if not 0 < delta < 1:
        raise SpecError(f"{source}: 'insight.delta' must be in (0, 1), got {delta}")
    return Spec(
        data=DataSpec(label=label, id=id_col, features=features, split=split),
        prepare=prepare,
        learner=learner,
        run=run,
        insight=InsightSpec(k=k, delta=float(delta)),
        source=source,
    )


def load_spec(path: str | Path) -> Spec:
    """Read and validate a spec file."""
    p = Path(path)
    if not p.exists():
        raise SpecError(f"{p}: spec file not found")
    if p.is_dir():
        raise SpecError(f"{p}: is a folder, expected a TOML spec file")
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"{p}: cannot read spec file ({exc.__class__.__name__})") from None
    return spec_from_text(text, str(p))


def spec_from_text(text: str, source: str = "<spec>") -> Spec:
    """Parse TOML text into a validated :class:`Spec`."""
    try:
        table = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{source}: not valid TOML ({exc})") from None
    return parse_spec(table, source)


def default_spec(label: str, *, id_column: str | None = None, jobs: int = -1) -> Spec:
    """The spec used without a spec file: SVM, RBF kernel, C=1, gamma="scale"."""
    data = {"label": label} if id_column is None else {"label": label, "id": id_column}
    return parse_spec({"data": data, "run": {"jobs": jobs}}, source="--label")
