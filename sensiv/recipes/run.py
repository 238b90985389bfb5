"""Running a recipe: each study's data file is read once, and each analysis runs through its
registry entry."""

from __future__ import annotations

import json
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from sensiv.analyses.kind import RunContext
from sensiv.analyses.registry import entry
from sensiv.core.errors import InputError
from sensiv.core.results import with_labels
from sensiv.data import Spec, from_file, from_frame, read_table, with_engine
from sensiv.data.datasets import is_dataset
from sensiv.recipes.parse import KeyLines, parse_recipe, recipe_text
from sensiv.recipes.schema import AnalysisRun, Recipe, RunResult, Study


def spec_of(roles: Mapping[str, Any]) -> Spec:
    """The :class:`~sensiv.data.Spec` of a study's ``[data]`` table."""
    return Spec(outcome=roles["outcome"], treatments=tuple(roles["treatments"]),
                instruments=tuple(roles["instruments"]),
                controls=tuple(roles.get("controls", ())), cluster=roles.get("cluster"),
                weight=roles.get("weight"), constant=roles.get("constant", True),
                where=roles.get("where"), categorical=tuple(roles.get("categorical", ())),
                absorb=tuple(roles.get("absorb", ())),
                **({"absorb_tolerance": roles["absorb_tolerance"]}
                   if "absorb_tolerance" in roles else {}))


def _context(study: Study, source, frame, spec, seed: int | None) -> RunContext:
    inf = study.inference
    common = {"se": inf.get("se"), "confidence_level": inf.get("level", 0.95),
              "small": inf.get("small", False)}
    return RunContext(source=source, frame=frame, spec=spec, roles=study.data, common=common,
                      seed=seed, study=study.name)


def run_recipe(recipe: Recipe | str | Path) -> RunResult:
    """Run every analysis of every study of ``recipe`` (a parsed recipe or the path of a TOML
    file); the data file of a study is read once."""
    if not isinstance(recipe, Recipe):
        recipe = parse_recipe(recipe)
    runs, first = [], 0
    for study in recipe.studies:
        source = frame = spec = None
        if study.data is not None:
            name = Path(study.data["path"]).name
            try:
                spec = spec_of(study.data)
                engine = study.data.get("engine", "numpy")
                if engine != "numpy" or is_dataset(study.data["path"]):
                    source = with_engine(from_file(study.data["path"], spec), engine,
                                         study.data.get("scheduler"))
                else:
                    frame = read_table(study.data["path"])
                    source = from_frame(frame, spec, description=f"'{name}'")
            except InputError as exc:
                raise InputError(f"{recipe.path.name}: data file '{name}' of study "
                                 f"\"{study.name}\": {exc}") from exc
        for index, analysis in enumerate(study.analyses, start=1):
            seed = analysis.seed if analysis.seed is not None else recipe.seed
            kind = entry(analysis.kind)
            if kind.run is None:
                raise InputError(f"analysis kind '{analysis.kind}' cannot run yet in this "
                                 "version")
            context = _context(study, source, frame, spec, seed)
            try:
                result = kind.run(context, analysis.options)
            except InputError as exc:
                raise in_recipe_terms(exc, recipe, study, index, first + index - 1) from exc
            if study.labels:  # its text, HTML and figures then read the study's labels
                result = with_labels(result, study.labels)
            runs.append(AnalysisRun(study.name, index, analysis, result))
        first += len(study.analyses)
    return RunResult(recipe, tuple(runs))


_FLAG = re.compile(r"(?<![\w-])--([a-z][a-z0-9-]*)")


def in_recipe_terms(exc: InputError, recipe: Recipe, study: Study, index: int,
                    position: int) -> InputError:
    """An error of an analysis rephrased for the recipe: its file and line, the study, the
    analysis and the key (``points = 1000000000000 in [[study.analysis]] 2 of study "main"``),
    with every command-line flag of the message written as its recipe key."""
    analysis = study.analyses[index - 1]
    message = str(exc)
    flag = _FLAG.search(message)
    key = flag.group(1).replace("-", "_") if flag else None
    message = _FLAG.sub(lambda m: m.group(1).replace("-", "_"), message)
    where = f'[[study.analysis]] {index} of study "{study.name}" ({analysis.kind})'
    lines = KeyLines(recipe_text(recipe.path), recipe.path)
    head = f"{recipe.path.name}: in {where}"
    if key is not None and key in analysis.options:
        value = json.dumps(analysis.options[key], ensure_ascii=False)
        head = (f"{lines.where(key, ('analysis', position))}: {key} = {value} in {where}")
    elif key == "seed" and (analysis.seed is not None or recipe.seed is not None):
        value = analysis.seed if analysis.seed is not None else recipe.seed
        scope = ("analysis", position) if analysis.seed is not None else None
        head = f"{lines.where('seed', scope)}: seed = {value} for {where}"
    elif key is not None and key in study.inference:
        value = json.dumps(study.inference[key])
        head = (f"{lines.where(key)}: {key} = {value} in [study.inference] of study "
                f"\"{study.name}\", used by {where}")
    return InputError(f"{head}: {message}")
