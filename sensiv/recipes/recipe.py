"""Recipes: a TOML file that names the data, the roles, the covariance and a list of analyses.

A recipe makes a referee-response analysis reproducible: ``sensiv run RECIPE.toml --out DIR``
runs every analysis and writes every table, figure and a report.  Schema (all paths relative to
the recipe file)::

    title = "Irrigation and maize yield (INVENTED data)"   # optional
    seed = 20261201                                         # optional: seeds every resampling
    formats = ["png"]                                       # optional: figure formats

    [[study]]                      # one or more; a recipe without [[study]] is one study
    name = "irrigation"
    description = "..."            # optional

    [study.data]                   # omitted for a study of reported numbers only
    path = "irrigation.csv"
    outcome = "maize_yield"
    treatments = ["irrigation_hours"]
    instruments = ["height_m"]
    controls = ["plot_ha", "soil"] # optional
    cluster = "village"            # optional
    weight = "w"                   # optional
    constant = true                # optional

    [study.inference]              # optional
    se = "cluster"                 # classic | robust | cluster
    level = 0.95
    small = false

    [[study.analysis]]
    kind = "sweep"                 # fit | sweep | prior | corrbound | discrete | published |
    direct = ["-0.005:0.005"]      #   calibrate; the other keys are that command's options
    label = "direct effect of height up to 5 kg/ha per metre"   # optional

Unknown keys, wrong types and missing files are reported with the key and its line.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sensiv.core.errors import InputError

FORMATS = ("png", "pdf", "svg")
SE_CHOICES = ("classic", "robust", "cluster")

# Allowed keys and their types per table; ``float`` accepts TOML integers too.
_TOP = {"title": str, "seed": int, "formats": list, "study": list, "name": str,
        "description": str, "data": dict, "inference": dict, "analysis": list}
_STUDY = {"name": str, "description": str, "data": dict, "inference": dict, "analysis": list}
_DATA = {"path": str, "outcome": str, "treatments": list, "instruments": list,
         "controls": list, "cluster": str, "weight": str, "constant": bool}
_INFERENCE = {"se": str, "level": float, "small": bool}
_COMMON = {"kind": str, "label": str, "seed": int}
_ANALYSES: dict[str, dict[str, type]] = {
    "fit": {},
    "sweep": {"direct": list, "polytope": str, "threshold": float, "points": int,
              "focus": str},
    "prior": {"prior": list, "prior_file": str, "focus": str, "draws": int},
    "corrbound": {"max_ratio": float, "endogeneity": str, "threshold": float, "reps": int,
                  "points": int},
    "discrete": {"budget": float, "monotone": bool, "defier_budget": float,
                 "threshold": float, "reps": int, "points": int, "counts": str},
    "published": {"estimate": float, "se": float, "first_stage": float,
                  "first_stage_se": float, "reduced_form": float, "reduced_form_se": float,
                  "first_stage_f": float, "n": int, "direct": list, "prior": list,
                  "threshold": float, "points": int},
    "calibrate": {"groups": dict, "no_first_stage_group": str},
}
DATA_FREE = ("published",)


@dataclass(frozen=True, slots=True)
class Analysis:
    """One analysis of a study: its kind, options and a label for the report."""

    kind: str
    options: dict[str, Any]
    label: str
    seed: int | None


@dataclass(frozen=True, slots=True)
class Study:
    """Data, roles, inference options and analyses of one study."""

    name: str
    description: str
    data: dict[str, Any] | None
    inference: dict[str, Any]
    analyses: tuple[Analysis, ...]


@dataclass(frozen=True, slots=True)
class Recipe:
    """A parsed, validated recipe (paths resolved against the recipe's folder)."""

    path: Path
    title: str
    seed: int | None
    formats: tuple[str, ...]
    studies: tuple[Study, ...]


@dataclass(frozen=True, slots=True)
class AnalysisRun:
    """A finished analysis: the study, the analysis and its result object."""

    study: str
    index: int
    analysis: Analysis
    result: Any

    @property
    def stem(self) -> str:
        return f"{self.study}-{self.index}-{self.analysis.kind}"


@dataclass(frozen=True, slots=True)
class RunResult:
    recipe: Recipe
    runs: tuple[AnalysisRun, ...] = field(default=())


# ----------------------------------------------------------------------------- parsing
class _Lines:
    """Finds the line of a key in the recipe text, for error messages.

    ``scope`` narrows the search to the text after the n-th header of a table array
    (``("analysis", 2)`` is the third ``[[analysis]]`` or ``[[study.analysis]]``).
    """

    def __init__(self, text: str, path: Path) -> None:
        self._lines = text.splitlines()
        self._path = path

    def _start(self, scope: tuple[str, int] | None) -> int:
        if scope is None:
            return 0
        name, occurrence = scope
        header = re.compile(rf"^\s*\[\[(study\.)?{re.escape(name)}\]\]")
        seen = -1
        for number, line in enumerate(self._lines):
            if header.match(line):
                seen += 1
                if seen == occurrence:
                    return number
        return 0

    def where(self, key: str, scope: tuple[str, int] | None = None) -> str:
        pattern = re.compile(rf"^\s*{re.escape(key)}\s*=")
        start = self._start(scope)
        for number in range(start, len(self._lines)):
            if pattern.match(self._lines[number]):
                return f"{self._path.name} line {number + 1}"
        return self._path.name

    def fail(self, key: str, message: str, scope: tuple[str, int] | None = None) -> InputError:
        return InputError(f"{self.where(key, scope)}: {message}")


def _type_name(kind: type) -> str:
    return {str: "a string", int: "an integer", float: "a number", bool: "true or false",
            list: "a list", dict: "a table"}[kind]


def _check_table(table: Mapping, allowed: Mapping[str, type], where: str,
                 lines: _Lines, scope: tuple[str, int] | None = None) -> None:
    for key, value in table.items():
        if key not in allowed:
            raise lines.fail(key, f"unknown key '{key}' in {where}; allowed: "
                                  f"{', '.join(sorted(allowed))}", scope)
        kind = allowed[key]
        ok = (isinstance(value, (int, float)) and not isinstance(value, bool)
              if kind is float else
              isinstance(value, int) and not isinstance(value, bool) if kind is int else
              isinstance(value, kind))
        if not ok:
            raise lines.fail(key, f"'{key}' in {where} must be {_type_name(kind)}; got "
                                  f"{value!r}", scope)
        if kind is float and not math.isfinite(float(value)):
            raise lines.fail(key, f"'{key}' in {where} must be finite", scope)


def _strings(value: list, key: str, where: str, lines: _Lines,
             scope: tuple[str, int] | None = None) -> list[str]:
    if not all(isinstance(v, str) for v in value):
        raise lines.fail(key, f"'{key}' in {where} must be a list of strings; got {value!r}",
                         scope)
    return list(value)


def _analysis(entry: Any, where: str, lines: _Lines, has_data: bool,
              scope: tuple[str, int]) -> Analysis:
    if not isinstance(entry, dict):
        raise InputError(f"{lines.where('analysis')}: each [[analysis]] must be a table")
    kind = entry.get("kind")
    if kind not in _ANALYSES:
        raise lines.fail("kind", f"analysis kind {kind!r} in {where} is not known; choose one "
                                 f"of {', '.join(_ANALYSES)}", scope)
    _check_table(entry, {**_COMMON, **_ANALYSES[kind]}, f"{where} ({kind})", lines, scope)
    if kind not in DATA_FREE and not has_data and not (kind == "discrete" and "counts" in entry):
        raise lines.fail("kind", f"analysis '{kind}' in {where} needs a [data] table", scope)
    options = {k: v for k, v in entry.items() if k not in _COMMON}
    for key in ("direct", "prior"):
        if key in options:
            options[key] = _strings(options[key], key, where, lines, scope)
    label = entry.get("label", kind)
    return Analysis(kind, options, label, entry.get("seed"))


def _study(table: Mapping, where: str, lines: _Lines, base: Path, index: int,
           first_analysis: int) -> Study:
    _check_table(table, _STUDY, where, lines)
    data = table.get("data")
    if data is not None:
        _check_table(data, _DATA, f"{where}.data", lines)
        for key in ("outcome", "treatments", "instruments"):
            if key not in data:
                raise lines.fail("data", f"{where}.data lacks '{key}'")
        for key in ("treatments", "instruments", "controls"):
            if key in data:
                data = {**data, key: _strings(data[key], key, f"{where}.data", lines)}
        if "path" not in data:
            raise lines.fail("data", f"{where}.data lacks 'path' (the data file)")
        resolved = (base / data["path"]).resolve()
        if not resolved.is_file():
            raise lines.fail("path", f"data file '{data['path']}' in {where}.data does not "
                                     f"exist (looked for {resolved}); fix the path")
        data = {**data, "path": str(resolved)}
    inference = dict(table.get("inference", {}))
    _check_table(inference, _INFERENCE, f"{where}.inference", lines)
    if "se" in inference and inference["se"] not in SE_CHOICES:
        raise lines.fail("se", f"se '{inference['se']}' in {where}.inference is not one of "
                               f"{', '.join(SE_CHOICES)}")
    entries = table.get("analysis", [])
    if not entries:
        raise lines.fail("analysis", f"{where} has no [[analysis]] entries; add at least one")
    analyses = tuple(_analysis(e, f"{where}.analysis {j + 1}", lines, data is not None,
                               ("analysis", first_analysis + j))
                     for j, e in enumerate(entries))
    for a in analyses:
        for key in ("polytope", "prior_file", "counts"):
            if key in a.options:
                resolved = (base / a.options[key]).resolve()
                if not resolved.is_file():
                    raise lines.fail(key, f"file '{a.options[key]}' ({key}) does not exist; "
                                          "fix the path")
                a.options[key] = str(resolved)
    name = table.get("name", f"study{index + 1}")
    if not re.fullmatch(r"[A-Za-z0-9_.-]+", name):
        raise lines.fail("name", f"study name {name!r} may hold only letters, digits, '_', "
                                 "'.' and '-' (it names output files)")
    return Study(name, table.get("description", ""), data, inference, analyses)


def parse_recipe(path: str | Path) -> Recipe:
    """Read and validate a recipe; every problem is an :class:`InputError` naming key and line."""
    import tomllib

    p = Path(path)
    if not p.is_file():
        raise InputError(f"recipe '{path}' does not exist; check the path")
    text = p.read_text(encoding="utf-8")
    try:
        content = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{p.name}: not valid TOML ({exc}); fix the syntax") from exc
    lines = _Lines(text, p)
    _check_table(content, _TOP, "the recipe", lines)
    formats = tuple(_strings(content.get("formats", ["png"]), "formats", "the recipe", lines))
    for f in formats:
        if f not in FORMATS:
            raise lines.fail("formats", f"figure format '{f}' is not one of "
                                        f"{', '.join(FORMATS)}")
    if "study" in content:
        single = {k for k in ("data", "inference", "analysis", "name", "description")
                  if k in content}
        if single:
            raise lines.fail(sorted(single)[0], "a recipe with [[study]] tables cannot also "
                                                "have top-level data/analysis keys")
        tables = content["study"]
    else:
        tables = [{k: content[k] for k in _STUDY if k in content}]
    studies, first = [], 0
    for i, t in enumerate(tables):
        studies.append(_study(t, f"[[study]] {i + 1}", lines, p.parent, i, first))
        first += len(t.get("analysis", [])) if isinstance(t, dict) else 0
    studies = tuple(studies)
    names = [s.name for s in studies]
    if len(set(names)) != len(names):
        raise lines.fail("name", "study names must be distinct (they name output files)")
    return Recipe(p, content.get("title", p.stem), content.get("seed"), formats, studies)


# ----------------------------------------------------------------------------- running
def _spec(data: Mapping):
    from sensiv.data import Spec

    return Spec(outcome=data["outcome"], treatments=tuple(data["treatments"]),
                instruments=tuple(data["instruments"]),
                controls=tuple(data.get("controls", ())), cluster=data.get("cluster"),
                weight=data.get("weight"), constant=data.get("constant", True))


def _run_one(analysis: Analysis, study: Study, source, frame, seed: int | None) -> Any:
    from sensiv.sensitivity import bounds
    from sensiv.estimation import iv

    o = analysis.options
    inf = study.inference
    common = {"se": inf.get("se"), "confidence_level": inf.get("level", 0.95),
              "small": inf.get("small", False)}
    if analysis.kind == "fit":
        return iv.fit(source, se=common["se"], confidence_level=common["confidence_level"],
                      small=common["small"])
    if analysis.kind == "sweep":
        return bounds.sweep(source, direct=o.get("direct"), polytope=o.get("polytope"),
                            threshold=o.get("threshold", 0.0),
                            points=o.get("points", bounds.DEFAULT_POINTS),
                            focus=o.get("focus"), **common)
    if analysis.kind == "prior":
        from sensiv.sensitivity import prior

        return prior.prior_analysis(source, priors=o.get("prior"),
                                    prior_file=o.get("prior_file"), focus=o.get("focus"),
                                    draws=o.get("draws", prior.MC_DRAWS),
                                    seed=0 if seed is None else seed, **common)
    if analysis.kind == "corrbound":
        from sensiv.partial_id.correlation import correlation_bounds

        return correlation_bounds(source, max_ratio=o.get("max_ratio", 1.0),
                                  endogeneity=o.get("endogeneity", "unknown"),
                                  threshold=o.get("threshold", 0.0), reps=o.get("reps", 999),
                                  points=o.get("points", 51), seed=seed,
                                  confidence_level=common["confidence_level"],
                                  progress=False)
    if analysis.kind == "discrete":
        from sensiv.partial_id.discrete import discrete_bounds
        from sensiv.partial_id.discrete_data import read_counts, tabulate

        if "counts" in o:
            roles = study.data or {}
            table = read_counts(o["counts"], outcome=roles.get("outcome", "y"),
                                treatment=(roles.get("treatments") or ["x"])[0],
                                instrument=(roles.get("instruments") or ["z"])[0])
        else:
            table = tabulate(source)
        return discrete_bounds(table, o.get("budget", 0.1), monotone=o.get("monotone", False),
                               defier_budget=o.get("defier_budget", 0.0),
                               threshold=o.get("threshold", 0.0), reps=o.get("reps", 999),
                               points=o.get("points", 51), seed=seed,
                               confidence_level=common["confidence_level"], progress=False)
    if analysis.kind == "calibrate":
        from sensiv.sensitivity.calibrate import calibrate

        groups = o.get("groups", {})
        for name, columns in groups.items():
            if not (isinstance(columns, list) and all(isinstance(c, str) for c in columns)):
                raise InputError(f"groups.{name} of study '{study.name}' must be a list of "
                                 "column names")
        data = frame if o.get("no_first_stage_group") else source
        return calibrate(data, _spec(study.data), groups=groups or None,
                         no_first_stage_group=o.get("no_first_stage_group"), **common)
    if analysis.kind == "published":
        from sensiv.sensitivity.published import published_analysis

        numbers = {k: o[k] for k in ("estimate", "se", "first_stage", "first_stage_se",
                                     "first_stage_f", "reduced_form", "reduced_form_se", "n")
                   if k in o}
        missing = [k for k in ("estimate", "se", "first_stage", "direct") if k not in o]
        if missing:
            raise InputError(f"published analysis of study '{study.name}' lacks "
                             f"{', '.join(missing)}; add them to its [[analysis]] table")
        return published_analysis(**numbers, direct=o["direct"], prior=o.get("prior"),
                                  threshold=o.get("threshold", 0.0),
                                  points=o.get("points", bounds.DEFAULT_POINTS),
                                  confidence_level=common["confidence_level"])
    raise InputError(f"analysis kind '{analysis.kind}' cannot run yet in this version")


def run_recipe(recipe: Recipe) -> RunResult:
    """Run every analysis of every study; the data file of a study is read once."""
    from sensiv.data import from_frame, read_table

    runs = []
    for study in recipe.studies:
        source = frame = None
        if study.data is not None:
            frame = read_table(study.data["path"])
            source = from_frame(frame, _spec(study.data))
        for index, analysis in enumerate(study.analyses, start=1):
            seed = analysis.seed if analysis.seed is not None else recipe.seed
            runs.append(AnalysisRun(study.name, index, analysis,
                                    _run_one(analysis, study, source, frame, seed)))
    return RunResult(recipe, tuple(runs))
